"""The exact Lagrange-top solution against independent references.

- mpmath at 30 digits (mp.dps = 30): roots of the cubic f(u) with mpmath.polyroots, and every
  time and angle by tanh-sinh quadrature of dt = du / sqrt(f(u)), phidot dt and psidot dt over
  u = u1 + (u2 - u1) sin^2(chi), which makes the integrands smooth (Goldstein, Classical
  Mechanics, sec. 5.7, for f(u) and the rates). It shares no code and no elliptic-function
  library with the module under test (which uses scipy's Carlson forms and Jacobi functions).
- scipy's DOP853 (solve_ivp, rtol = atol = 1e-13) on the canonical equations of
  topdrift.models.dynamics.rhs, and on the body form where the axis passes the vertical.
"""

from __future__ import annotations

import math

import mpmath as mp
import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy_reference import dop853  # scipy's DOP853 at rtol = atol = 1e-13

from topdrift.models import FORM_BODY, FORM_EULER, RigidBody, body_state, euler_state
from topdrift.models.dynamics import rhs
from topdrift.models.exact import ExactUnavailable, LagrangeTop
from topdrift.models.quaternion import from_euler

# Scenario bodies of our own (invented numbers).
TOP = RigidBody(0.5, (2.0e-3, 2.0e-3, 1.2e-3), com=(0.0, 0.0, 0.04))
HANGING = RigidBody(0.5, (2.0e-3, 2.0e-3, 1.2e-3), com=(0.0, 0.0, -0.04))
FREE = RigidBody(0.5, (2.0e-3, 2.0e-3, 1.2e-3))

# (phi, theta, psi, phidot, thetadot, psidot) starts
MID = (0.3, 0.9, -0.2, 3.0, 1.5, 60.0)  # mid-nutation: theta_rate != 0
CUSPS = (0.3, 0.9, -0.2, 0.0, 0.0, 60.0)  # released with spin and no precession
LOOPS = (0.3, 0.9, -0.2, -4.0, 0.7, 60.0)  # precession reverses
FAST_UNI = (1.0, 0.6, 0.4, 5.0, -0.8, 45.0)  # phidot keeps its sign


# --------------------------------------------------------------------------- mpmath reference
class MpTop:
    """Independent 30-digit reference from the start (Euler form), by quadrature."""

    def __init__(self, body, ye, dps=30):
        mp.mp.dps = dps
        p = body.params()
        i1, i3, mgl = (mp.mpf(float(v)) for v in (p[0], p[2], p[8]))
        phi0, th0, psi0, pphi, pth, ppsi = (mp.mpf(float(v)) for v in ye)
        c, s = mp.cos(th0), mp.sin(th0)
        h = (
            pth**2 / (2 * i1)
            + (pphi - ppsi * c) ** 2 / (2 * i1 * s**2)
            + ppsi**2 / (2 * i3)
            + mgl * c
        )
        alpha = 2 * (h - ppsi**2 / (2 * i3)) / i1
        beta = 2 * mgl / i1
        a, b = ppsi / i1, pphi / i1
        self.a, self.b, self.i1, self.i3, self.beta, self.ppsi = a, b, i1, i3, beta, ppsi
        # f(u) = beta u^3 - (alpha + a^2) u^2 + (2 a b - beta) u + (alpha - b^2)
        if beta != 0:
            r = sorted(
                mp.re(x)
                for x in mp.polyroots(
                    [beta, -(alpha + a**2), 2 * a * b - beta, alpha - b**2],
                    extraprec=200,
                    maxsteps=200,
                )
            )
            self.u1, self.u2, self.u3 = (r[0], r[1], r[2]) if beta > 0 else (r[1], r[2], r[0])
            self.w = lambda u: beta * (self.u3 - u)
        else:
            r = sorted(
                mp.re(x)
                for x in mp.polyroots([-(alpha + a**2), 2 * a * b, alpha - b**2], extraprec=200)
            )
            self.u1, self.u2 = r
            lead = alpha + a**2
            self.w = lambda u: lead
        self.phi0, self.psi0 = phi0, psi0
        self.T = 2 * self._t_of(mp.pi / 2)
        self.dphi = 2 * self._g(mp.pi / 2, self.phidot)
        self.dpsi = 2 * self._g(mp.pi / 2, self.psidot)
        # Start phase: u0 = u1 + (u2 - u1) sin^2(chi0), moving up in u when theta decreases.
        chi0 = mp.asin(mp.sqrt((mp.cos(th0) - self.u1) / (self.u2 - self.u1)))
        self.chi0 = chi0 if pth < 0 else -chi0
        self.t0 = self._t_of(self.chi0)

    def u(self, chi):
        return self.u1 + (self.u2 - self.u1) * mp.sin(chi) ** 2

    def phidot(self, u):
        return (self.b - self.a * u) / (1 - u**2)

    def psidot(self, u):
        return self.ppsi / self.i3 - u * (self.b - self.a * u) / (1 - u**2)

    def _t_of(self, chi):
        # dt = du / sqrt(f) = 2 dchi / sqrt(w(u)), w = f / ((u - u1)(u2 - u))
        return mp.quad(lambda x: 2 / mp.sqrt(self.w(self.u(x))), [0, chi])

    def _g(self, chi, rate):
        return mp.quad(lambda x: 2 * rate(self.u(x)) / mp.sqrt(self.w(self.u(x))), [0, chi])

    def angles(self, t):
        """(phi, theta, psi) at time t: whole periods by the period integrals, the rest by
        inverting the time integral with Newton's method."""
        s = mp.mpf(float(t)) + self.t0
        j = mp.nint(s / self.T)
        rem = s - j * self.T
        chi = mp.findroot(
            lambda x: self._t_of(x) - rem,
            mp.pi * rem / self.T,
            df=lambda x: 2 / mp.sqrt(self.w(self.u(x))),
        )
        u = self.u(chi)
        phi = (
            self.phi0 + j * self.dphi + self._g(chi, self.phidot) - self._g(self.chi0, self.phidot)
        )
        psi = (
            self.psi0 + j * self.dpsi + self._g(chi, self.psidot) - self._g(self.chi0, self.psidot)
        )
        return phi, mp.acos(u), psi


