"""First-order engine schemes (integrators/engine/): measured order 1 against references that
share nothing with them, the energy law of each, why none is claimed symplectic, the counters,
and the stepper contract (grid, direction, form, resume to the same bits)."""

import numpy as np
import pytest
from demo_bodies import GENERAL, LAGRANGE, state
from measured_order import measured_order

from topdrift.integrators import C_EVALS, C_FORCE_EVALS, C_STEPS, ST_OK, MethodRefused, get
from topdrift.models import FORM_BODY, FORM_EULER, RigidBody
from topdrift.models.invariants import invariants_of

ENGINES = ["engine-euler", "engine-semi-implicit", "engine-implicit-gyro"]
# A torque-free body with three different moments (a demo body of our own).
FREE = RigidBody(mass=1.0, inertia=(1.0, 0.8, 0.6))

# --- order -----------------------------------------------------------------------------------

ORDER_START = (0.0, 1.0, 0.0, 0.3, 0.5, 5.0)
ORDER_TIMES = np.linspace(0.4, 2.0, 5)
# Five doublings: errors from about 1e-1 to 1e-3, far above the references' own (a few ulps).
ORDER_STEPS = np.array([50, 100, 200, 400, 800, 1600])


@pytest.mark.parametrize("body", [LAGRANGE, GENERAL], ids=["lagrange", "asymmetric"])
@pytest.mark.parametrize("name", ENGINES)
def test_measured_order_is_one(name, body):
    # Global error, the largest over the sample times, against a reference of no method family
    # here (tests/independent_references.py): the exact solution of the Lagrange top (compared in
    # the quaternion), a 34-digit mpmath Taylor series for the asymmetric heavy body.
    y0 = state(FORM_BODY, body, ORDER_START)
    slope, errors = measured_order(name, FORM_BODY, body, y0, ORDER_TIMES, ORDER_STEPS)
    assert abs(slope - 1.0) < 0.2, (slope, errors)


# --- the energy law of each scheme -----------------------------------------------------------


def energy_errors(name, body, h, t_end, checkpoints=8):
    """Relative energy error at `checkpoints` equally spaced times up to t_end."""
    p = body.params()
    y0 = state(FORM_BODY, body, (0.0, 0.8, 0.0, 0.5, 0.3, 6.0))
    e0 = invariants_of(FORM_BODY, y0, p)["energy"]
    st = get(name).start(FORM_BODY, p, 0.0, y0, {"step": h})
    out = []
    for t in np.linspace(0.0, t_end, checkpoints + 1)[1:]:
        assert st.advance_to(float(t)) == ST_OK
        out.append((invariants_of(FORM_BODY, st.y, p)["energy"] - e0) / abs(e0))
    return np.array(out)


@pytest.mark.parametrize("body", [LAGRANGE, FREE], ids=["heavy", "torque-free"])
def test_explicit_euler_energy_grows_faster_than_linearly(body):
    # Explicit Euler multiplies the kinetic energy of a rotation by about 1 + (h w)^2 every step
    # (common practice: its stability region holds no part of the imaginary axis), so the error
    # grows without bound and faster than linearly: each eighth of the run adds more than the last.
    e = energy_errors("engine-euler", body, 0.005, 100.0)
    assert np.all(e > 0.0) and np.all(np.diff(e) > 0.0), e
    increments = np.diff(np.concatenate([[0.0], e]))
    assert np.all(np.diff(increments) > 0.0), e
    assert e[-1] > 8.0 * e[0], e


def test_semi_implicit_energy_is_bounded_on_a_torque_free_body():
    # Torque-free, the semi-implicit scheme turns m about w without changing |m| (a rotation), so
    # the energy stays between |m|^2 / (2 I_max) and |m|^2 / (2 I_min): bounded. Measured: it
    # settles within the first eighth, and the second half adds nothing.
    e = energy_errors("engine-semi-implicit", FREE, 0.01, 200.0)
    half = len(e) // 2
    assert np.max(np.abs(e[half:])) <= 1.02 * np.max(np.abs(e[:half])), e
    # The contrast, same body and step: explicit Euler, over a quarter of the time (it overflows
    # before 200 s).
    grows = energy_errors("engine-euler", FREE, 0.01, 50.0)
    assert grows[-1] > 10.0 * np.max(np.abs(e)), (grows, e)


def test_semi_implicit_energy_drifts_linearly_in_a_gravity_field_at_a_rate_proportional_to_h():
    # With a torque the scheme is not symplectic (test below), and its energy error is not
    # bounded: measured, it drifts linearly in t at a rate proportional to h (first order), the
    # law this test pins down. Halving the step halves the rate.
    t_end = 200.0
    times = np.linspace(0.0, t_end, 9)[1:]
    rates = []
    for h in (0.01, 0.005):
        e = energy_errors("engine-semi-implicit", LAGRANGE, h, t_end)
        rate, offset = np.polyfit(times, e, 1)
        assert rate > 0.0
        assert np.max(np.abs(e - (rate * times + offset))) < 0.05 * (rate * t_end), e  # a line
        rates.append(rate)
    assert 1.8 < rates[0] / rates[1] < 2.2, rates


@pytest.mark.parametrize("body", [LAGRANGE, FREE], ids=["heavy", "torque-free"])
def test_implicit_gyroscopic_scheme_removes_energy(body):
    # The implicit treatment of w x I w is a backward-Euler step in the rate: numerical damping,
    # the reason engines use it (it stays stable where the explicit term does not). The energy
    # error is negative throughout and ends below where it started.
    e = energy_errors("engine-implicit-gyro", body, 0.01, 200.0)
    assert np.all(e < 0.0), e
    assert e[-1] < e[0], e


