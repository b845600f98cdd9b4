"""gbs-dense (integrators/extrapolation/dense_kernel.py) against references outside the suite's
own code: the Lagrange top's exact solution (tests/independent_references.py, elliptic functions
in mpmath) and, for an asymmetric body, the 34-digit mpmath Taylor integration of the same file;
and the one property its dense output is for: the steps do not depend on the output times."""

import numpy as np
import pytest
from independent_references import attitude_error, exact_attitude, taylor_states

from topdrift.integrators import C_EVALS, C_STEPS, ST_OK, MethodRefused, get
from topdrift.integrators.extrapolation.dense_kernel import (
    CT_H_PREV,
    CT_T_OLD,
    DENSE_INV,
    M_MAX,
    work_of,
)
from topdrift.models import RigidBody, body_state, euler_state
from topdrift.models.exact import LagrangeTop
from topdrift.models.forms import FORM_BODY, FORM_EULER

METHOD = get("gbs-dense")
PLAIN = get("gbs")
# The fast top and the asymmetric body of test_gbs.py (our own).
TOP = RigidBody(mass=0.5, inertia=(0.003, 0.003, 0.001), com=(0.0, 0.0, 0.04))
START = (0.0, 0.6, 0.0, 2.0, 0.0, 150.0)
ASYMMETRIC = RigidBody(mass=1.0, inertia=(0.9, 0.75, 0.55), com=(0.02, -0.01, 0.1))
ASYM_START = (0.4, 1.1, -0.3, 1.5, -2.0, 4.0)
RTOLS = np.geomspace(1e-6, 1e-12, 7)
MAKE = {FORM_BODY: body_state, FORM_EULER: euler_state}


def run(method, form, body, y0, times, rtol, **extra):
    st = method.start(form, body.params(), 0.0, y0, {"rtol": rtol, "atol": rtol / 1e3, **extra})
    out = []
    for t in times:
        assert st.advance_to(float(t)) == ST_OK
        out.append(st.unfolded_y())
    return st, np.array(out)


def test_the_end_matching_system_is_the_one_written_in_the_kernel():
    # P(s) = T(s) + s^(M+1) (b0 + b1 s + b2 s^2 + b3 s^3) must take any four end residuals:
    # check DENSE_INV against the power rule directly, at every M the kernel can use.
    rng = np.random.default_rng(3)
    for m in range(-1, M_MAX + 1):
        inv = DENSE_INV[m + 1]
        b = inv @ rng.normal(size=4)
        e = np.arange(m + 1, m + 5)
        q = [sum(b * s**e) for s in (-0.5, 0.5)]
        dq = [sum(b * e * s ** (e - 1.0)) for s in (-0.5, 0.5)]
        got = inv @ np.array([*q, *dq])
        assert np.allclose(got, b, rtol=1e-9, atol=0.0), m


@pytest.mark.parametrize("form", [FORM_BODY, FORM_EULER], ids=["body", "euler"])
def test_samples_between_steps_follow_the_tolerance_lagrange_top(form):
    # 40 samples in 1 s of the fast top, most of them inside steps (about 40 steps in the body
    # form, 20 in the Euler form): every sample within 10 rtol of the exact solution, and the
    # largest error proportional to rtol (HNW I, sec. II.4, from memory; common practice).
    # Measured (rtol 1e-6, 1e-8, 1e-10, 1e-12): body 2.6e-6, 2.3e-8, 3.5e-10, 1.9e-12 (1.9-3.5
    # rtol); euler 6.5e-7, 1.8e-9, 3.2e-11, 1.5e-12 (0.2-1.5 rtol).
    y0 = MAKE[form](TOP, *START)
    times = np.linspace(0.0, 1.0, 41)[1:]
    angles = exact_attitude(LagrangeTop.from_state(TOP, FORM_BODY, body_state(TOP, *START)), times)
    errs = []
    for r in RTOLS:
        _, ys = run(METHOD, form, TOP, y0, times, r)
        errs.append(max(attitude_error(form, y, a) for y, a in zip(ys, angles, strict=True)))
    slope = float(np.polyfit(np.log(RTOLS), np.log(errs), 1)[0])
    assert 0.85 <= slope <= 1.15, (slope, errs)
    assert all(e < 10 * r for e, r in zip(errs, RTOLS, strict=True)), errs


def test_samples_inside_steps_on_an_asymmetric_body():
    # The asymmetric body against the 34-digit mpmath series, 30 samples in 3 s (13-20 steps):
    # relative to |q| = 1 and |m0|, within 10 rtol at rtol 1e-9 and 1e-12 (measured 3.2e-10 and
    # 2.0e-13). Before the polynomial had its own error control, 1.4e-8 at rtol 1e-9: samples
    # near the ends of 0.9 s steps (dense_kernel.py).
    y0 = body_state(ASYMMETRIC, *ASYM_START)
    times = np.linspace(0.0, 3.0, 31)[1:]
    ref = taylor_states(ASYMMETRIC, y0, times)
    scale = np.array([1.0] * 4 + [float(np.linalg.norm(y0[4:]))] * 3)
    for r in (1e-9, 1e-12):
        st, ys = run(METHOD, FORM_BODY, ASYMMETRIC, y0, times, r)
        assert st.counters[C_STEPS] < len(times)  # samples do fall inside steps
        err = float(np.max(np.abs(ys - ref) / scale))
        assert err < 10 * r, (r, err)


