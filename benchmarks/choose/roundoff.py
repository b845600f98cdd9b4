"""Round-off at the limit: how the energy error grows with the number of steps when the step is
small enough that truncation is below round-off.

An ensemble of perturbed starts is advanced together (integrators/ensemble.py); at log-spaced
step counts the relative energy error of every member is taken, and its root mean square over
the ensemble is fitted against the step count on log-log axes. Round-off that behaves like
independent random errors gives an exponent of 1/2 (Brouwer's law: D. Brouwer, "On the
accumulation of errors in numerical integration", Astron. J. 46 (1937) 149; E. Hairer,
R. I. McLachlan and A. Razakarivony, "Achieving Brouwer's law with implicit Runge-Kutta
methods", BIT 48 (2008) 231); systematic rounding gives up to 1 (linear drift).

The phase: at the same step counts, every member's attitude is compared with the exact solution
of its own start (a Lagrange top; none otherwise), the rotation angle of R_exact^T R, and its RMS
over the ensemble is fitted the same way. An energy error that walks like sqrt(N) makes the
frequencies walk with it, and the angles, their integrals, then stray like N^(3/2) (Brouwer's
second law, same paper). That law is about round-off only: the truncation error of the phase
grows like N h^(p+1) and must be far below it over the fitted range, which takes a step much
smaller than the energy alone needs (docs/ensembles-and-roundoff.md says how small).
"""

from __future__ import annotations

import math

import numpy as np

from topdrift.benchmarks.cases.numbers import non_negative, positive, whole
from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.metrics import attitude_angle, euler_quaternions
from topdrift.benchmarks.run.perturbed import perturbed_starts
from topdrift.benchmarks.run.runner import MAX_STEPS
from topdrift.benchmarks.stopping import Interrupted
from topdrift.integrators import get as get_method
from topdrift.integrators.ensemble import EnsembleStepper
from topdrift.models import form_code
from topdrift.models.body import P_INV1, P_INV2, P_INV3, P_MGX, P_MGY, P_MGZ
from topdrift.models.invariants import INV_ENERGY, N_INVARIANTS, invariants

FIT_DECADES = 2.0  # the exponent is fitted over the last two decades of step counts
# Limits, checked before anything is allocated. Every start's energy is evaluated in 40-digit
# arithmetic at every point (about 1.5 ms each here, 40 points): 10 000 starts are about ten
# minutes of that alone. Steps: the runner's limit for one run, over all members together.
MAX_STARTS = 10_000
MIN_STEPS = 1000
MAX_MEMBER_STEPS = MAX_STEPS
# Member-steps per call of the ensemble kernel: a compiled kernel does not hear a signal until
# it returns, and this many take well under a second for every method here. Pieces fall at
# whole steps, fixed by the counts (never by the clock), and the states do not depend on them.
CHUNK_MEMBER_STEPS = 1 << 19


def check_size(starts, steps, label_starts="--starts", label_steps="--steps") -> tuple[int, int]:
    """The study's size, refused over the limits above with one line."""
    starts = whole(label_starts, starts, 2, MAX_STARTS, "a whole number of starts")
    steps = whole(label_steps, steps, MIN_STEPS, MAX_STEPS, "a whole number of steps")
    if starts * steps > MAX_MEMBER_STEPS:
        raise UserError(
            f"{label_starts} {starts} x {label_steps} {steps:g} is {starts * steps:.3g} "
            f"member-steps, more than the {MAX_MEMBER_STEPS:.0e} a study may take"
        )
    return starts, steps


def _energies(form: int, Y: np.ndarray, p: np.ndarray) -> np.ndarray:
    out = np.empty(N_INVARIANTS)
    e = np.empty(Y.shape[0])
    for j in range(Y.shape[0]):
        invariants(form, Y[j], p, out)
        e[j] = out[INV_ENERGY]
    return e


def energy_precise(form: int, y: np.ndarray, low: np.ndarray | None, p: np.ndarray):
    """The energy of the state y + low in 40-digit arithmetic (mpmath), so that the round-off
    of evaluating it (about 1e-16 relative in float64) does not hide the round-off of the
    integration. Body form: the quadratic form m.I^-1 m / 2 + M g chi.Gamma(q) with Gamma the
    unnormalised quadratic of q, which the Euler-Poisson equations keep for any |q| and which
    Gauss-Legendre methods keep exactly up to round-off."""
    import mpmath as mp

    with mp.workdps(40):
        v = [
            mp.mpf(float(a)) + (mp.mpf(float(b)) if low is not None else 0)
            for a, b in zip(y, low if low is not None else y, strict=True)
        ]
        P = [mp.mpf(float(x)) for x in p]
        if form == 0:
            th, pphi, pth, ppsi = v[1], v[3], v[4], v[5]
            s, c = mp.sin(th), mp.cos(th)
            a = pphi - ppsi * c
            e = (pth**2 * P[P_INV1] + a * a * P[P_INV1] / (s * s) + ppsi**2 * P[P_INV3]) / 2
            return e + P[P_MGZ] * c
        q0, q1, q2, q3, m1, m2, m3 = v
        g1 = 2 * (q1 * q3 - q0 * q2)
        g2 = 2 * (q2 * q3 + q0 * q1)
        g3 = q0 * q0 - q1 * q1 - q2 * q2 + q3 * q3
        t = (m1 * m1 * P[P_INV1] + m2 * m2 * P[P_INV2] + m3 * m3 * P[P_INV3]) / 2
        return t + P[P_MGX] * g1 + P[P_MGY] * g2 + P[P_MGZ] * g3


