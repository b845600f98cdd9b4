"""Per-run metrics: running maxima of the invariant and trajectory errors, cost, drift law.

The maxima are kept as a value (`Accumulator.state()` / `from_state()`), so that a checkpoint
holds them and a resumed run ends with the same numbers as an uninterrupted one.

Scales: energy errors are relative to |E0|; the momentum errors p_phi and p_psi are relative to
|L0|, the norm of the start's angular momentum, since p_phi = L.e_z and p_psi = L.e3 are
projections of L and either may start at zero; Kovalevskaya's integral relative to its start
value K0. A start with E0 = 0 (or L0 = 0, K0 = 0) falls back to a scale built from the start's
kinetic and potential energy magnitudes (or to 1 kg m^2/s, or to (|w|^2 + M g |chi| / I3)^2), so
that no metric is a division by zero.

Only invariants of the body are metrics: energy (in the gravity gradient, the Jacobi integral of
the orbit frame) always, p_phi in uniform gravity (gravity is along e_z), p_psi
only for a Lagrange top (I1 = I2, centre of mass on axis 3; for any other body L.e3 changes as
the physics says, and its "error" would be a number that means nothing), Kovalevskaya's integral
only for a Kovalevskaya top. A metric that is no invariant of the body is null.
"""

from __future__ import annotations

import math

import numpy as np

from topdrift.benchmarks.run.sampling import S_ENERGY, S_KOV, S_NORM, S_P_PHI, S_P_PSI

# Running maxima, in this order, in the accumulator's array.
MAX_NAMES = (
    "energy_rel_max",
    "p_phi_rel_max",
    "p_psi_rel_max",
    "norm_abs_max",
    "axis_angle_max",
    "theta_abs_max",
    "phi_abs_max",
    "psi_abs_max",
    "kovalevskaya_rel_max",
)
_EXACT_NAMES = ("axis_angle_max", "theta_abs_max", "phi_abs_max", "psi_abs_max")

# The whole attitude against the exact solution: kept beside the array above, not in it, so that
# a checkpoint's maxima keep their layout (a checkpoint written before this metric existed still
# resumes); a resumed run takes it again from the stored samples (Accumulator.attitude_from_rows).
ATTITUDE_NAME = "attitude_angle_max"

METRIC_NAMES = MAX_NAMES + (
    ATTITUDE_NAME,
    "steps",
    "rhs_evals",
    "force_evals",
    "rejected",
    "wall_s",
    "cpu_s",
    "ns_per_step",
    "energy_drift_exponent",
    "energy_drift_window",
    "energy_drift_unknown",
    "fastest_period",
    "slowest_period",
    "t_fail",
)

# The drift law is fitted over the last DRIFT_DECADES decades of sample times, on
# DRIFT_POINTS log-spaced times, so that each decade weighs the same (uniform samples would
# otherwise put nine tenths of the weight in the last decade). The window starts no earlier than
# DRIFT_SKIP_PERIODS of the slowest motion the error can follow (benchmarks/cases/timescales.py):
# a bounded error reaches its plateau only after about one such period, and before that every
# error grows, whatever the method. A window shorter than DRIFT_MIN_DECADES, or holding fewer
# than DRIFT_MIN_SAMPLES distinct samples, gives no law ("unknown", with the reason): so a law
# needs a horizon of at least 20 slowest periods.
DRIFT_DECADES = 2.0
DRIFT_MIN_DECADES = 1.0
DRIFT_SKIP_PERIODS = 2.0
DRIFT_POINTS = 24
DRIFT_MIN_POINTS = 3
DRIFT_MIN_SAMPLES = 8


def wrapped(d: np.ndarray) -> np.ndarray:
    """An angle difference folded into [-pi, pi), rounded to ulp(pi) (d + pi is formed): for
    plotting and other coarse uses; errors come from angle_difference."""
    return np.mod(d + math.pi, 2.0 * math.pi) - math.pi


# 2 pi as fl(2 pi) + its rounding error (the digits of models/double_double.TWO_PI, common
# practice): the turn difference is taken off in two parts, so that no rounding is added.
_TURN = 6.283185307179586
_TURN_LO = 2.4492935982947064e-16


