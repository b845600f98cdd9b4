"""gbs (integrators/extrapolation/) against references outside the suite's own code: the Lagrange
top's exact solution (tests/independent_references.py: elliptic functions in mpmath) and, for an
asymmetric body, the 34-digit mpmath Taylor integration of the same file."""

import numpy as np
import pytest
from independent_references import attitude_error, exact_attitude, taylor_states

from topdrift.benchmarks.cases.library import load_case
from topdrift.integrators import C_EVALS, C_REJECTED, C_STEPS, ST_OK, MethodRefused, get
from topdrift.integrators.extrapolation.kernel import work_of
from topdrift.models import RigidBody, body_state, euler_state
from topdrift.models.exact import LagrangeTop
from topdrift.models.forms import FORM_BODY, FORM_EULER

METHOD = get("gbs")
# A fast top of our own (as in test_adaptive_orders.py).
TOP = RigidBody(mass=0.5, inertia=(0.003, 0.003, 0.001), com=(0.0, 0.0, 0.04))
START = (0.0, 0.6, 0.0, 2.0, 0.0, 150.0)
ASYMMETRIC = RigidBody(mass=1.0, inertia=(0.9, 0.75, 0.55), com=(0.02, -0.01, 0.1))
ASYM_START = (0.4, 1.1, -0.3, 1.5, -2.0, 4.0)
RTOLS = np.geomspace(1e-6, 1e-12, 7)


def run(form, body, y0, times, rtol, atol=None):
    st = METHOD.start(form, body.params(), 0.0, y0, {"rtol": rtol, "atol": atol or rtol / 1e3})
    out = []
    for t in times:
        assert st.advance_to(float(t)) == ST_OK
        out.append(st.unfolded_y())
    return st, np.array(out)


def exponent(rtols, errs):
    return float(np.polyfit(np.log(rtols), np.log(errs), 1)[0])


@pytest.mark.parametrize("form", [FORM_BODY, FORM_EULER], ids=["body", "euler"])
def test_error_is_proportional_to_the_tolerance_lagrange_top(form):
    # Tolerance proportionality: the global error goes as rtol^1 for a code whose local error
    # per unit step follows the tolerance (HNW I, sec. II.4, from memory; common practice).
    # Measured exponents 1.01 (body) and 1.00 (euler) over rtol 1e-6 .. 1e-12 on 1 s of the
    # fast top, errors 1.4-1.7 rtol (body, 57-71 steps) and 0.09-0.53 rtol (euler, 28-38).
    make = body_state if form == FORM_BODY else euler_state
    y0 = make(TOP, *START)
    angles = exact_attitude(LagrangeTop.from_state(TOP, FORM_BODY, body_state(TOP, *START)), [1.0])
    errs = [attitude_error(form, run(form, TOP, y0, [1.0], r)[1][-1], angles[0]) for r in RTOLS]
    slope = exponent(RTOLS, errs)
    assert 0.85 <= slope <= 1.15, (slope, errs)
    assert all(e < 10 * r for e, r in zip(errs, RTOLS, strict=True)), errs


def test_error_is_proportional_to_the_tolerance_asymmetric_body():
    # The same law on a body with no closed form (I1 != I2, centre of mass off every axis),
    # against the 34-digit mpmath Taylor series (independent_references.taylor_states), the
    # error relative to |q| = 1 and |m0|: measured exponent 0.94 over rtol 1e-6 .. 1e-12,
    # errors 0.35-2.3 rtol.
    y0 = body_state(ASYMMETRIC, *ASYM_START)
    ref = taylor_states(ASYMMETRIC, y0, [3.0])[0]
    scale = np.array([1.0] * 4 + [float(np.linalg.norm(y0[4:]))] * 3)
    errs = [
        float(np.max(np.abs(run(FORM_BODY, ASYMMETRIC, y0, [3.0], r)[1][-1] - ref) / scale))
        for r in RTOLS
    ]
    slope = exponent(RTOLS, errs)
    assert 0.85 <= slope <= 1.15, (slope, errs)
    assert all(e < 10 * r for e, r in zip(errs, RTOLS, strict=True)), errs


def test_asymmetric_body_against_the_mpmath_series():
    # Samples of the asymmetric body against the 34-digit mpmath series: measured 6.3e-14
    # relative over 3 s at rtol 1e-13 (13 steps); bound 1e-13.
    y0 = body_state(ASYMMETRIC, *ASYM_START)
    times = [0.5, 1.0, 2.0, 3.0]
    ref = taylor_states(ASYMMETRIC, y0, times)
    _, ys = run(FORM_BODY, ASYMMETRIC, y0, times, 1e-13, 1e-16)
    scale = np.array([1.0] * 4 + [float(np.linalg.norm(y0[4:]))] * 3)
    assert np.max(np.abs(ys - ref) / scale) < 1e-13, np.max(np.abs(ys - ref) / scale)