@pytest.mark.parametrize("form", [FORM_BODY, FORM_EULER], ids=["body", "euler"])
def test_the_steps_do_not_depend_on_the_output_times(form):
    # The point of the dense output: one sample or 97, the accepted steps are the same, so the
    # state at the horizon (the last step is clipped to it) is the same to the bit, and so are
    # the step and evaluation counts. gbs, which shortens steps, is the contrast.
    y0 = MAKE[form](TOP, *START)
    few, y_few = run(METHOD, form, TOP, y0, [1.0], 1e-10, horizon=1.0)
    many, y_many = run(METHOD, form, TOP, y0, np.linspace(0.0, 1.0, 98)[1:], 1e-10, horizon=1.0)
    assert y_few[-1].tobytes() == y_many[-1].tobytes()
    assert few.counters[C_STEPS] == many.counters[C_STEPS]
    assert few.counters[C_EVALS] == many.counters[C_EVALS]
    plain_few, _ = run(PLAIN, form, TOP, y0, [1.0], 1e-10)
    plain_many, _ = run(PLAIN, form, TOP, y0, np.linspace(0.0, 1.0, 98)[1:], 1e-10)
    assert plain_many.counters[C_STEPS] > plain_few.counters[C_STEPS]


def test_a_sample_inside_a_step_is_served_without_stepping():
    # Two outputs inside one step: the second costs no evaluation, and it is the polynomial's
    # value (between the step's ends, not the step's end).
    y0 = body_state(TOP, *START)
    st = METHOD.start(FORM_BODY, TOP.params(), 0.0, y0, {"rtol": 1e-9, "atol": 1e-12})
    assert st.advance_to(0.3) == ST_OK
    t_old, h = st.ctrl[CT_T_OLD], st.ctrl[CT_H_PREV]
    t_in = t_old + 0.9 * h
    assert 0.3 < t_in < st.t_internal
    evals = int(st.counters[C_EVALS])
    assert st.advance_to(t_in) == ST_OK
    assert int(st.counters[C_EVALS]) == evals
    angles = exact_attitude(LagrangeTop.from_state(TOP, FORM_BODY, y0), [t_in])[0]
    assert attitude_error(FORM_BODY, st.unfolded_y(), angles) < 1e-8


def test_counters_add_up_to_the_lines_computed():
    # Line j costs n_j = 4 j - 2 evaluations, so an accepted step ending in line j costs at least
    # A_j = 1 + 2 j^2 (the work count of HNW II.9 for this sequence, f(y) once).
    y0 = body_state(TOP, *START)
    st, _ = run(METHOD, FORM_BODY, TOP, y0, [1.0], 1e-9)
    steps, evals = int(st.counters[C_STEPS]), int(st.counters[C_EVALS])
    assert steps > 0
    assert evals >= 2 + steps * work_of(2)


@pytest.mark.parametrize("form", [FORM_BODY, FORM_EULER], ids=["body", "euler"])
def test_snapshot_inside_a_step_restores_to_the_same_bits(form):
    y0 = MAKE[form](TOP, *START)
    a, _ = run(METHOD, form, TOP, y0, [0.37], 1e-11)
    assert a.t_internal > a.t  # the snapshot is taken between a step's ends
    snap = a.snapshot()
    b = METHOD.start(form, TOP.params(), 0.0, y0, {"rtol": 1e-11, "atol": 1e-14})
    b.restore(snap)
    for t in (0.371, 0.61, 1.3):
        assert a.advance_to(t) == b.advance_to(t) == ST_OK
        assert a.y.tobytes() == b.y.tobytes()
        assert a.ctrl.tobytes() == b.ctrl.tobytes()
    assert np.array_equal(a.counters, b.counters) and np.array_equal(a.turns, b.turns)


def test_refuses_a_time_past_the_horizon_and_a_horizon_before_the_start():
    y0 = body_state(TOP, *START)
    s = {"rtol": 1e-8, "atol": 1e-11}
    st = METHOD.start(FORM_BODY, TOP.params(), 0.0, y0, {**s, "horizon": 1.0})
    assert st.advance_to(1.0) == ST_OK and st.t_internal == 1.0
    with pytest.raises(MethodRefused, match="past the horizon"):
        st.advance_to(1.5)
    with pytest.raises(MethodRefused, match="later than the start"):
        METHOD.start(FORM_BODY, TOP.params(), 0.0, y0, {**s, "horizon": 0.0})
