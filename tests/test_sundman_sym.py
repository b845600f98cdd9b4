"""The symplectic variable-step splittings (integrators/splitting/sundman_sym.py): one step
against the defining equations solved independently in mpmath, the monitor's slope, the
symplecticity of the step in extended phase space (and its absence in the Hairer-Soderlind
twin), reversibility, orders against the exact solution, bounded energy over 10^6 steps, samples
that never feed back, snapshots, and the forms they refuse."""

import math

import mpmath as mp
import numpy as np
import pytest
from independent_references import attitude_error, exact_attitude

from topdrift.integrators import C_STEPS, ST_OK, MethodRefused
from topdrift.integrators.splitting.sundman import METHODS as HS_METHODS
from topdrift.integrators.splitting.sundman import rate_scale2
from topdrift.integrators.splitting.sundman_kernel import N_AUX as HS_AUX
from topdrift.integrators.splitting.sundman_kernel import start_point, sundman_steps
from topdrift.integrators.splitting.sundman_sym import METHODS
from topdrift.integrators.splitting.sundman_sym_kernel import (
    F_E,
    F_INV_OMEGA2,
    F_PPHI0,
    F_PPSI0,
    N_AUX,
    monitor_g,
    sym_start,
    sym_step,
)
from topdrift.models import RigidBody, euler_state, invariants_of
from topdrift.models.exact import LagrangeTop
from topdrift.models.forms import FORM_BODY, FORM_EULER

BY_NAME = {m.name: m for m in METHODS}
NAMES = list(BY_NAME)
HS = {m.name: m for m in HS_METHODS}
# Our scenario (as in test_sundman.py): the toy top of the library's pole-passage case, 0.2 kg,
# 1500 rpm, thrown into fast precession at 30 deg; every nutation takes the axis to about 1 deg
# from the vertical.
POLE_TOP = RigidBody(0.2, (1.7e-4, 1.7e-4, 9.0e-5), com=(0.0, 0.0, 0.025))
POLE_START = (0.0, math.radians(30.0), 0.0, 56.5, 0.0, 1500.0 * 2.0 * math.pi / 60.0)


def pole_state():
    return euler_state(POLE_TOP, *POLE_START)


def point_near(theta_max: float):
    """A step point of the order-2 method where theta has fallen below theta_max (on the way to
    the pole), with the method's frozen constants."""
    st = BY_NAME["leapfrog-sundman-sym"].start(
        FORM_EULER, POLE_TOP.params(), 0.0, pole_state(), {"step": 1e-4}
    )
    for k in range(1, 2000):
        assert st.advance_to(k * 1e-4) == ST_OK
        if st.w[1] < theta_max:
            return st.w.copy(), st.frozen.copy()
    raise AssertionError("never came near the pole")


# -- the step against its definition -------------------------------------------------------


def _k_mp(p, fr, q, m):
    """K = g(theta) (H + e) in mpmath, from the module docstring's formulas (not the kernel's
    code): q = (t, theta, phi, psi), m = (e, p_theta, p_phi, p_psi)."""
    i1, i3, h3, mgl = (mp.mpf(float(p[k])) for k in (0, 2, 11, 8))
    theta = q[1]
    s, c = mp.sin(theta), mp.cos(theta)
    r0 = (mp.mpf(fr[F_PPHI0]) - mp.mpf(fr[F_PPSI0]) * c) / (i1 * s**2)
    g = 1 / mp.sqrt(1 + r0**2 * (1 + c**2) * mp.mpf(fr[F_INV_OMEGA2]))
    a = m[2] - m[3] * c
    h = m[1] ** 2 / (2 * i1) + (m[3] - h3) ** 2 / (2 * i3) + a**2 / (2 * i1 * s**2) + mgl * c
    return g * (h + m[0])


def _grad(f, z, k):
    return mp.diff(lambda x: f([*z[:k], x, *z[k + 1 :]]), z[k])