MP_CASES = [
    ("mid-nutation", TOP, MID),
    ("cusps", TOP, CUSPS),
    ("loops", TOP, LOOPS),
    ("hanging, M g l < 0", HANGING, (0.3, 2.5, -0.2, 1.0, -1.5, 20.0)),
    ("free top, M g l = 0", FREE, (0.3, 0.9, -0.2, 3.0, 1.5, 60.0)),
]


@pytest.fixture(scope="module")
def mp_refs():
    out = {}
    for name, body, start in MP_CASES:
        ye = euler_state(body, *start)
        out[name] = (body, ye, MpTop(body, ye))
    return out


@pytest.mark.parametrize("name", [c[0] for c in MP_CASES])
def test_period_and_precession_against_mpmath(mp_refs, name):
    body, ye, ref = mp_refs[name]
    top = LagrangeTop.from_state(body, FORM_EULER, ye)
    # mpmath 30-digit quadrature (see module docstring)
    assert top.nutation_period == pytest.approx(float(ref.T), rel=1e-12, abs=0)
    # abs only matters for the free top, whose net precession per nutation period is 0
    assert top.precession_per_period == pytest.approx(float(ref.dphi), rel=1e-12, abs=1e-14)
    assert top.spin_per_period == pytest.approx(float(ref.dpsi), rel=1e-12, abs=0)
    assert top.roots[0] == pytest.approx(float(ref.u1), abs=1e-14)
    assert top.roots[1] == pytest.approx(float(ref.u2), abs=1e-14)


@pytest.mark.parametrize(
    "name", ["mid-nutation", "loops", "hanging, M g l < 0", "free top, M g l = 0"]
)
def test_angles_over_ten_thousand_periods_against_mpmath(mp_refs, name):
    body, ye, ref = mp_refs[name]
    top = LagrangeTop.from_state(body, FORM_EULER, ye)
    period = float(ref.T)
    # Unwrapped angles (not modulo 2 pi), out to 10^4 nutation periods.
    ts = [0.0, 0.37 * period, 13.61 * period, 1234.5678 * period, 9999.73 * period]
    got = top.euler(np.array(ts))
    for k, t in enumerate(ts):
        phi, theta, psi = (float(v) for v in ref.angles(t))
        assert abs(got[k, 0] - phi) < 1e-10, (t, got[k, 0] - phi)
        assert abs(got[k, 1] - theta) < 1e-10, (t, got[k, 1] - theta)
        assert abs(got[k, 2] - psi) < 1e-10, (t, got[k, 2] - psi)


def separatrix_start(theta, p_psi, energy_scale):
    """p_phi = p_psi (so u = 1 is a root) with the energy energy_scale times that of the
    upright top: at 1 the axis creeps towards the vertical (the separatrix)."""
    i1, mgl = TOP.params()[0], TOP.mgl
    big_a = p_psi * (1.0 - math.cos(theta))
    w_minus = 2.0 * math.sin(0.5 * theta) ** 2
    p_theta2 = energy_scale * 2.0 * i1 * mgl * w_minus - (big_a / math.sin(theta)) ** 2
    return np.array([0.0, theta, 0.0, p_psi, math.sqrt(p_theta2), p_psi])