def phase_references(case, form: str, Y0: np.ndarray) -> tuple[list | None, str | None]:
    """The exact solution of every member's own start, or (None, why) when the body has none
    (not a Lagrange top, or a start the exact solution refuses).

    In the body form the reference is the motion the equations give the start as written: their
    vertical Gamma(q) is the unnormalised quadratic of q, so a quaternion whose |q|^2 is 1 only
    to rounding (1 + ~1e-16) moves as the unit top with the weight M g l |q|^2. Against the
    unit top instead, each member's precession rate is off by that ~1e-16 relative, a phase
    error linear in N (measured on the benchmark's top, gauss4-kahan at h = 1e-6: 2.4e-15 rad
    RMS at 1e7 steps against the unit top, 4.0e-16 against this one)."""
    from topdrift.models.exact import LagrangeTop

    if not case.body.lagrange_top:
        return None, f"{case.name} is no Lagrange top: no exact solution to measure the phase by"
    tops = []
    for j in range(Y0.shape[0]):
        try:
            tops.append(LagrangeTop.from_state(case.body, form, Y0[j], weight_by_norm=True))
        except ValueError as exc:
            return None, f"member {j}: no exact solution ({exc})"
    return tops, None


def rounded_inverses(body) -> list[str]:
    """The moments of inertia whose inverse the kernels hold rounded (1/I not a double). The
    kernels then integrate a top whose frequencies differ from the exact solution's by about
    1e-16 relative, and the phase error gains a linear term of that size times the angle
    turned, whatever the method; moments that are powers of two keep the two models one."""
    from fractions import Fraction

    from topdrift.models.body import P_I1, P_I3, P_INV1, P_INV3

    p = body.params()
    out = []
    for name, i, inv in (("I1", P_I1, P_INV1), ("I3", P_I3, P_INV3)):
        if Fraction(float(p[i])) * Fraction(float(p[inv])) != 1:
            out.append(name)
    return out


def member_quaternions(form: int, Y: np.ndarray, low: np.ndarray | None) -> np.ndarray:
    """(starts, 4) attitude quaternions of the members' states (low parts added, rounded once);
    from the Euler angles in the Euler form."""
    Y = Y if low is None else Y + low
    if form == 0:
        return euler_quaternions(Y[:, :3])
    return Y[:, :4].copy()


def space_error_vectors(q: np.ndarray, qe: np.ndarray) -> np.ndarray:
    """(starts, 3) the small rotation from each exact attitude qe to the member's q, as a vector
    in space axes: twice the vector part of q conj(qe), sign-fixed by its scalar part (the
    rotation angle times the axis, to first order). In space axes the members' vectors can be
    averaged: what they share (the truncation error of nearby starts, the exact solution's own
    smooth error) is their mean, their round-off is what is left."""
    a0, a1, a2, a3 = q.T
    b0, b1, b2, b3 = qe[:, 0], -qe[:, 1], -qe[:, 2], -qe[:, 3]
    w = a0 * b0 - a1 * b1 - a2 * b2 - a3 * b3
    v = np.column_stack(
        (
            a0 * b1 + a1 * b0 + a2 * b3 - a3 * b2,
            a0 * b2 - a1 * b3 + a2 * b0 + a3 * b1,
            a0 * b3 + a1 * b2 - a2 * b1 + a3 * b0,
        )
    )
    return 2.0 * np.where(w < 0.0, -1.0, 1.0)[:, None] * v


def spread_about_mean(vectors: np.ndarray) -> float:
    """RMS distance of the members' error vectors from their mean, with K - 1 in the divisor
    (unbiased for K independent members)."""
    d = vectors - vectors.mean(axis=0)
    return math.sqrt(float(np.sum(d * d)) / (vectors.shape[0] - 1))