def mp_step(p, fr, z, eps):
    """The generalized Stormer-Verlet step on K (Hairer, Lubich and Wanner, Geometric Numerical
    Integration, 2nd ed., eq. (VI.3.6) [from memory]) solved by mpmath.findroot at 30 digits,
    gradients by mpmath.diff: z = (t, theta, phi, psi, e, p_theta, p_phi, p_psi)."""
    with mp.workdps(30):
        z = [mp.mpf(float(v)) for v in z]
        h = mp.mpf(eps) / 2

        def k_of(w):
            return _k_mp(p, fr, w[:4], w[4:])

        def dk_dq(q, m, i):
            return _grad(k_of, [*q, *m], i)

        def dk_dp(q, m, i):
            return _grad(k_of, [*q, *m], 4 + i)

        q0, m0 = z[:4], z[4:]
        # p_(1/2) = p_n - h dK/dq(q_n, p_(1/2)): only p_theta moves (t, phi, psi cyclic)
        m_half = list(m0)
        for i in (0, 2, 3):
            assert dk_dq(q0, m0, i) == 0

        def kick(x):
            return x - m0[1] + h * dk_dq(q0, [m0[0], x, m0[2], m0[3]], 1)

        m_half[1] = mp.findroot(kick, m0[1])

        def drift(*q1):
            return [
                q1[i] - q0[i] - h * (dk_dp(q0, m_half, i) + dk_dp(list(q1), m_half, i))
                for i in range(4)
            ]

        guess = [q0[i] + 2 * h * dk_dp(q0, m_half, i) for i in range(4)]
        q1 = list(mp.findroot(drift, guess))
        m1 = list(m_half)
        for i in range(4):
            m1[i] = m_half[i] - h * dk_dq(q1, m_half, i)
        return np.array([float(v) for v in q1 + m1])


def z_of(y, t, e):
    return np.array([t, y[1], y[0], y[2], e, y[4], y[3], y[5]])


def kernel_step(p, fr, z, gammas, eps):
    """The kernel's step as a map of z (the frozen e replaced by z's e)."""
    y = np.array([z[2], z[1], z[3], z[6], z[5], z[7]])
    f = fr.copy()
    f[F_E] = z[4]
    aux = np.zeros(N_AUX)
    counters = np.zeros(4, dtype=np.int64)
    clock = np.array([z[0], 0.0])
    sym_start(p, f, y, aux, counters)
    assert sym_step(p, f, gammas, eps, y, aux, clock, counters) == ST_OK
    return z_of(y, clock[0] + clock[1], f[F_E])


@pytest.mark.parametrize("theta_max", [0.5, 0.03])
def test_one_step_solves_the_defining_equations(theta_max):
    # far from and close to the pole (the kick's quadratic and the drift's Newton both work)
    y, fr = point_near(theta_max)
    p = POLE_TOP.params()
    z = z_of(y, 0.25, fr[F_E] * (1.0 + 1e-3))  # off K = 0 too: the H + e term is live
    eps = 3e-4
    ours = kernel_step(p, fr, z, np.array([1.0]), eps)
    ref = mp_step(p, fr, z, eps)
    scale = np.maximum(np.abs(z), [1.0, 1.0, 1.0, 1.0, abs(z[4]), 1e-3, abs(z[6]), abs(z[7])])
    assert np.max(np.abs(ours - ref) / scale) < 1e-13, (ours - ref) / scale
    assert ours[1] != z[1] and ours[5] != z[5]


def test_monitor_slope_against_mpmath():
    # g' of the kernel against mpmath.diff of g written from the docstring's formula
    y, fr = point_near(0.5)
    p = POLE_TOP.params()
    out = np.zeros(2)
    for theta in (0.012, 0.05, 0.4, 1.3, 2.0, 3.1):
        monitor_g(theta, p, fr, out)
        with mp.workdps(30):

            def g_only(x):
                c = mp.cos(x)
                r0 = (mp.mpf(fr[F_PPHI0]) - mp.mpf(fr[F_PPSI0]) * c) / (
                    mp.mpf(float(p[0])) * mp.sin(x) ** 2
                )
                return 1 / mp.sqrt(1 + r0**2 * (1 + c**2) * mp.mpf(fr[F_INV_OMEGA2]))

            gv = float(g_only(mp.mpf(theta)))
            dg = float(mp.diff(g_only, mp.mpf(theta)))
        assert out[0] == pytest.approx(gv, rel=1e-12)
        assert out[1] == pytest.approx(dg, rel=1e-10, abs=1e-14)


# -- symplecticity in extended phase space ----------------------------------------------------

J8 = np.block([[np.zeros((4, 4)), np.eye(4)], [-np.eye(4), np.zeros((4, 4))]])