# --- not symplectic ---------------------------------------------------------------------------


def _area_ratio(name, m, h, eps=1e-6):
    """Ratio of areas of a small patch of the sphere |m| = const of FREE after one step of
    `name` (a Poisson map keeps it 1: the sphere's area form is the symplectic form of the
    coadjoint orbit; common practice)."""
    p = FREE.params()

    def step(mm):
        y = np.concatenate([[1.0, 0.0, 0.0, 0.0], mm])
        st = get(name).start(FORM_BODY, p, 0.0, y, {"step": h})
        assert st.advance_to(h) == ST_OK
        return st.y[4:]

    r = np.linalg.norm(m)
    t1 = np.cross(m, [0.3, -0.7, 0.2])
    t1 /= np.linalg.norm(t1)
    t2 = np.cross(m / r, t1)
    m0 = step(m)
    a = (step(r * (m + eps * t1) / np.linalg.norm(m + eps * t1)) - m0) / eps
    b = (step(r * (m + eps * t2) / np.linalg.norm(m + eps * t2)) - m0) / eps
    return float(np.dot(np.cross(a, b), m0 / np.linalg.norm(m0)))


def test_semi_implicit_is_not_a_poisson_map_and_leapfrog_is():
    # The metadata says symplectic=False; this is why. One step of 0.1 s from three momenta: the
    # semi-implicit scheme changes the area by 1e-4 or more, the body-form leapfrog (a
    # composition of exact flows) keeps it to the finite differences' accuracy (~1e-6).
    for m in ([0.3, 1.0, -0.5], [1.0, 0.2, 0.4], [-0.2, 0.5, 1.1]):
        m = np.array(m)
        assert abs(_area_ratio("engine-semi-implicit", m, 0.1) - 1.0) > 1e-4
        assert abs(_area_ratio("leapfrog", m, 0.1) - 1.0) < 1e-5
    for name in ENGINES:
        assert not get(name).info.symplectic


# --- metadata, counters, contract ------------------------------------------------------------


def test_registry_metadata():
    for name in ENGINES:
        info = get(name).info
        assert info.family == "first-order-engine"
        assert info.order == 1
        assert info.forms == ("body",)
        assert info.control == "step"
        assert info.keeps == ()
    assert get("engine-euler").info.keeps_roundoff == ("norm", "p_psi")
    assert get("engine-semi-implicit").info.keeps_roundoff == ("norm", "p_phi")
    assert get("engine-implicit-gyro").info.keeps_roundoff == ("norm", "p_psi")


@pytest.mark.parametrize("name", ENGINES)
def test_one_torque_per_step(name):
    st = get(name).start(
        FORM_BODY, GENERAL.params(), 0.0, state(FORM_BODY, GENERAL), {"step": 0.01}
    )
    assert st.advance_to(1.0) == ST_OK
    assert st.counters[C_STEPS] == 100
    assert st.counters[C_EVALS] == 100 and st.counters[C_FORCE_EVALS] == 100


@pytest.mark.parametrize("name", ENGINES)
def test_resume_and_output_times_do_not_change_the_bits(name):
    p, y0 = GENERAL.params(), state(FORM_BODY, GENERAL)
    whole = get(name).start(FORM_BODY, p, 0.0, y0, {"step": 0.01})
    assert whole.advance_to(2.0) == ST_OK
    a = get(name).start(FORM_BODY, p, 0.0, y0, {"step": 0.01})
    assert a.advance_to(0.37) == ST_OK
    snap = a.snapshot()
    b = get(name).start(FORM_BODY, p, 0.0, y0, {"step": 0.01})
    b.restore(snap)
    assert b.advance_to(1.1) == ST_OK and b.advance_to(2.0) == ST_OK
    assert np.array_equal(b.y, whole.y)
    assert np.array_equal(b.counters, whole.counters)


@pytest.mark.parametrize("name", ENGINES)
def test_refuses_what_it_cannot_do(name):
    m = get(name)
    p, y0 = LAGRANGE.params(), state(FORM_BODY, LAGRANGE)
    with pytest.raises(MethodRefused, match="body form only"):
        m.start(FORM_EULER, p, 0.0, state(FORM_EULER, LAGRANGE), {"step": 0.01})
    with pytest.raises(MethodRefused, match="euler"):
        m.check(LAGRANGE, "euler", {"step": 0.01})
    st = m.start(FORM_BODY, p, 0.0, y0, {"step": 0.01})
    with pytest.raises(MethodRefused, match="not on the step grid"):
        st.advance_to(0.015)
    assert st.advance_to(0.5) == ST_OK
    with pytest.raises(MethodRefused, match="before the current time"):
        st.advance_to(0.2)
    with pytest.raises(MethodRefused):
        m.start(FORM_BODY, p, 0.0, y0, {"step": -0.01})


def test_a_non_finite_step_is_diverged_and_not_committed():
    # Explicit Euler at a step far beyond its stability limit: the state grows until it
    # overflows; the stepper stops with the last finite state.
    p, y0 = FREE.params(), state(FORM_BODY, FREE, (0.0, 0.8, 0.0, 40.0, 30.0, 60.0))
    st = get("engine-euler").start(FORM_BODY, p, 0.0, y0, {"step": 0.5})
    status = st.advance_to(5000.0)
    assert status != ST_OK
    assert np.all(np.isfinite(st.y))
    assert st.t == st.t_fail == 0.5 * st.counters[C_STEPS]