def looping_errors(form, rtol, periods):
    """Largest attitude error against the exact solution, 2 samples a nutation period."""
    case = load_case("looping-nutation")
    yb = case.body_state()
    top = LagrangeTop.from_state(case.body, FORM_BODY, yb)
    y0 = yb if form == FORM_BODY else case.euler_state()
    times = np.linspace(0.0, periods * top.nutation_period, 2 * periods + 1)[1:]
    angles = exact_attitude(top, times)
    _, ys = run(form, case.body, y0, times, rtol)
    return max(attitude_error(form, y, a) for y, a in zip(ys, angles, strict=True))


# The bound, 1e-13 over 100 nutation periods of the library's looping top (8.3 s,
# about 1300 rad of spin), is NOT met: the error grows as t^2 (a non-symplectic method's energy
# error turns into a phase error), measured 3.0e-12 (body) and 1.0e-11 (euler) rad at rtol
# 2.5e-14, just above the floor, and it stops falling near 1e-12 below the floor (round-off,
# kernel.py). Kept as a strict expected failure: it fails the day it passes, and the claim can
# then be made.
@pytest.mark.xfail(strict=True, reason="measured 3e-12 rad at the rtol floor: see above")
@pytest.mark.parametrize("form", [FORM_BODY, FORM_EULER], ids=["body", "euler"])
def test_looping_nutation_to_1e13_over_100_nutation_periods(form):
    err = looping_errors(form, 2.5e-14, 100)
    assert err < 1e-13, err


def test_samples_land_on_the_output_times_and_cost_about_one_step_each():
    # No dense output: a step that would pass an output time is shortened to end on it. The
    # state there is then a step's end, as accurate as any other (same bound as the sparse
    # run's error, tolerance proportionality above), and the longer proposal survives the cut,
    # so 96 samples cost at most about one step each on top of the sparse run's steps.
    y0 = body_state(TOP, *START)
    angles = exact_attitude(LagrangeTop.from_state(TOP, FORM_BODY, y0), [1.0])[0]
    dense, ys = run(FORM_BODY, TOP, y0, np.linspace(0.0, 1.0, 97)[1:], 1e-10)
    sparse, y1 = run(FORM_BODY, TOP, y0, [1.0], 1e-10)
    assert dense.t == sparse.t == 1.0
    n_dense, n_sparse = dense.counters[C_STEPS], sparse.counters[C_STEPS]
    assert n_sparse < n_dense <= n_sparse + 96 + 5, (n_dense, n_sparse)
    e_dense = attitude_error(FORM_BODY, ys[-1], angles)
    e_sparse = attitude_error(FORM_BODY, y1[-1], angles)
    assert e_dense < 10 * 1e-10 and e_sparse < 10 * 1e-10, (e_dense, e_sparse)


def test_counters_add_up_to_the_lines_computed():
    # Every evaluation counted (integrators/base.py): line j of an attempt costs n_j = 2 j, so an
    # accepted step that ends in line j costs at least A_j = 1 + j (j + 1) evaluations (HNW II.9
    # work count, f(y) once) and at most that of K_MAX - 1 lines plus the rejected attempts.
    y0 = body_state(TOP, *START)
    st, _ = run(FORM_BODY, TOP, y0, [1.0], 1e-9)
    steps, rej, evals = (int(st.counters[i]) for i in (C_STEPS, C_REJECTED, C_EVALS))
    assert steps > 0
    assert evals >= 2 + steps * work_of(2)
    assert evals <= 2 + (steps + rej) * work_of(10)


@pytest.mark.parametrize("form", [FORM_BODY, FORM_EULER], ids=["body", "euler"])
def test_snapshot_restores_to_the_same_bits(form):
    y0 = (body_state if form == FORM_BODY else euler_state)(TOP, *START)
    a, _ = run(form, TOP, y0, [0.37], 1e-11)
    snap = a.snapshot()
    b = METHOD.start(form, TOP.params(), 0.0, y0, {"rtol": 1e-11, "atol": 1e-14})
    b.restore(snap)
    for t in (0.61, 1.3):
        assert a.advance_to(t) == b.advance_to(t) == ST_OK
        assert a.y.tobytes() == b.y.tobytes()
        assert a.ctrl.tobytes() == b.ctrl.tobytes()
    assert np.array_equal(a.counters, b.counters) and np.array_equal(a.turns, b.turns)


def test_refuses_a_tolerance_below_the_floor_and_a_time_in_the_past():
    y0 = body_state(TOP, *START)
    with pytest.raises(MethodRefused, match="100 machine epsilons"):
        METHOD.start(FORM_BODY, TOP.params(), 0.0, y0, {"rtol": 2e-14, "atol": 1e-18})
    st = METHOD.start(FORM_BODY, TOP.params(), 0.0, y0, {"rtol": 1e-8, "atol": 1e-11})
    assert st.advance_to(0.2) == ST_OK
    with pytest.raises(MethodRefused, match="before the current time"):
        st.advance_to(0.1)
