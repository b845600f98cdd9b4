"""The variable-step splittings (integrators/splitting/sundman.py): the monitor's derivative
against scipy, reversibility, orders against the exact solution, bounded energy over 10^6
steps, samples that never feed back, snapshots, and the forms they refuse."""

import math

import numpy as np
import pytest
from independent_references import attitude_error, exact_attitude
from scipy.integrate import solve_ivp
from scipy_reference import scipy_rhs

from topdrift.integrators import C_FORCE_EVALS, C_STEPS, ST_OK, MethodRefused
from topdrift.integrators.splitting.sundman import METHODS, rate_scale2
from topdrift.integrators.splitting.sundman_kernel import monitor_at
from topdrift.models import RigidBody, euler_state, invariants_of
from topdrift.models.exact import LagrangeTop
from topdrift.models.flows import N_KICK_RATES, kick_euler, kick_euler_apply, kick_euler_rates
from topdrift.models.forms import FORM_BODY, FORM_EULER

BY_NAME = {m.name: m for m in METHODS}
NAMES = list(BY_NAME)
# Our scenario: the toy top of the library's pole-passage case (0.2 kg, 1500 rpm, thrown into
# fast precession at 30 deg): every nutation takes the axis to about 1 deg from the vertical.
POLE_TOP = RigidBody(0.2, (1.7e-4, 1.7e-4, 9.0e-5), com=(0.0, 0.0, 0.025))
POLE_START = (0.0, math.radians(30.0), 0.0, 56.5, 0.0, 1500.0 * 2.0 * math.pi / 60.0)
# A slower top of our own with a moderate nutation, for the long energy run.
TOP = RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1))
START = (0.3, 0.9, 0.2, 1.0, 0.5, 40.0)  # phi, theta, psi and their rates


def pole_state():
    phi, theta, psi, phidot, thetadot, psidot = POLE_START
    return euler_state(POLE_TOP, phi, theta, psi, phidot, thetadot, psidot)


def test_the_kick_from_its_rates_is_the_kick():
    y = pole_state()
    p = POLE_TOP.params()
    a, b = y.copy(), y.copy()
    kick_euler(1e-3, a, p)
    rates = np.empty(N_KICK_RATES)
    kick_euler_rates(b, p, rates)
    kick_euler_apply(1e-3, b, rates)
    assert np.allclose(a, b, rtol=4e-16, atol=0.0)


def test_monitor_g_is_the_time_derivative_of_log_rho():
    # G = d(ln rho)/dt along the motion (Hairer and Soderlind 2005, the step-density equation).
    # The motion from scipy's DOP853 at rtol 1e-13 (the reference library), ln rho at t +- d by
    # a central difference, error O(d^2) (common practice).
    p = POLE_TOP.params()
    y0 = pole_state()
    om2 = rate_scale2(p, y0)
    d = 1e-6
    ts = np.linspace(0.0, 0.3, 31)[1:]
    grid = np.sort(np.concatenate([ts - d, ts, ts + d]))
    sol = solve_ivp(scipy_rhs(FORM_EULER, p), (0.0, 0.31), y0, method="DOP853", rtol=1e-13,
                    atol=1e-14, t_eval=grid)  # fmt: skip
    assert sol.success
    out = np.empty(2 + N_KICK_RATES)
    worst = 0.0
    for k in range(len(ts)):
        lo, mid, hi = (np.ascontiguousarray(sol.y[:, 3 * k + j]) for j in range(3))
        monitor_at(lo, p, om2, out)
        r_lo = out[0]
        monitor_at(hi, p, om2, out)
        r_hi = out[0]
        monitor_at(mid, p, om2, out)
        fd = (math.log(r_hi) - math.log(r_lo)) / (2 * d)
        worst = max(worst, abs(out[1] - fd) / (1.0 + abs(fd)))
    assert worst < 1e-5


def test_steps_shorten_near_the_pole():
    # The point of the control: the step where theta is smallest is a fraction of the step
    # where it is largest (sigma ~ Omega / omega there; measured 1.0e-5 against 8.1e-5 s).
    m = BY_NAME["leapfrog-sundman"]
    st = m.start(FORM_EULER, POLE_TOP.params(), 0.0, pole_state(), {"step": 1e-4})
    thetas, steps = [], []
    for k in range(1, 3001):
        before = st.counters[C_STEPS]
        assert st.advance_to(k * 1e-4) == ST_OK
        if st.counters[C_STEPS] > before:
            thetas.append(st.w[1])
            steps.append(st.eps / st.aux[5])
    thetas, steps = np.array(thetas), np.array(steps)
    assert thetas.min() < math.radians(1.5)  # the run passed close to the pole
    assert steps[np.argmin(thetas)] < 0.25 * steps[np.argmax(thetas)]


@pytest.mark.parametrize("name", NAMES)
def test_forward_then_backward_returns_to_the_start(name):
    # A symmetric step control with a symmetric method: (y_n, rho_n) run back with -eps
    # retraces every step (Hairer and Soderlind 2005, sec. 2), here to round-off.
    m = BY_NAME[name]
    y0 = pole_state()
    st = m.start(FORM_EULER, POLE_TOP.params(), 0.0, y0, {"step": 2e-4})
    assert st.advance_to(0.5) == ST_OK
    n = int(st.counters[C_STEPS])
    assert n > 2000
    rho = st.aux[5]
    assert st.advance_to(0.0) == ST_OK  # turns back at the last step point
    assert st.t_point == pytest.approx(0.0, abs=1e-15) or abs(st.t_point) < 2e-4
    assert int(st.counters[C_STEPS]) in (2 * n, 2 * n - 1)
    unfolded = st.unfolded_y()
    assert np.max(np.abs(unfolded - y0) / (1.0 + np.abs(y0))) < 2e-13
    assert rho != st.aux[5]  # it did vary