def test_near_separatrix_against_mpmath_and_refused_on_it():
    ye = separatrix_start(1.0, 0.01, 1.0 - 1e-3)
    top = LagrangeTop.from_state(TOP, FORM_EULER, ye)
    ref = MpTop(TOP, ye)  # mpmath 30-digit quadrature (see module docstring)
    assert top.nutation_period == pytest.approx(float(ref.T), rel=1e-12, abs=0)
    assert top.precession_per_period == pytest.approx(float(ref.dphi), rel=1e-12, abs=0)
    assert top.spin_per_period == pytest.approx(float(ref.dpsi), rel=1e-12, abs=0)
    with pytest.raises(ExactUnavailable, match="separatrix"):
        LagrangeTop.from_state(TOP, FORM_EULER, separatrix_start(1.0, 0.01, 1.0))


# --------------------------------------------------------------------------- scipy DOP853
def dop853_reduced(body, ye, period, periods, per_period=20):
    """DOP853 over whole nutation periods, restarting each period with phi and psi folded
    into (-pi, pi] and the whole turns kept aside. The equations do not depend on phi and psi,
    so the folding is exact; it keeps scipy's error control (rtol |y| + atol) from loosening as
    psi grows, which otherwise makes the reference's own psi error grow like t^2."""
    p = body.params()

    def f(_, y):
        d = np.empty(6)
        rhs(FORM_EULER, y, p, d)
        return d

    y = np.array(ye, dtype=np.float64)
    turns = np.zeros(3)
    rows = [y[:3].copy()]
    local = np.linspace(0.0, period, per_period + 1)[1:]
    for _ in range(periods):
        sol = solve_ivp(f, (0.0, period), y, method="DOP853", rtol=1e-13, atol=1e-13, t_eval=local)
        assert sol.success
        rows.extend(sol.y[:3].T + turns)
        y = sol.y[:, -1].copy()
        for i in (0, 2):
            k = round(y[i] / (2.0 * math.pi))
            y[i] -= 2.0 * math.pi * k
            turns[i] += 2.0 * math.pi * k
    t = np.linspace(0.0, periods * period, periods * per_period + 1)
    return t, np.array(rows)


@pytest.mark.parametrize(
    "start, motion",
    [(MID, "unidirectional"), (LOOPS, "loops"), (CUSPS, "cusps"), (FAST_UNI, "unidirectional")],
)
def test_against_dop853_over_a_hundred_periods(start, motion):
    ye = euler_state(TOP, *start)
    top = LagrangeTop.from_state(TOP, FORM_EULER, ye)
    assert top.motion == motion
    t, ref = dop853_reduced(TOP, ye, top.nutation_period, 100)
    err = np.abs(top.euler(t) - ref).max()
    assert err < 1e-9, err


def test_plain_dop853_psi_error_is_the_references_own():
    """Without folding, the difference in psi after 100 periods shrinks with scipy's rtol (the
    exact solution does not change): the reference's error, not the exact solution's."""
    ye = euler_state(TOP, *LOOPS)
    top = LagrangeTop.from_state(TOP, FORM_EULER, ye)
    t = np.array([0.0, 100.0 * top.nutation_period])
    ex = top.euler(t)[-1, 2]
    errs = []
    for tol in (1e-12, 1e-13):
        p = TOP.params()

        def f(_, y, p=p):
            d = np.empty(6)
            rhs(FORM_EULER, y, p, d)
            return d

        sol = solve_ivp(f, (0.0, t[-1]), ye, method="DOP853", rtol=tol, atol=tol, t_eval=t)
        errs.append(abs(sol.y[2, -1] - ex))
    # DOP853's global error scales with the tolerance: about 10x per decade (common practice)
    assert errs[0] / errs[1] > 5.0, errs


def rotation(q):
    q0, q1, q2, q3 = q / np.linalg.norm(q)
    return np.array(
        [
            [1 - 2 * (q2 * q2 + q3 * q3), 2 * (q1 * q2 - q0 * q3), 2 * (q1 * q3 + q0 * q2)],
            [2 * (q1 * q2 + q0 * q3), 1 - 2 * (q1 * q1 + q3 * q3), 2 * (q2 * q3 - q0 * q1)],
            [2 * (q1 * q3 - q0 * q2), 2 * (q2 * q3 + q0 * q1), 1 - 2 * (q1 * q1 + q2 * q2)],
        ]
    )


