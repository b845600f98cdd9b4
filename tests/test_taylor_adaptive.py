"""taylor-adaptive (integrators/taylor/) against references outside the suite's own code: the
Lagrange top's exact solution (tests/independent_references.py: elliptic functions in mpmath)
and, for an asymmetric body, the 34-digit mpmath Taylor integration of the same file."""

import numpy as np
import pytest
from independent_references import attitude_error, exact_attitude, taylor_states

from topdrift.benchmarks.cases.library import load_case
from topdrift.integrators import C_REJECTED, C_STEPS, ST_OK, MethodRefused, get
from topdrift.models import RigidBody, body_state
from topdrift.models.exact import LagrangeTop
from topdrift.models.forms import FORM_BODY, FORM_EULER

METHOD = get("taylor-adaptive")
# A fast top of our own (as in test_adaptive_orders.py).
TOP = RigidBody(mass=0.5, inertia=(0.003, 0.003, 0.001), com=(0.0, 0.0, 0.04))
START = (0.0, 0.6, 0.0, 2.0, 0.0, 150.0)
ASYMMETRIC = RigidBody(mass=1.0, inertia=(0.9, 0.75, 0.55), com=(0.02, -0.01, 0.1))


def run(body, y0, times, rtol, atol=None):
    st = METHOD.start(FORM_BODY, body.params(), 0.0, y0, {"rtol": rtol, "atol": atol or rtol / 1e3})
    out = []
    for t in times:
        assert st.advance_to(float(t)) == ST_OK
        out.append(st.y.copy())
    return st, np.array(out)


def test_error_is_proportional_to_the_tolerance():
    # Tolerance proportionality: the global error goes as rtol^1 for a code whose local error
    # per unit step follows the tolerance (HNW I, sec. II.4, from memory; common practice).
    # Measured exponent 1.05 over rtol 1e-4 .. 1e-12 (1 s of the fast top, 140-205 steps).
    y0 = body_state(TOP, *START)
    angles = exact_attitude(LagrangeTop.from_state(TOP, FORM_BODY, y0), [1.0])[0]
    rtols = np.geomspace(1e-4, 1e-12, 9)
    errs = [attitude_error(FORM_BODY, run(TOP, y0, [1.0], r)[1][-1], angles) for r in rtols]
    slope = float(np.polyfit(np.log(rtols), np.log(errs), 1)[0])
    assert 0.85 <= slope <= 1.15, (slope, errs)
    assert all(e < 10 * r for e, r in zip(errs, rtols, strict=True)), errs


def test_looping_nutation_to_1e13_over_100_nutation_periods():
    # The library's looping top against its exact solution in closed form, 200 samples over 100
    # nutation periods (8.3 s, about 1300 rad of spin): measured 8.3e-14 rad at rtol 1e-15
    # (950 steps of order 19); the bound is the 1e-13.
    case = load_case("looping-nutation")
    y0 = case.body_state()
    top = LagrangeTop.from_state(case.body, FORM_BODY, y0)
    times = np.linspace(0.0, 100 * top.nutation_period, 201)[1:]
    angles = exact_attitude(top, times)
    _, ys = run(case.body, y0, times, 1e-15, 1e-18)
    err = max(attitude_error(FORM_BODY, y, a) for y, a in zip(ys, angles, strict=True))
    assert err < 1e-13, err


def test_asymmetric_body_against_the_mpmath_series():
    # No closed form: an asymmetric body with its centre of mass off every axis, against the
    # 34-digit Taylor integration in mpmath (independent_references.taylor_states): measured
    # 8.9e-16 relative over 3 s (20 steps at rtol 1e-14); bound 1e-14.
    y0 = body_state(ASYMMETRIC, 0.4, 1.1, -0.3, 1.5, -2.0, 4.0)
    times = [0.5, 1.0, 2.0, 3.0]
    ref = taylor_states(ASYMMETRIC, y0, times)
    _, ys = run(ASYMMETRIC, y0, times, 1e-14, 1e-17)
    scale = np.array([1.0] * 4 + [float(np.linalg.norm(y0[4:]))] * 3)
    assert np.max(np.abs(ys - ref) / scale) < 1e-14, np.max(np.abs(ys - ref) / scale)


def test_steps_do_not_depend_on_the_output_times():
    # The house rule (integrators/base.py): sampled densely or not, the same steps and the same
    # bits at the end (the end is evaluated from the same series either way).
    y0 = body_state(TOP, *START)
    dense, ys = run(TOP, y0, np.linspace(0.0, 1.0, 97)[1:], 1e-10)
    sparse, y1 = run(TOP, y0, [1.0], 1e-10)
    assert dense.counters[C_STEPS] == sparse.counters[C_STEPS] > 0
    assert dense.counters[C_REJECTED] == 0
    assert ys[-1].tobytes() == y1[-1].tobytes()


def test_snapshot_restores_to_the_same_bits():
    y0 = body_state(ASYMMETRIC, 0.4, 1.1, -0.3, 1.5, -2.0, 4.0)
    a, _ = run(ASYMMETRIC, y0, [0.7], 1e-12)
    snap = a.snapshot()
    b = METHOD.start(FORM_BODY, ASYMMETRIC.params(), 0.0, y0, {"rtol": 1e-12, "atol": 1e-15})
    b.restore(snap)
    for t in (1.3, 2.9):
        assert a.advance_to(t) == b.advance_to(t) == ST_OK
        assert a.y.tobytes() == b.y.tobytes()
        assert a.ctrl.tobytes() == b.ctrl.tobytes()
    assert np.array_equal(a.counters, b.counters)


def test_refuses_the_euler_form_and_a_tolerance_below_epsilon():
    y0 = body_state(TOP, *START)
    with pytest.raises(MethodRefused, match="body form"):
        METHOD.start(FORM_EULER, TOP.params(), 0.0, y0[:6], {"rtol": 1e-8, "atol": 1e-10})
    with pytest.raises(MethodRefused, match="machine epsilon"):
        METHOD.start(FORM_BODY, TOP.params(), 0.0, y0, {"rtol": 1e-17, "atol": 1e-20})