@pytest.mark.parametrize("name", NAMES)
def test_a_backward_run_from_the_start(name):
    # a first request before t0 runs backwards (time reversal), and comes back again
    m = BY_NAME[name]
    y0 = pole_state()
    st = m.start(FORM_EULER, POLE_TOP.params(), 0.0, y0, {"step": 2e-4})
    assert st.advance_to(-0.2) == ST_OK
    assert st.t == -0.2
    assert st.advance_to(0.0) == ST_OK
    assert np.max(np.abs(st.unfolded_y() - y0) / (1.0 + np.abs(y0))) < 2e-13


# Measured order: the global error at T against the exact Lagrange-top solution (models/exact.py,
# Jacobi elliptic functions; checked against mpmath in test_exact.py), over a factor 4 of eps.
# The windows are where the error is truncation (measured ladders, eps halving from 2e-3: local
# slopes 2.00 throughout; 3.82, then 4.00; kl6 6.12, 5.46 (a sign change of the leading error
# term near eps = 1e-3), 5.91, 6.00, then round-off, which levels off at 5e-14 here).
T_ORDER = 0.5  # about 5 nutations of the pole-passage top, each through the pole region
ORDER_EPS = {
    "leapfrog-sundman": (1e-3, 5e-4, 2.5e-4),
    "leapfrog-s4-sundman": (1e-3, 5e-4, 2.5e-4),
    "leapfrog-kl6-sundman": (5e-4, 2.5e-4, 1.25e-4),
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
    assert min(errs) > 1e-12, errs  # truncation, not round-off
    assert abs(slope - m.info.order) < 0.2, (slope, errs)


@pytest.mark.parametrize("name", NAMES)
def test_energy_bounded_over_a_million_steps(name):
    # Reversible, not symplectic: on a reversible integrable motion the energy error of a
    # symmetric method stays bounded (Hairer, Lubich and Wanner, Geometric Numerical
    # Integration, ch. XI, reversible perturbation theory [from memory]); a drift would show as
    # a growth of the error envelope from the first tenth of the run to the last.
    m = BY_NAME[name]
    p = TOP.params()
    y0 = euler_state(TOP, *START)
    e0 = invariants_of(FORM_EULER, y0, p)["energy"]
    eps = {"leapfrog-sundman": 1e-3, "leapfrog-s4-sundman": 4e-3, "leapfrog-kl6-sundman": 8e-3}
    st = m.start(FORM_EULER, p, 0.0, y0, {"step": eps[name]})
    # samples at a spacing that is no multiple of anything in the motion
    horizon = 10**6 * eps[name] * 0.75  # just over 10^6 steps (h is about 0.73 eps here)
    ts = np.linspace(0.0, horizon, 401)[1:]
    errs = []
    for t in ts:
        assert st.advance_to(t) == ST_OK
        errs.append(abs(invariants_of(FORM_EULER, st.y, p)["energy"] - e0) / abs(e0))
    assert int(st.counters[C_STEPS]) > 10**6
    errs = np.array(errs)
    first, last = errs[:40].max(), errs[-40:].max()
    assert last < 2.0 * first, (first, last)
    assert errs.max() < 1e-3


def test_samples_do_not_feed_back():
    # A sample is a side step from the last step point: sampling often or rarely gives the
    # same step sequence and the same bits at common times.
    m = BY_NAME["leapfrog-s4-sundman"]
    a = m.start(FORM_EULER, POLE_TOP.params(), 0.0, pole_state(), {"step": 1e-3})
    b = m.start(FORM_EULER, POLE_TOP.params(), 0.0, pole_state(), {"step": 1e-3})
    for k in range(1, 101):
        assert a.advance_to(k * 1e-3) == ST_OK
    assert b.advance_to(0.1) == ST_OK
    assert np.array_equal(a.y, b.y)
    assert np.array_equal(a.w, b.w)
    assert a.counters[C_STEPS] == b.counters[C_STEPS]
    # each sample away from a step point costs its own kicks (5 for s4), none of the steps'
    assert a.counters[C_FORCE_EVALS] - b.counters[C_FORCE_EVALS] == 5 * 99


def test_the_unfolded_variant_does_not_fold():
    # Stepper.keep_angles_unfolded: phi and psi grow without bound, the step points' too
    m = BY_NAME["leapfrog-sundman"]
    a = m.start(FORM_EULER, POLE_TOP.params(), 0.0, pole_state(), {"step": 1e-3})
    b = m.start(FORM_EULER, POLE_TOP.params(), 0.0, pole_state(), {"step": 1e-3})
    b.keep_angles_unfolded()
    assert a.advance_to(0.2) == ST_OK and b.advance_to(0.2) == ST_OK
    assert abs(b.y[2]) > 4 * math.pi  # psi has turned at 157 rad/s for 0.2 s
    assert abs(a.y[2]) <= math.pi
    assert np.allclose(a.unfolded_y(), b.y, rtol=1e-12, atol=1e-12)


def test_snapshot_restore_is_bit_exact():
    m = BY_NAME["leapfrog-kl6-sundman"]
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


@pytest.mark.parametrize("name", NAMES)
def test_body_form_is_refused_with_a_reason(name):
    m = BY_NAME[name]
    y = np.array([1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 1e-3])
    with pytest.raises(MethodRefused, match="euler form only") as exc:
        m.start(FORM_BODY, TOP.params(), 0.0, y, {"step": 1e-3})
    assert "\n" not in str(exc.value)
    with pytest.raises(MethodRefused, match="euler form only"):
        m.check(TOP, "body", {"step": 1e-3})
    assert not m.info.symplectic  # said honestly: time-reversible, not symplectic
    assert m.info.forms == ("euler",)