def symplectic_defect(step_map, z0, d=1e-5):
    """(max |M^T J M - J| / max |M|^2, max |M - I|) of the Jacobian M of step_map at z0, in
    coordinates scaled pairwise (q = a u, p = u / a: symplectic in u iff in z). M by central
    differences at d and d / 2 combined by Richardson extrapolation (common practice): the
    O(d^2) term, which near the pole is the largest, cancels; what is left is O(d^4) and the
    round-off of the solves over d."""
    qs = np.array([1e-3, 1.0, 1.0, 1.0])
    ps = np.full(4, np.abs(z0[4:]).max())
    a = np.concatenate([np.sqrt(qs / ps), np.sqrt(ps / qs)])

    def jac(dd):
        m = np.zeros((8, 8))
        for j in range(8):
            dz = np.zeros(8)
            dz[j] = dd * a[j]
            m[:, j] = (step_map(z0 + dz) - step_map(z0 - dz)) / (2 * dd) / a
        return m

    m = (4.0 * jac(0.5 * d) - jac(d)) / 3.0
    return float(np.abs(m.T @ J8 @ m - J8).max() / np.abs(m).max() ** 2), float(
        np.abs(m - np.eye(8)).max()
    )


def hs_step(p, om2, z, eps, twin):
    """The Hairer-Soderlind twin's step from a fresh start point (rho = 1/sigma(y)), t advanced
    by its step, e untouched: the same coordinates."""
    y = np.array([z[2], z[1], z[3], z[6], z[5], z[7]])
    aux = np.zeros(HS_AUX)
    counters = np.zeros(4, dtype=np.int64)
    clock = np.array([z[0], 0.0])
    start_point(p, om2, y, aux, counters)
    st, done, _ = sundman_steps(
        p, twin.kick_table, twin.drift_table, eps, om2, 1e300, 1, y, aux, clock,
        np.zeros(6 + HS_AUX), counters, np.zeros(0, dtype=np.int64),
    )  # fmt: skip
    assert st == ST_OK and done == 1
    return z_of(y, clock[0] + clock[1], z[4])


@pytest.mark.parametrize("theta_max", [0.5, 0.05])
def test_the_step_is_symplectic_in_extended_phase_space_and_the_twin_is_not(theta_max):
    # M^T J M = J for a symplectic map (Hairer, Lubich and Wanner, ch. VI, Def. 2.2 [from
    # memory]). Measured at eps = 1e-3, relative to max |M|^2 (|M - I| is 60 at theta = 0.5 and
    # 4000 at 0.05 in these units): 2.4e-14 and 4.0e-14 (order 2), 6.6e-14 and 2.2e-14 (s4):
    # difference noise, it moves with d; the Hairer-Soderlind twin 5.3e-3 and 1.2e-3, at every
    # d: non-symplectic by ten orders of magnitude.
    y, fr = point_near(theta_max)
    p = POLE_TOP.params()
    z0 = z_of(y, 0.25, fr[F_E])
    eps = 1e-3
    for name in ("leapfrog-sundman-sym", "leapfrog-s4-sundman-sym"):
        gam = BY_NAME[name].gammas
        defect, size = symplectic_defect(lambda z, g=gam: kernel_step(p, fr, z, g, eps), z0)
        assert size > 1.0  # the map is far from the identity: the check has teeth
        assert defect < 1e-11, (name, defect)
    om2 = rate_scale2(p, pole_state())
    twin = HS["leapfrog-sundman"]
    defect, _ = symplectic_defect(lambda z: hs_step(p, om2, z, eps, twin), z0)
    assert defect > 1e-4, defect


# -- behaviour of whole runs ------------------------------------------------------------------


def test_steps_shorten_near_the_pole():
    m = BY_NAME["leapfrog-sundman-sym"]
    st = m.start(FORM_EULER, POLE_TOP.params(), 0.0, pole_state(), {"step": 1e-4})
    thetas, steps = [], []
    last = 0.0
    for k in range(1, 3001):
        before = st.counters[C_STEPS]
        assert st.advance_to(k * 1e-4) == ST_OK
        if st.counters[C_STEPS] > before:  # the mean step since the last sample
            thetas.append(st.w[1])
            steps.append((st.t_point - last) / (st.counters[C_STEPS] - before))
            last = st.t_point
    thetas, steps = np.array(thetas), np.array(steps)
    assert thetas.min() < math.radians(1.5)
    assert steps[np.argmin(thetas)] < 0.25 * steps[np.argmax(thetas)]