def angle_difference(a, b, dturns=None) -> np.ndarray:
    """a - b for angles folded into [-pi, pi], plus 2 pi dturns (the difference of their whole
    turns, an integer array) where the turns are known; where they are not (dturns None), the
    whole turns that bring the difference into [-pi, pi].

    Never a difference of large unfolded angles, and no rounding to ulp(pi) as forming d + pi
    would make: a - b is split exactly into s + e (Knuth's two-sum, common practice), and the
    turns come off s first (exact when they nearly cancel it, Sterbenz's lemma), then off the
    low part."""
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    s = a - b
    bb = s - a
    e = (a - (s - bb)) + (-b - bb)
    if dturns is None:
        k = -np.round(s / _TURN)
    else:
        k = np.asarray(dturns, dtype=np.float64)
    return ((s + k * _TURN) + e) + k * _TURN_LO


def axis_angle(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Angle (rad) between rows of two (n, 3) arrays of directions; atan2 of the cross and dot
    products stays accurate for small angles, where acos of the dot product loses half the
    digits (common practice)."""
    cross = np.linalg.norm(np.cross(a, b), axis=1)
    dot = np.einsum("ij,ij->i", a, b)
    return np.arctan2(cross, dot)


def euler_quaternions(euler: np.ndarray) -> np.ndarray:
    """(n, 4) quaternions (scalar first, body to space) of (n, 3) rows (phi, theta, psi), z-x-z:
    the formula of models/quaternion.from_euler, row-wise. Folded angles give q or -q, the same
    rotation."""
    phi, theta, psi = euler[:, 0], euler[:, 1], euler[:, 2]
    ch, sh = np.cos(0.5 * theta), np.sin(0.5 * theta)
    sp, sm = 0.5 * (phi + psi), 0.5 * (phi - psi)
    return np.column_stack((ch * np.cos(sp), sh * np.cos(sm), sh * np.sin(sm), ch * np.sin(sp)))


def attitude_angle(q: np.ndarray, q_ref: np.ndarray) -> np.ndarray:
    """Rotation angle (rad) of R_ref^T R between rows of two (n, 4) quaternions (scalar first):
    2 atan2(|vec(d)|, |scalar(d)|) with d = conj(q_ref) q. The atan2 form keeps small angles to
    full relative accuracy, where 2 acos of the scalar part loses half the digits (common
    practice); the absolute values make q and -q the same attitude; and a quaternion whose norm
    drifted scales both parts alike, so the drift does not enter the angle."""
    a0, av = q_ref[:, 0], q_ref[:, 1:]
    b0, bv = q[:, 0], q[:, 1:]
    scalar = a0 * b0 + np.einsum("ij,ij->i", av, bv)
    vec = a0[:, None] * bv - b0[:, None] * av - np.cross(av, bv)
    return 2.0 * np.arctan2(np.linalg.norm(vec, axis=1), np.abs(scalar))


class Accumulator:
    """Reference values from the start sample and the running maxima since."""

    def __init__(
        self,
        e0: float,
        e_scale: float,
        p_phi0: float,
        p_psi0: float,
        l_scale: float,
        has_exact: bool,
        has_norm: bool,
        has_p_psi: bool = True,
        kov0: float = math.nan,
        kov_scale: float = math.nan,
        has_p_phi: bool = True,
        has_energy: bool = True,
    ):
        self.e0 = float(e0)
        self.e_scale = float(e_scale)
        self.p_phi0 = float(p_phi0)
        self.p_psi0 = float(p_psi0)
        self.l_scale = float(l_scale)
        self.has_exact = bool(has_exact)
        self.has_norm = bool(has_norm)
        self.has_p_psi = bool(has_p_psi)  # p_psi is an invariant of the body (a Lagrange top)
        # p_phi = L.e_z is one in uniform gravity only (the gravity gradient's frame turns)
        self.has_p_phi = bool(has_p_phi)
        # energy is one unless a plug-in field's torque is no gradient (damping, a control law)
        self.has_energy = bool(has_energy)
        self.kov0 = float(kov0)  # NaN unless the body is a Kovalevskaya top
        self.kov_scale = float(kov_scale)
        self.maxima = np.zeros(len(MAX_NAMES))
        self.attitude_max = 0.0  # not in state(): see ATTITUDE_NAME

    @property
    def has_kovalevskaya(self) -> bool:
        return math.isfinite(self.kov0)

    @classmethod
    def at_start(
        cls,
        scal0: np.ndarray,
        mom0: np.ndarray,
        params: np.ndarray,
        has_exact: bool,
        has_norm: bool,
        has_p_psi: bool = True,
        has_kovalevskaya: bool = False,
        has_p_phi: bool | None = None,
        has_energy: bool = True,
    ) -> Accumulator:
        """scal0: the start sample's scalar row; mom0: its body angular momentum. has_p_psi,
        has_kovalevskaya, has_p_phi (None: from the field code, uniform gravity keeps it) and
        has_energy say which of those are invariants of the body in its field."""
        from topdrift.models.body import P_FIELD, P_INV1, P_INV2, P_INV3, P_MGX, P_MGY, P_MGZ
        from topdrift.models.field_spec import FIELD_UNIFORM

        e0 = float(scal0[S_ENERGY])
        l0 = float(np.linalg.norm(mom0))
        e_scale = abs(e0)
        if e_scale == 0.0:
            kin = 0.5 * float(
                mom0[0] ** 2 * params[P_INV1]
                + mom0[1] ** 2 * params[P_INV2]
                + mom0[2] ** 2 * params[P_INV3]
            )
            e_scale = kin + math.hypot(params[P_MGX], params[P_MGY], params[P_MGZ])
            if e_scale == 0.0:
                e_scale = 1.0
        kov0 = kov_scale = math.nan
        if has_kovalevskaya:
            kov0 = float(scal0[S_KOV])
            kov_scale = abs(kov0)
            if not kov_scale > 0.0:
                w2 = float(np.sum((mom0 * params[[P_INV1, P_INV2, P_INV3]]) ** 2))
                c = math.hypot(params[P_MGX], params[P_MGY]) * params[P_INV3]
                kov_scale = (w2 + c) ** 2 or 1.0
        return cls(
            e0,
            e_scale,
            scal0[S_P_PHI],
            scal0[S_P_PSI],
            l0 if l0 > 0.0 else 1.0,
            has_exact,
            has_norm,
            has_p_psi,
            kov0,
            kov_scale,
            has_p_phi=bool(params[P_FIELD] == FIELD_UNIFORM) if has_p_phi is None else has_p_phi,
            has_energy=has_energy,
        )

    def update(
        self,
        scal: np.ndarray,
        euler: np.ndarray,
        axis: np.ndarray,
        exact_euler: np.ndarray | None,
        exact_axis: np.ndarray | None,
        turns: np.ndarray | None = None,
        exact_turns: np.ndarray | None = None,
        quat: np.ndarray | None = None,
    ) -> None:
        """Fold a batch of samples (rows) into the maxima. turns and exact_turns: the whole
        turns of phi and psi (n x 2) of the samples and of the exact solution; where either is
        not known (a body-form run, whose angles come from its quaternion modulo 2 pi) the
        phase errors are taken modulo 2 pi. quat, the computed quaternions, adds the attitude
        error (against the quaternions of exact_euler, whose folding does not change them)."""
        if scal.shape[0] == 0:
            return
        m = self.maxima
        m[0] = max(m[0], float(np.max(np.abs(scal[:, S_ENERGY] - self.e0))) / self.e_scale)
        m[1] = max(m[1], float(np.max(np.abs(scal[:, S_P_PHI] - self.p_phi0))) / self.l_scale)
        m[2] = max(m[2], float(np.max(np.abs(scal[:, S_P_PSI] - self.p_psi0))) / self.l_scale)
        m[3] = max(m[3], float(np.max(np.abs(scal[:, S_NORM] - 1.0))))
        if self.has_kovalevskaya:
            m[8] = max(m[8], float(np.max(np.abs(scal[:, S_KOV] - self.kov0))) / self.kov_scale)
        if self.has_exact and exact_euler is not None and exact_axis is not None:
            m[4] = max(m[4], float(np.max(axis_angle(axis, exact_axis))))
            m[5] = max(m[5], float(np.max(np.abs(euler[:, 1] - exact_euler[:, 1]))))
            dk = None if turns is None or exact_turns is None else turns - exact_turns
            for col, at, slot in ((0, 0, 6), (2, 1, 7)):
                d = angle_difference(
                    euler[:, col], exact_euler[:, col], None if dk is None else dk[:, at]
                )
                m[slot] = max(m[slot], float(np.max(np.abs(d))))
            if quat is not None:
                self.attitude_from_rows(quat, exact_euler)

    def attitude_from_rows(self, quat: np.ndarray, exact_euler: np.ndarray) -> None:
        """Fold the attitude error of rows of computed quaternions against the exact angles into
        its maximum (the runner's batches, or a resumed run's stored samples)."""
        if quat.shape[0]:
            worst = float(np.max(attitude_angle(quat, euler_quaternions(exact_euler))))
            self.attitude_max = max(self.attitude_max, worst)

    def energy_rel(self, energy: np.ndarray) -> np.ndarray:
        return np.abs(energy - self.e0) / self.e_scale

    def state(self) -> dict:
        return {
            "e0": self.e0,
            "e_scale": self.e_scale,
            "p_phi0": self.p_phi0,
            "p_psi0": self.p_psi0,
            "l_scale": self.l_scale,
            "has_exact": int(self.has_exact),
            "has_norm": int(self.has_norm),
            "has_p_psi": int(self.has_p_psi),
            "kov0": self.kov0,
            "kov_scale": self.kov_scale,
            "maxima": self.maxima.copy(),
            # said only where p_phi is no invariant (another field than uniform gravity), so
            # that a heavy top's checkpoint keeps the layout, and the bits, it always had
            **({} if self.has_p_phi else {"has_p_phi": 0}),
            **({} if self.has_energy else {"has_energy": 0}),
        }

    @classmethod
    def from_state(cls, s: dict) -> Accumulator:
        """Back from state(); raises ValueError naming an entry that no run could have written
        (a scale that is not positive, a value or maximum that is not finite, a flag not 0/1)."""
        for key in ("e0", "p_phi0", "p_psi0"):
            if not math.isfinite(s[key]):
                raise ValueError(f"{key} is not finite")
        for key in ("e_scale", "l_scale"):
            if not (math.isfinite(s[key]) and s[key] > 0.0):
                raise ValueError(f"{key} is {s[key]!r}, not a positive scale")
        for key in ("has_exact", "has_norm"):
            if s[key] not in (0, 1):
                raise ValueError(f"{key} is {s[key]!r}, not 0 or 1")
        maxima = np.asarray(s["maxima"], dtype=np.float64)
        if maxima.shape != (len(MAX_NAMES),) or not np.all(np.isfinite(maxima) & (maxima >= 0)):
            raise ValueError(f"maxima are not {len(MAX_NAMES)} finite non-negative numbers")
        acc = cls(
            s["e0"],
            s["e_scale"],
            s["p_phi0"],
            s["p_psi0"],
            s["l_scale"],
            bool(s["has_exact"]),
            bool(s["has_norm"]),
            bool(s["has_p_psi"]),
            float(s["kov0"]),
            float(s["kov_scale"]),
            # a checkpoint from before fields is of uniform gravity, where p_phi is an invariant
            has_p_phi=bool(s.get("has_p_phi", 1)),
            has_energy=bool(s.get("has_energy", 1)),
        )
        acc.maxima[:] = maxima
        return acc

    def reference(self) -> tuple:
        """What the start sample fixes (everything but the maxima), to compare bit for bit."""
        return (
            self.e0,
            self.e_scale,
            self.p_phi0,
            self.p_psi0,
            self.l_scale,
            self.has_exact,
            self.has_norm,
        )

    def maxima_dict(self) -> dict:
        out = {}
        for name, v in zip(MAX_NAMES, self.maxima, strict=True):
            if name in _EXACT_NAMES and not self.has_exact:
                out[name] = None
            elif name == "energy_rel_max" and not self.has_energy:
                out[name] = None  # the field's torque is no gradient: no energy is kept
            elif name == "norm_abs_max" and not self.has_norm:
                out[name] = None  # the Euler form carries no quaternion to drift
            elif name == "p_phi_rel_max" and not self.has_p_phi:
                out[name] = None  # L.e_z is no invariant in this field
            elif name == "p_psi_rel_max" and not self.has_p_psi:
                out[name] = None  # L.e3 is no invariant of this body
            elif name == "kovalevskaya_rel_max" and not self.has_kovalevskaya:
                out[name] = None
            else:
                out[name] = float(v)
        out[ATTITUDE_NAME] = float(self.attitude_max) if self.has_exact else None
        return out


def drift_fit(
    t: np.ndarray, e_rel: np.ndarray, slowest: float | None = None, slowest_what: str = ""
) -> tuple[float | None, list[float] | None, str | None]:
    """(exponent, [t_lo, t_end], reason): the slope of log(running max of e_rel) against log(t)
    over the window, or None and the reason when the window cannot carry a law.

    About 0 for a bounded error, 0.5 for a random walk (round-off), 1 for linear drift. The window
    is the last DRIFT_DECADES decades of the samples, starting no earlier than the first sample
    after t = 0 and no earlier than DRIFT_SKIP_PERIODS slowest periods (`slowest`, s; None or
    inf when unknown: not used); it must span DRIFT_MIN_DECADES and hold DRIFT_MIN_SAMPLES
    distinct samples. The fit is least squares on DRIFT_POINTS log-spaced times in the window,
    each taking the running maximum at the last sample not after it. A running maximum that is
    zero throughout the window (the invariant kept to the bit) counts as bounded: 0. Zeros at the
    start of the window are dropped (their log is undefined)."""
    t = np.asarray(t, dtype=np.float64)
    e = np.asarray(e_rel, dtype=np.float64)
    run = np.maximum.accumulate(e) if e.size else e
    keep = t > 0.0
    t, run = t[keep], run[keep]
    if t.size < DRIFT_MIN_POINTS:
        return None, None, f"{t.size} sample(s) after t = 0: too few for a fit"
    t_end = float(t[-1])
    t_lo = max(float(t[0]), t_end * 10.0 ** (-DRIFT_DECADES))
    skip = 0.0
    if slowest is not None and slowest > 0.0:
        if not math.isfinite(slowest):
            return None, None, f"the {slowest_what or 'slowest motion'} never repeats"
        skip = DRIFT_SKIP_PERIODS * slowest
    if t_end < max(t_lo, skip) * 10.0**DRIFT_MIN_DECADES:
        if skip > t_lo:
            what = slowest_what or "slowest motion"
            need = DRIFT_SKIP_PERIODS * 10.0**DRIFT_MIN_DECADES
            return (
                None,
                None,
                f"the horizon {t_end:.3g} s holds {t_end / slowest:.3g} periods of the "
                f"{what} ({slowest:.3g} s); a growth law needs at least {need:g}",
            )
        return (
            None,
            None,
            f"the samples after t = 0 span {math.log10(t_end / t_lo):.2g} decades; a growth law "
            f"needs {DRIFT_MIN_DECADES:g}",
        )
    t_lo = max(t_lo, skip)
    targets = np.geomspace(t_lo, t_end, DRIFT_POINTS)
    idx = np.unique(np.clip(np.searchsorted(t, targets, side="right") - 1, 0, t.size - 1))
    idx = idx[t[idx] >= t_lo * (1.0 - 1e-12)]  # the sample at or before t_lo may lie before it
    window = [t_lo, t_end]
    if idx.size < DRIFT_MIN_SAMPLES:
        return (
            None,
            None,
            f"{idx.size} distinct samples between {t_lo:.3g} s and {t_end:.3g} s: too coarse a "
            f"sampling for a fit (at least {DRIFT_MIN_SAMPLES})",
        )
    tw, mw = t[idx], run[idx]
    if not np.any(mw > 0.0):
        return 0.0, window, None
    pos = mw > 0.0
    tw, mw = tw[pos], mw[pos]
    if tw.size < DRIFT_MIN_POINTS or tw[0] == tw[-1]:
        return None, None, "the error is zero in all but a few samples of the window"
    slope = np.polyfit(np.log(tw), np.log(mw), 1)[0]
    return float(slope), window, None


def drift_exponent(t: np.ndarray, e_rel: np.ndarray, slowest: float | None = None) -> float | None:
    """The exponent of drift_fit alone (None when no law can be fitted)."""
    return drift_fit(t, e_rel, slowest)[0]


def _finite_or_none(v) -> float | None:
    return float(v) if v is not None and math.isfinite(v) else None


def finish(
    acc: Accumulator,
    counters: np.ndarray,
    wall_s: float,
    cpu_s: float,
    t: np.ndarray,
    energy: np.ndarray,
    t_fail: float | None,
    scales=None,
) -> dict:
    """The metrics of a run from its accumulator, counters, timing and energy samples; scales
    (cases/timescales.Timescales, or None) bounds the drift fit's window and is recorded."""
    from topdrift.integrators import C_EVALS, C_FORCE_EVALS, C_REJECTED, C_STEPS

    steps = int(counters[C_STEPS])
    out = acc.maxima_dict()
    out["steps"] = steps
    out["rhs_evals"] = int(counters[C_EVALS])
    out["force_evals"] = int(counters[C_FORCE_EVALS])
    out["rejected"] = int(counters[C_REJECTED])
    out["wall_s"] = float(wall_s)
    out["cpu_s"] = float(cpu_s)
    out["ns_per_step"] = float(wall_s * 1e9 / steps) if steps > 0 else None
    slowest = None if scales is None else scales.slowest
    what = "" if scales is None else scales.slowest_what
    if acc.has_energy:
        exponent, window, reason = drift_fit(t, acc.energy_rel(energy), slowest, what)
    else:
        exponent, window = None, None
        reason = "the field's torque is no gradient: energy is no invariant"
    out["energy_drift_exponent"] = exponent
    out["energy_drift_window"] = window
    out["energy_drift_unknown"] = reason
    out["fastest_period"] = None if scales is None else _finite_or_none(scales.fastest)
    out["slowest_period"] = None if scales is None else _finite_or_none(scales.slowest)
    out["t_fail"] = None if t_fail is None or math.isnan(t_fail) else float(t_fail)
    return out