BODY_CASES = [
    # On the vertical with transverse momentum: the axis passes the vertical every period.
    ("through-vertical", TOP, np.array([math.cos(0.2), 0, 0, math.sin(0.2), 2e-3, -1e-3, 0.05])),
    # Hanging straight down, pushed sideways: passes the downward vertical.
    ("through-down", TOP, np.array([0, math.cos(0.2), math.sin(0.2), 0, 2e-3, -1e-3, 0.05])),
    ("sleeping", TOP, np.array([math.cos(0.2), 0, 0, math.sin(0.2), 0.0, 0.0, 0.08])),
    # No spin, swung hard enough to go over the top in a plane: both poles.
    ("through-both", TOP, body_state(TOP, 0.3, 0.9, -0.2, 0.0, 25.0, 0.0)),
    ("through-down", TOP, body_state(TOP, 0.3, 0.9, -0.2, 0.0, 0.0, 0.0)),  # plane pendulum
    ("loops", HANGING, body_state(HANGING, 0.3, 2.5, -0.2, 1.0, -1.5, 20.0)),
    ("free-precession", FREE, body_state(FREE, 0.3, 0.9, -0.2, 3.0, 1.5, 60.0)),
]


@pytest.mark.parametrize("motion, body, yb", BODY_CASES)
def test_body_form_starts_against_dop853(motion, body, yb):
    top = LagrangeTop.from_state(body, FORM_BODY, yb)
    assert top.motion == motion
    period = top.nutation_period if math.isfinite(top.nutation_period) else 1.0
    t = np.linspace(0.0, 20.0 * period, 401)
    ref = dop853(FORM_BODY, body, yb, t)
    e = top.euler(t)
    ax = top.axis(t)
    assert np.all(np.isfinite(e)) and np.all(np.isfinite(ax))
    d_rot = max(
        np.abs(rotation(np.array(from_euler(*ek))) - rotation(rk[:4])).max()
        for ek, rk in zip(e, ref, strict=True)
    )
    d_axis = max(np.abs(ak - rotation(rk[:4])[:, 2]).max() for ak, rk in zip(ax, ref, strict=True))
    assert d_rot < 1e-9 and d_axis < 1e-9, (d_rot, d_axis)
    if top.motion.startswith("through"):
        # phi unfolded: it never jumps by 2 pi between samples
        assert np.abs(np.diff(e[:, 0])).max() < 1.5 * math.pi


# --------------------------------------------------------------------------- API and refusals
def test_start_angles_and_summary():
    ye = euler_state(TOP, *MID)
    top = LagrangeTop.from_state(TOP, FORM_EULER, ye)
    assert np.allclose(top.euler(0.0)[0], MID[:3], rtol=0, atol=1e-15)
    assert top.euler(np.linspace(0, 1, 7)).shape == (7, 3)
    assert top.axis(np.linspace(0, 1, 7)).shape == (7, 3)
    s = top.summary()
    for key in ("theta_min", "theta_max", "nutation_period", "precession_per_period"):
        assert isinstance(s[key], float)
    assert s["motion"] == top.motion
    assert top.theta_min <= MID[1] <= top.theta_max
    assert top.mean_precession_rate == pytest.approx(
        top.precession_per_period / top.nutation_period, rel=1e-15, abs=0
    )
    # the form may be given by name, as the runner does
    same = LagrangeTop.from_state(TOP, "body", body_state(TOP, *MID))
    assert same.nutation_period == pytest.approx(top.nutation_period, rel=1e-13, abs=0)


def test_refusals():
    with pytest.raises(ExactUnavailable, match="symmetric"):
        LagrangeTop.from_state(
            RigidBody(1.0, (0.04, 0.05, 0.03), com=(0, 0, 0.1)),
            FORM_BODY,
            np.r_[1.0, 0, 0, 0, 0, 0, 1],
        )
    with pytest.raises(ExactUnavailable, match="theta"):
        LagrangeTop.from_state(TOP, FORM_EULER, np.array([0.0, 0.0, 0.0, 1.0, 0.0, 1.0]))
    with pytest.raises(ExactUnavailable, match="expected 6"):
        LagrangeTop.from_state(TOP, FORM_EULER, np.zeros(7))
    with pytest.raises(ExactUnavailable, match="non-finite"):
        LagrangeTop.from_state(TOP, FORM_EULER, np.array([0.0, 1.0, 0.0, np.nan, 0.0, 1.0]))
    with pytest.raises(ExactUnavailable, match="form"):
        LagrangeTop.from_state(TOP, 5, np.zeros(6))
    assert issubclass(ExactUnavailable, ValueError)