def exact_quaternions(tops: list, k: int, step: float) -> np.ndarray:
    """(starts, 4) exact attitudes after k steps, at the time k * step taken exactly (as the
    double-double of the product: t = k h rounded would move the phase by ulp(t) times the spin
    rate, more than the round-off of the first decades)."""
    t_hi = float(k) * step
    t_lo = _product_error(float(k), step, t_hi)
    th, tl = np.array([t_hi]), np.array([t_lo])
    return np.vstack([top.sample(th, tl).quaternion for top in tops])


def _product_error(a: float, b: float, p: float) -> float:
    """a * b - p, exact in rationals and rounded once: the low word of the double-double a * b
    (once per point, so the cost of rationals does not matter)."""
    from fractions import Fraction

    return float(Fraction(a) * Fraction(b) - Fraction(p))


def fit_exponent(n: np.ndarray, rms: np.ndarray, decades: float = FIT_DECADES):
    """Least-squares slope of log rms against log n over the last `decades` of n."""
    keep = (n >= n[-1] / 10.0**decades) & (rms > 0)
    if keep.sum() < 3:
        return None, None
    x, y = np.log10(n[keep]), np.log10(rms[keep])
    slope, _ = np.polyfit(x, y, 1)
    return float(slope), (int(n[keep][0]), int(n[keep][-1]))


def roundoff_study(
    case,
    method,
    step: float,
    *,
    starts: int = 16,
    steps: float = 1e7,
    points: int = 40,
    spread: float = 1e-6,
    form: str | None = None,
    seed: int = 20261201,
) -> dict:
    # A method name, or a Method object (the round-off benchmark's unregistered contrast).
    m = get_method(method) if isinstance(method, str) else method
    method = m.name
    if not case.body.uniform_gravity:
        # energy_precise evaluates the uniform-gravity energy in 40 digits, not a field's
        raise UserError(
            f"{case.name}: the round-off study measures the heavy top's energy in 40 digits; "
            f"it has no {case.body.field.kind} field (run the case with `topdrift run`)"
        )
    step = positive("--step", step)
    spread = non_negative("--spread", spread)
    starts, steps = check_size(starts, steps)
    form = form or m.default_form(case.body)
    m.check(case.body, form, {"step": step})
    code = form_code(form)
    p = case.body.params()
    try:
        Y0 = perturbed_starts(case, form, starts, spread, seed)
        ens = EnsembleStepper(m, code, p, 0.0, Y0, step)
        e0 = [energy_precise(code, Y0[j], None, p) for j in range(starts)]
        tops, phase_unknown = phase_references(case, form, Y0)
    except Interrupted as exc:
        raise exc.saying("while preparing the starts, before any step; nothing written") from None
    n_at = np.unique(np.round(np.geomspace(100, steps, points)).astype(np.int64))
    rms: list[float] = []
    # The signed mean beside the RMS: a bias shared by the members (a systematic rounding) shows
    # as |mean| close to the RMS, a random walk as |mean| about RMS / sqrt(starts).
    mean: list[float] = []
    phase: list[float] = []
    phase_spread: list[float] = []
    piece = max(1, CHUNK_MEMBER_STEPS // starts)
    try:
        for k in n_at:
            _take_point(case, ens, int(k), step, piece, code, p, e0, rms, mean)
            if tops is not None:
                q = member_quaternions(code, ens.y, ens.low_parts())
                qe = exact_quaternions(tops, int(k), step)
                err = attitude_angle(q, qe)
                phase.append(math.sqrt(float(np.mean(err * err))))
                phase_spread.append(spread_about_mean(space_error_vectors(q, qe)))
    except Interrupted as exc:
        raise exc.saying(
            f"at step {ens.n} of {steps} ({len(rms)} of {len(n_at)} points taken); nothing written"
        ) from None
    rms = np.array(rms)
    exponent, fit_range = fit_exponent(n_at.astype(float), rms)
    phase_exponent = phase_range = spread_exponent = spread_range = None
    if tops is not None:
        phase_exponent, phase_range = fit_exponent(n_at.astype(float), np.array(phase))
        spread_exponent, spread_range = fit_exponent(n_at.astype(float), np.array(phase_spread))
        if phase_exponent is None:
            phase_unknown = "too few points above zero for a fit"
    rounded = rounded_inverses(case.body) if tops is not None else []
    phase_note = None
    if rounded:
        phase_note = (
            f"1/{' and 1/'.join(rounded)} of {case.name} are rounded in the kernels: the phase "
            "error gains a linear term of about 1e-16 times the angle turned from that alone "
            "(moments of inertia that are powers of two avoid it)"
        )
    return {
        "case": case.name,
        "method": method,
        "form": form,
        "step": step,
        "starts": starts,
        "steps": steps,
        "spread": spread,
        "exponent": exponent,
        "energy_evaluation": "40-digit mpmath of the state (plus the Kahan terms not yet added)",
        "fit_range": fit_range,
        "n": n_at.tolist(),
        "rms_energy_error": rms.tolist(),
        "mean_energy_error": mean,
        "phase_exponent": phase_exponent,
        "phase_fit_range": phase_range,
        "phase_error": "attitude angle of each member from its own start's exact solution (rad)",
        "rms_phase_error": phase if tops is not None else None,
        "phase_spread_exponent": spread_exponent,
        "phase_spread_fit_range": spread_range,
        "phase_spread": (
            "RMS distance of the members' attitude errors (space-axes rotation vectors) from "
            "their mean (rad): their round-off, without what nearby starts share (truncation)"
        ),
        "rms_phase_spread": phase_spread if tops is not None else None,
        "phase_unknown": phase_unknown,
        "phase_note": phase_note,
    }


def _take_point(case, ens, k: int, step: float, piece: int, code, p, e0, rms, mean) -> None:
    """Advance the ensemble to step k (in pieces of `piece` steps) and take the RMS and the mean
    of the members' relative energy errors there."""
    starts = len(e0)
    while ens.n < k:
        status = ens.advance_to(float(min(k, ens.n + piece)) * step)
        if np.any(status != 0):
            bad = int(np.argmax(status != 0))
            raise UserError(
                f"{case.name}: member {bad} stopped (status {int(status[bad])}) "
                f"before step {k}; choose a smaller step"
            )
    low = ens.low_parts()
    err = np.array(
        [
            float(
                (energy_precise(code, ens.y[j], None if low is None else low[j], p) - e0[j])
                / abs(e0[j])
            )
            for j in range(starts)
        ]
    )
    rms.append(math.sqrt(float(np.mean(err * err))))
    mean.append(float(np.mean(err)))


def plot_roundoff(results: list[dict], path) -> None:
    import matplotlib

    from topdrift.benchmarks.choose.figure_files import save_png

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    with_phase = any(r.get("rms_phase_error") for r in results)
    fig, axes = plt.subplots(
        1, 2 if with_phase else 1, figsize=(12.0 if with_phase else 7.0, 4.8), layout="constrained"
    )
    ax = axes[0] if with_phase else axes
    for r in results:
        n = np.array(r["n"], dtype=float)
        rms = np.array(r["rms_energy_error"])
        label = (
            f"{r['method']} ({r['form']}): exponent {r['exponent']:.2f}"
            if r["exponent"] is not None
            else r["method"]
        )
        ax.loglog(n, rms, "o-", ms=3, label=label)
    n = np.array(results[0]["n"], dtype=float)
    ref = np.array(results[0]["rms_energy_error"])
    mid = len(n) // 2
    for slope, style in ((0.5, ":"), (1.0, "--")):
        ax.loglog(
            n, ref[mid] * (n / n[mid]) ** slope, "k" + style, lw=0.8, label=f"slope {slope:g}"
        )
    r0 = results[0]
    ax.set_xlabel("steps N")
    ax.set_ylabel("RMS relative energy error over the ensemble")
    ax.set_title(f"{r0['case']}: round-off growth, h = {r0['step']:g} s, {r0['starts']} starts")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8, loc="upper left")
    if with_phase:
        _phase_panel(axes[1], results)
    try:
        save_png(fig, path, dpi=120)
    finally:
        plt.close(fig)


