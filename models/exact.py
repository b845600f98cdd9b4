"""The exact solution of the symmetric heavy (Lagrange) top, as a reference for the benchmarks.

Physics (Goldstein, Classical Mechanics, sec. 5.7; Landau and Lifshitz, Mechanics, sec. 35):
u = cos(theta) obeys udot^2 = f(u) = (alpha - beta u)(1 - u^2) - (b - a u)^2 with
alpha = 2 (H - p_psi^2 / (2 I3)) / I1, beta = 2 M g l / I1, a = p_psi / I1, b = p_phi / I1.
For beta > 0, f has roots u1 <= u2 <= 1 <= u3 and
u(t) = u1 + (u2 - u1) sn^2(tau | m),  tau = lambda (t - t1),  m = (u2 - u1) / (u3 - u1),
lambda = sqrt(beta (u3 - u1)) / 2, nutation period 2 K(m) / lambda. The rates split into
partial fractions,
    phidot = (b - a u) / (1 - u^2) = (b - a) / (2 (1 - u)) + (b + a) / (2 (1 + u))
    psidot = (p_psi - h3) / I3 - a - (b - a) / (2 (1 - u)) + (b + a) / (2 (1 + u)),
and 1 -/+ u = (1 -/+ u1)(1 - n sn^2) turns each term into an incomplete elliptic integral of the
third kind Pi(n; am(tau) | m) = F + n/3 sn^3 R_J(cn^2, dn^2, 1, 1 - n sn^2) for |tau| <= K
(Carlson, Numerical Algorithms 10 (1995); DLMF 19.25.14), with F = tau exactly. Over a whole
nutation period am advances by pi and Pi by 2 Pi(n | m), so tau is reduced to r in [-K, K] plus
whole periods: cost and accuracy do not depend on t.

Bits at any horizon. The phase tau = lambda t + tau0, the whole periods, the per-period advances
of phi and psi and the coefficients of r are double-doubles from a multiprecision computation on
the exact start (exact_constants.py), and t itself may be given as a double-double; whole periods
and whole turns are exact integers, and phi and psi come out folded to (-pi, pi] with their turn
counts. Only the within-period terms (the R_J parts, theta) are evaluated in double, at a point
within ulp(K) of the exact r, with a first-order correction for the remainder. The axis, the
quaternion and the momentum are computed from the folded angles.

The set-up runs in named stages: the start (exact_start.py), the turning points (exact_roots.py)
in double to classify the motion and decide the refusals, then the constants in multiprecision
(exact_constants.py): phase, per-period advances, within-period shape.

A centre of mass below the pivot (M g l < 0) is solved by the reflection theta -> pi - theta,
psi -> -psi, which maps it onto beta > 0 with a -> -a; M g l = 0 (the free symmetric top) is the
same formula with m = 0 and lambda = sqrt(alpha + a^2) / 2 = |L| / (2 I1).

Passing through the vertical (u2 = 1 or u1 = -1 exactly: p_phi = +/- p_psi) the Euler angles
jump: the smooth solution runs through theta = 0 with a sign change, and R(phi, -theta, psi) =
R(phi + pi, theta, psi - pi); phi gains +pi and psi -pi at each pass (counted exactly; at the
instant of the pass the angles are those just after it), so the rotation stays continuous. A
sleeping top (axis on the vertical, no transverse momentum) keeps phi at its start and turns psi
at the spin rate.

A gyrostat with its rotor on the figure axis (momentum h3 relative to the body, p_psi = I3 w3 +
h3) has H = p_theta^2 / (2 I1) + A^2 / (2 I1 s^2) + (p_psi - h3)^2 / (2 I3) + M g l c: the rotor
enters only the term in p_psi alone, so u(t) and phi(t) are the top's with the total p_psi (in a,
b, alpha) and psidot loses the constant h3 / I3 (docs/exact-solution.md). The sleeping margin is
p_psi^2 - 4 I1 M g l with that total, the rotor's share included.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.special import elliprc, elliprj

from . import double_double as dd
from .body import P_H3, P_I1, P_I3, P_MGZ, RigidBody
from .exact_arith import DOUBLE
from .exact_constants import (
    BASE_DIGITS,
    PeriodicMotion,
    SteadyMotion,
    extra_digits,
    periodic_motion,
    steady_motion,
)
from .exact_kernels import (
    K_COUNT0,
    angles_kernel,
    landen_ratios,
    pack_periodic,
    pack_steady,
    phase_kernel,
    steady_kernel,
)
from .exact_roots import EPS, Roots, solve_roots
from .exact_start import ExactInput, ExactUnavailable, Start, start_of
from .forms import FORM_BODY, FORM_EULER, form_code

__all__ = [
    "MOTIONS",
    "ExactSample",
    "ExactUnavailable",
    "FoldedAngles",
    "LagrangeTop",
]

# Below this nutation amplitude (in cos theta) a motion is labelled uniform precession; the
# formulas themselves need no threshold and still carry the tiny nutation.
UNIFORM_GAP = 1e-13
# Relative size of phidot at a turning point, against a (u2 - u1), below which the trace has
# cusps: smaller loops or dents than this cannot be told apart in double precision.
CUSP_RTOL = 1e-12
# Near the separatrix (1 - m -> 0) the distance u3 - u2 can be a difference of nearly equal
# energies, known only to about 1e-16 / (1 - m) relative in the double-precision stage; the
# start is refused when the estimated relative error of u3 - u2 exceeds this (a start that
# close to the separatrix is as ill-conditioned for the integrators as for the reference).
SEPARATRIX_RTOL = 1e-10
# Closer than this (in 1 - |u|) a motion is labelled as passing through the vertical.
POLE_GAP = 1e-14
# The largest time (s) the accuracy statement covers: a double t above it is known only to
# ulp(t) = 0.125 s, and the phase's third words no longer carry 1e-32 (topdrift exact refuses
# later times).
MAX_TIME = 1e15

MOTIONS = (
    "uniform-precession",
    "unidirectional",
    "cusps",
    "loops",
    "sleeping",
    "sleeping-unstable",
    "hanging",
    "through-vertical",
    "through-down",
    "through-both",
    "free-precession",
    "free-spin",
    "rest",
)


@dataclass(frozen=True)
class FoldedAngles:
    """Euler angles at the sample times: theta in [0, pi]; phi and psi folded to [-pi, pi] (rad)
    with their whole turns (int64), unfolded angle = folded + 2 pi turns."""

    theta: np.ndarray
    phi: np.ndarray
    phi_turns: np.ndarray
    psi: np.ndarray
    psi_turns: np.ndarray

    def axis(self) -> np.ndarray:
        """The figure axis R e3 in space, (sin phi sin theta, -cos phi sin theta, cos theta)."""
        st = np.sin(self.theta)
        return np.column_stack((np.sin(self.phi) * st, -np.cos(self.phi) * st, np.cos(self.theta)))

    def unfolded(self) -> np.ndarray:
        """(phi, theta, psi) with phi and psi unfolded, rounded to double: shape (n, 3)."""
        return np.column_stack(
            (
                dd.unfold(self.phi, self.phi_turns),
                self.theta,
                dd.unfold(self.psi, self.psi_turns),
            )
        )


@dataclass(frozen=True)
class ExactSample:
    """The exact state at the sample times t (s): folded angles, the figure axis R e3 in space,
    the attitude quaternion (scalar first, body to space, from the folded angles: its sign
    follows them) and the angular momentum about the pivot in body axes (kg m^2/s)."""

    t: np.ndarray
    angles: FoldedAngles
    axis: np.ndarray
    quaternion: np.ndarray
    momentum: np.ndarray


@dataclass(frozen=True)
class _Rates:
    """What the momentum needs besides the angles (per sample, reflected problem)."""

    mperp: np.ndarray
    chi: np.ndarray


class LagrangeTop:
    """Exact motion of a symmetric heavy top from a given start (t = 0).

    Build with LagrangeTop.from_state(body, form, y); form is FORM_EULER / FORM_BODY or their
    names. Angles in rad, times in s. Attributes:

    roots                 (u1, u2, u3) of f(u), u = cos(theta); u3 >= 1 for M g l > 0, u3 <= -1
                          for M g l < 0, inf for the free top (f is then a quadratic)
    theta_min, theta_max  the nutation range
    nutation_period       2 K(m) / lambda; for uniform precession and a sleeping top the
                          small-oscillation limit; inf where there is none
    precession_per_period, spin_per_period   phi and psi gained over one nutation period
                          (including the +/- pi of each pass through the vertical)
    mean_precession_rate, mean_spin_rate     the same divided by the period
                          (period and the per-period and mean values are correctly rounded)
    motion                one of MOTIONS
    sleeping_margin       p_psi^2 - 4 I1 M g l: > 0 means a top spinning with its axis straight
                          up would be stable
    Evaluation: folded(t) (angles with turn counts), sample(t) (angles, axis, quaternion,
    momentum), euler(t) and axis(t) (arrays); t an array of doubles, taken as exact, with an
    optional second word t_lo (t + t_lo a double-double).
    A sleeping or hanging top (axis exactly on the vertical, no transverse momentum) keeps phi
    at the start's value and turns psi at (p_psi - h3) / I3: only phi + psi (or phi - psi) is
    defined.
    Refusals raise ExactUnavailable with the reason.
    """

    def __init__(self):
        raise TypeError("use LagrangeTop.from_state(body, form, y)")

    # ----------------------------------------------------------------- construction
    @classmethod
    def from_state(cls, body: RigidBody, form, y, *, weight_by_norm: bool = False) -> LagrangeTop:
        if not isinstance(body, RigidBody):
            raise ExactUnavailable(f"body: expected a RigidBody, got {type(body).__name__}")
        if not body.lagrange_top:
            raise ExactUnavailable(
                "body: the exact solution needs a symmetric top (I1 == I2) with its centre of "
                "mass and any rotor on the figure axis"
            )
        if isinstance(form, str):
            try:
                form = form_code(form)
            except ValueError as exc:
                raise ExactUnavailable(str(exc)) from None
        if form not in (FORM_EULER, FORM_BODY):
            raise ExactUnavailable(f"form: expected FORM_EULER or FORM_BODY, got {form!r}")
        y = np.asarray(y, dtype=np.float64).ravel()
        size = 6 if form == FORM_EULER else 7
        if y.shape[0] != size:
            raise ExactUnavailable(f"y: expected {size} values for this form, got {y.shape[0]}")
        if not np.all(np.isfinite(y)):
            raise ExactUnavailable("y: the start has non-finite values")
        p = body.params()
        inp = ExactInput(
            form=int(form),
            y=tuple(float(v) for v in y),
            i1=float(p[P_I1]),
            i3=float(p[P_I3]),
            mgl=float(p[P_MGZ]),
            weight_by_norm=bool(weight_by_norm),
            h3=float(p[P_H3]),
        )
        self = object.__new__(cls)
        self._build(inp)
        return self

    def _build(self, inp: ExactInput) -> None:
        self.i1, self.i3, self.mgl = inp.i1, inp.i3, inp.mgl
        start = start_of(inp, DOUBLE)
        self.p_phi, self.p_psi = start.p_phi, start.p_psi
        self.phi0, self.psi0 = start.phi0, start.psi0
        self.sleeping_margin = self.p_psi**2 - 4.0 * self.i1 * self.mgl
        self._flip = self.mgl < 0.0
        st = start.reflected() if self._flip else start
        beta = 2.0 * abs(self.mgl) / self.i1
        self._periodic: PeriodicMotion | None = None
        self._steady: SteadyMotion | None = None
        if st.k0 == 0.0 and (st.pole != 0 or beta == 0.0):
            self._build_steady(inp, st, beta, start.theta0)
            return
        roots = solve_roots(st, beta, DOUBLE)
        _refuse_near_separatrix(roots, beta)
        self.motion = _classify(st, roots, beta, self._flip)
        digits = BASE_DIGITS + extra_digits(roots.om2, roots.op1, roots.d32)
        pm = periodic_motion(inp, self._flip, digits)
        self._periodic = pm
        n = pm.numbers
        self.roots = n.roots
        self.theta_min, self.theta_max = n.theta_min, n.theta_max
        self.nutation_period = n.period
        self.precession_per_period = n.precession_per_period
        self.spin_per_period = n.spin_per_period
        self.mean_precession_rate = n.mean_precession_rate
        self.mean_spin_rate = n.mean_spin_rate
        self._consts = pack_periodic(pm, self._flip)
        self._landen = landen_ratios(pm.phase.m, pm.phase.mc)
        # Pole passes already counted at the start: the count is taken relative to them.
        self._consts[K_COUNT0] = float(self._phase(np.zeros(1), np.zeros(1))[4][0])

    def _build_steady(self, inp: ExactInput, st: Start, beta: float, theta0: float) -> None:
        """No transverse momentum with no torque: the axis stays where it is."""
        a = st.a
        inf = math.inf
        u = 1.0 if st.pole == 1 else (-1.0 if st.pole == -1 else st.u0)
        roots = (u, u, inf)
        if beta == 0.0:
            self.motion = "free-spin" if a != 0.0 else "rest"
        elif st.pole == 1:
            disc = a * a - 2.0 * beta  # I1^2 a^2 - 2 I1^2 beta = the sleeping margin
            self.motion = "sleeping" if disc > 0.0 else "sleeping-unstable"
            roots = (1.0, 1.0, a * a / beta - 1.0) if disc > 0.0 else (a * a / beta - 1.0, 1.0, 1.0)
        else:
            self.motion = "hanging"
        sm = steady_motion(inp, self._flip, st.pole, beta == 0.0)
        self._steady = sm
        self._consts = pack_steady(sm)
        self._theta0 = theta0
        if self._flip:
            roots = (-roots[1], -roots[0], -roots[2])
        self.roots = roots
        self.theta_min = self.theta_max = theta0
        self.nutation_period = sm.period
        finite = sm.period < inf
        self.precession_per_period = 0.0 if finite else inf
        self.spin_per_period = sm.spin_per_period
        self.mean_precession_rate = 0.0
        self.mean_spin_rate = sm.mean_spin_rate

    # ----------------------------------------------------------------- evaluation
    def folded(self, t, t_lo=None) -> FoldedAngles:
        """theta, phi and psi folded to [-pi, pi] with their whole turns, at the times t (s).

        t is an array (or a number) of doubles taken as exact; t_lo, if given, is a second word
        of the same shape: the time is then the double-double t + t_lo."""
        return self._evaluate(*_times(t, t_lo), want_rates=False)[0]

    def sample(self, t, t_lo=None) -> ExactSample:
        """The exact state at the times t: folded angles, figure axis, quaternion, momentum."""
        th, tl = _times(t, t_lo)
        ang, rates = self._evaluate(th, tl, want_rates=True)
        phi, theta, psi = ang.phi, ang.theta, ang.psi
        axis = ang.axis()
        ch, sh = np.cos(0.5 * theta), np.sin(0.5 * theta)
        sp, sm = 0.5 * (phi + psi), 0.5 * (phi - psi)
        quat = np.column_stack((ch * np.cos(sp), sh * np.cos(sm), sh * np.sin(sm), ch * np.sin(sp)))
        if rates is None:
            m12 = np.zeros((th.shape[0], 2))
        else:
            turn = rates.chi - psi
            m12 = np.column_stack((rates.mperp * np.cos(turn), rates.mperp * np.sin(turn)))
        mom = np.column_stack((m12, np.full(th.shape[0], self.p_psi)))
        return ExactSample(t=th + tl, angles=ang, axis=axis, quaternion=quat, momentum=mom)

    def euler(self, t) -> np.ndarray:
        """(phi, theta, psi) at the times t (s), shape (n, 3); phi and psi unfolded (each rounded
        once to double: prefer folded() for long horizons)."""
        return self.folded(t).unfolded()

    def axis(self, t) -> np.ndarray:
        """The figure axis R e3 in space at the times t, shape (n, 3)."""
        return self.folded(t).axis()

    def _evaluate(self, th, tl, want_rates: bool):
        n = th.shape[0]
        theta, phi, psi = np.empty(n), np.empty(n), np.empty(n)
        phi_turns, psi_turns = np.empty(n, np.int64), np.empty(n, np.int64)
        if self._steady is not None:
            steady_kernel(self._consts, th, tl, phi, phi_turns, psi, psi_turns)
            theta[:] = self._theta0
            return FoldedAngles(theta, phi, phi_turns, psi, psi_turns), None
        j1, j2, rh, rl, count, sn, cn, dn, delta = self._phase(th, tl)
        term1, term2 = _third_kind_terms(self._periodic.shape, sn, cn, dn)
        mperp, chi = (np.empty(n), np.empty(n)) if want_rates else (np.empty(0), np.empty(0))
        angles_kernel(
            self._consts, j1, j2, rh, rl, count, sn, cn, dn, delta, term1, term2,
            theta, phi, phi_turns, psi, psi_turns, mperp, chi,
        )  # fmt: skip
        angles = FoldedAngles(theta, phi, phi_turns, psi, psi_turns)
        return angles, (_Rates(mperp=mperp, chi=chi) if want_rates else None)

    def _phase(self, th, tl):
        n = th.shape[0]
        j1, j2, rh, rl = np.empty(n), np.empty(n), np.empty(n), np.empty(n)
        count = np.empty(n, np.int64)
        sn, cn, dn, delta = np.empty(n), np.empty(n), np.empty(n), np.empty(n)
        phase_kernel(self._consts, self._landen, th, tl, j1, j2, rh, rl, count, sn, cn, dn, delta)
        return j1, j2, rh, rl, count, sn, cn, dn, delta

    def summary(self) -> dict:
        def clean(v):
            v = float(v)
            return v if math.isfinite(v) else None

        return {
            "motion": self.motion,
            "theta_min": clean(self.theta_min),
            "theta_max": clean(self.theta_max),
            "nutation_period": clean(self.nutation_period),
            "precession_per_period": clean(self.precession_per_period),
            "spin_per_period": clean(self.spin_per_period),
            "mean_precession_rate": clean(self.mean_precession_rate),
            "mean_spin_rate": clean(self.mean_spin_rate),
            "roots": [clean(r) for r in self.roots],
            "sleeping_margin": clean(self.sleeping_margin),
            "p_phi": clean(self.p_phi),
            "p_psi": clean(self.p_psi),
        }


# --------------------------------------------------------------------- set-up stages
def _refuse_near_separatrix(roots: Roots, beta: float) -> None:
    if roots.gap > 0.0 and beta > 0.0:
        d32 = roots.d32
        rel = roots.d32_err / d32 if d32 > 0.0 else math.inf
        if rel > SEPARATRIX_RTOL:
            mc = d32 / (d32 + roots.gap)
            where = "on" if d32 == 0.0 else f"within 1 - m = {mc:.1e} of"
            raise ExactUnavailable(
                f"start: {where} the separatrix (u2 = u3): the axis creeps towards the "
                "vertical, the nutation period diverges, and u3 - u2 is known only to "
                f"{min(rel, 1.0):.0e} relative in double precision"
            )


def _classify(st: Start, roots: Roots, beta: float, flip: bool) -> str:
    if beta == 0.0:
        return "free-precession"
    gap = roots.gap
    up = gap > 0.0 and roots.om2 <= POLE_GAP
    down = gap > 0.0 and roots.op1 <= POLE_GAP
    if flip:
        up, down = down, up
    if up and down:
        return "through-both"
    if up:
        return "through-vertical"
    if down:
        return "through-down"
    if gap <= UNIFORM_GAP:
        return "uniform-precession"
    a = st.a
    r1 = st.au0 - a * roots.x1  # (b - a u) at the two turning points, proportional to phidot
    r2 = st.au0 - a * roots.x2
    # A is resolved only to about eps |p_psi| in the start itself.
    tol = max(CUSP_RTOL * abs(a) * gap, 8.0 * EPS * (abs(a) + abs(st.bma)))
    if min(abs(r1), abs(r2)) <= tol:
        return "cusps"
    if (r1 > 0.0) == (r2 > 0.0):
        return "unidirectional"
    return "loops"


# --------------------------------------------------------------------- per-sample evaluation
def _times(t, t_lo):
    th = np.ascontiguousarray(np.atleast_1d(np.asarray(t, dtype=np.float64)).ravel())
    if t_lo is None:
        return th, np.zeros_like(th)
    tl = np.ascontiguousarray(np.atleast_1d(np.asarray(t_lo, dtype=np.float64)).ravel())
    if tl.shape != th.shape:
        raise ValueError(f"t_lo: expected shape {th.shape} like t, got {tl.shape}")
    # renormalise (two-sum), so that |t_lo| <= ulp(t) / 2 as the kernels assume
    hi = th + tl
    back = hi - th
    return hi, (th - (hi - back)) + (tl - back)


def _third_kind_terms(sh, sn, cn, dn):
    """The R_J parts of phi and psi in the reduced period (scipy's Carlson forms, vectorised):
    sn^3 c1 R_J(cn^2, dn^2, 1, 1 - n1 sn^2) and its twin for n2, or for n2 < -1 the partner
    form of DLMF 19.7.8 (the axis passing close to the lower vertical: Carlson's form cancels
    to 1/sqrt(-n) there), with n' = m / n2 (both terms odd in sn)."""
    sn2, cn2, dn2 = sn * sn, cn * cn, dn * dn
    sn3 = sn * sn2
    zero = np.zeros_like(sn)
    term1 = zero
    if sh.bma != 0.0:
        term1 = sn3 * sh.c1 * elliprj(cn2, dn2, 1.0, (sh.om2 + sh.gap * cn2) / sh.om1)
    if sh.bpa == 0.0:
        return term1, zero
    opu_ratio = (sh.op1 + sh.gap * sn2) / sh.op1
    if sh.alt2:
        q = 1.0 - sh.nn * sn2
        return term1, sh.half2 * (
            -sh.nn / 3.0 * sn3 * elliprj(cn2, dn2, 1.0, q) + sn * elliprc(cn2 * dn2, opu_ratio * q)
        )
    return term1, sn3 * sh.c2 * elliprj(cn2, dn2, 1.0, opu_ratio)