@pytest.mark.parametrize("theta_max", [0.5, 0.02])
@pytest.mark.parametrize("name", NAMES)
def test_one_step_forward_and_back_is_the_identity_to_round_off(name, theta_max):
    # a symmetric one-step map: Phi(-eps) Phi(eps) = id (Hairer, Lubich and Wanner, ch. V.1
    # [from memory]); measured: at most 4.5e-16 relative in any coordinate
    y, fr = point_near(theta_max)
    p = POLE_TOP.params()
    z0 = z_of(y, 0.25, fr[F_E])
    g = BY_NAME[name].gammas
    back = kernel_step(p, fr, kernel_step(p, fr, z0, g, 2e-4), g, -2e-4)
    assert np.max(np.abs(back - z0) / np.maximum(1e-3, np.abs(z0))) < 2e-15


@pytest.mark.parametrize("name", NAMES)
def test_forward_then_backward_returns_to_the_start(name):
    # 3091 steps through five pole passages and back: every step reverses to round-off (the
    # test above), and the flow amplifies those roundings: measured at the start 8.2e-13,
    # 9.9e-13 and 5.7e-12 in phi (rad) for the three tables, with the clock back to 3.5e-15,
    # 4.3e-15 and 2.4e-14 s (the Hairer-Soderlind twins' step points: 1e-13 to 3.5e-13).
    m = BY_NAME[name]
    y0 = pole_state()
    st = m.start(FORM_EULER, POLE_TOP.params(), 0.0, y0, {"step": 2e-4})
    assert st.advance_to(0.5) == ST_OK
    n = int(st.counters[C_STEPS])
    assert n > 2000
    assert st.advance_to(0.0) == ST_OK
    assert int(st.counters[C_STEPS]) == 2 * n  # back to the step point at the start
    assert abs(st.t_point) < 1e-13
    assert np.max(np.abs(st.unfolded_y() - y0) / (1.0 + np.abs(y0))) < 2e-11


@pytest.mark.parametrize("name", NAMES)
def test_a_backward_run_from_the_start(name):
    m = BY_NAME[name]
    y0 = pole_state()
    st = m.start(FORM_EULER, POLE_TOP.params(), 0.0, y0, {"step": 2e-4})
    assert st.advance_to(-0.2) == ST_OK
    assert st.t == -0.2
    assert st.advance_to(0.0) == ST_OK
    assert np.max(np.abs(st.unfolded_y() - y0) / (1.0 + np.abs(y0))) < 2e-11


# Measured order against the exact Lagrange-top solution (models/exact.py, checked against mpmath
# in test_exact.py) at T on the pole-passage top, over a factor 4 of eps (measured: 0.0280,
# 0.00700, 0.00175 -> 2.00; 1.69e-6, 1.07e-7, 6.74e-9 -> 3.98; 2.41e-7, 4.14e-9, 6.11e-11 ->
# 5.97). The Euler form describes symmetric bodies only: no asymmetric body can be run.
T_ORDER = 0.5
ORDER_EPS = {
    "leapfrog-sundman-sym": (5e-4, 2.5e-4, 1.25e-4),
    "leapfrog-s4-sundman-sym": (5e-4, 2.5e-4, 1.25e-4),
    "leapfrog-kl6-sundman-sym": (5e-4, 2.5e-4, 1.25e-4),
}


@pytest.mark.parametrize("name", NAMES)
def test_measured_order(name):
    m = BY_NAME[name]
    top = LagrangeTop.from_state(POLE_TOP, FORM_EULER, pole_state())
    ref = exact_attitude(top, [T_ORDER])[0]
    errs = []
    for eps in ORDER_EPS[name]:
        st = m.start(FORM_EULER, POLE_TOP.params(), 0.0, pole_state(), {"step": eps})
        assert st.advance_to(T_ORDER) == ST_OK
        errs.append(attitude_error(FORM_EULER, st.y, ref))
    eps = np.array(ORDER_EPS[name])
    slope = np.polyfit(np.log(eps), np.log(errs), 1)[0]
    assert eps[0] / eps[-1] >= 4.0
    assert min(errs) > 1e-12, errs
    assert abs(slope - m.info.order) < 0.2, (slope, errs)