def _phase_panel(ax, results: list[dict]) -> None:
    """The RMS attitude error against N, with Brouwer's slope 3/2 and a linear slope beside."""
    drawn = None
    for r in results:
        phase = r.get("rms_phase_error")
        if not phase:
            continue
        n = np.array(r["n"], dtype=float)
        e = np.array(phase)
        label = r["method"]
        if r.get("phase_exponent") is not None:
            label = f"{r['method']} ({r['form']}): exponent {r['phase_exponent']:.2f}"
        (line,) = ax.loglog(n, e, "o-", ms=3, label=label)
        spread = r.get("rms_phase_spread")
        if spread:
            label = f"{r['method']}: spread about the mean"
            if r.get("phase_spread_exponent") is not None:
                label += f", exponent {r['phase_spread_exponent']:.2f}"
            ax.loglog(n, spread, "s--", ms=3, color=line.get_color(), label=label)
        drawn = drawn if drawn is not None else (n, np.array(spread) if spread else e)
    n, e = drawn
    mid = len(n) // 2
    for slope, style in ((1.5, ":"), (1.0, "--")):
        ax.loglog(n, e[mid] * (n / n[mid]) ** slope, "k" + style, lw=0.8, label=f"slope {slope:g}")
    ax.set_xlabel("steps N")
    ax.set_ylabel("attitude error from each start's exact solution (rad)")
    ax.set_title("phase: Brouwer's law for an angle is slope 3/2")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8, loc="upper left")