@pytest.mark.parametrize("name", ["leapfrog-sundman-sym", "leapfrog-s4-sundman-sym"])
def test_energy_bounded_over_a_million_steps_on_pole_passage(name):
    # A symplectic map of the time-independent K: K, and with it H - H0 = K / g, stays
    # O(eps^p) without drift over exponentially long times (backward error analysis; Hairer,
    # Lubich and Wanner, ch. IX.8 [from memory]). The error peaks at the pole passages (g is
    # small there), so the envelope is the largest error over 400 samples at phases that no
    # multiple of the nutation period repeats; a drift would show as growth from the first
    # tenth of the run to any later one. Measured: order 2 at eps = 2e-4, 1.29e-5 in every
    # tenth (the Hairer-Soderlind twin: 2.38e-5 rising to 2.50e-5); s4 at eps = 5e-4,
    # 1.95e-7 to 2.44e-7 (at 2.5e-4: 1.09e-8 to 1.48e-8, order 4).
    m = BY_NAME[name]
    p = POLE_TOP.params()
    y0 = pole_state()
    e0 = invariants_of(FORM_EULER, y0, p)["energy"]
    eps = {"leapfrog-sundman-sym": 2e-4, "leapfrog-s4-sundman-sym": 5e-4}[name]
    st = m.start(FORM_EULER, p, 0.0, y0, {"step": eps})
    horizon = 10**6 * eps * 0.82  # measured: t advances about 0.81 eps per step here
    ts = np.linspace(0.0, horizon, 4001)[1:] * (1.0 + 1e-3 * math.pi)
    errs = []
    for t in ts:
        assert st.advance_to(t) == ST_OK
        errs.append(abs(invariants_of(FORM_EULER, st.w, p)["energy"] - e0) / abs(e0))
    assert int(st.counters[C_STEPS]) > 10**6
    tenths = np.array(errs).reshape(10, 400).max(axis=1)
    assert np.all(tenths < 1.5 * tenths[0]), tenths
    assert tenths[0] < 1e-4


def test_samples_do_not_feed_back():
    m = BY_NAME["leapfrog-s4-sundman-sym"]
    a = m.start(FORM_EULER, POLE_TOP.params(), 0.0, pole_state(), {"step": 1e-3})
    b = m.start(FORM_EULER, POLE_TOP.params(), 0.0, pole_state(), {"step": 1e-3})
    for k in range(1, 101):
        assert a.advance_to(k * 1e-3) == ST_OK
    assert b.advance_to(0.1) == ST_OK
    assert np.array_equal(a.y, b.y)
    assert np.array_equal(a.w, b.w)
    assert a.counters[C_STEPS] == b.counters[C_STEPS]


def test_snapshot_restore_is_bit_exact():
    m = BY_NAME["leapfrog-kl6-sundman-sym"]
    a = m.start(FORM_EULER, POLE_TOP.params(), 0.0, pole_state(), {"step": 1e-3})
    a.advance_to(0.05)
    snap = a.snapshot()
    a.advance_to(0.1)
    b = m.start(FORM_EULER, POLE_TOP.params(), 0.0, pole_state(), {"step": 1e-3})
    b.restore(snap)
    assert b.t == 0.05
    b.advance_to(0.1)
    assert np.array_equal(a.y, b.y)
    assert np.array_equal(a.counters, b.counters)


def test_a_step_too_long_fails_with_a_status_not_a_nan():
    # at eps = 0.02 the pole-passage top's drift leaves (0, pi) or a solve has no root: the
    # run stops with a status at its last good step point, finite
    m = BY_NAME["leapfrog-sundman-sym"]
    st = m.start(FORM_EULER, POLE_TOP.params(), 0.0, pole_state(), {"step": 0.02})
    status = st.advance_to(1.0)
    assert status != ST_OK
    assert np.all(np.isfinite(st.y)) and st.t == st.t_fail < 1.0


@pytest.mark.parametrize("name", NAMES)
def test_body_form_is_refused_with_a_reason(name):
    m = BY_NAME[name]
    body = RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1))
    y = np.array([1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 1e-3])
    with pytest.raises(MethodRefused, match="euler form only") as exc:
        m.start(FORM_BODY, body.params(), 0.0, y, {"step": 1e-3})
    assert "\n" not in str(exc.value)
    with pytest.raises(MethodRefused, match="euler form only"):
        m.check(body, "body", {"step": 1e-3})
    assert m.info.symplectic  # test_the_step_is_symplectic_... is the evidence
    assert m.info.forms == ("euler",)
