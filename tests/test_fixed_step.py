"""The fixed-step base for plug-ins (integrators/fixed_step.py): the grid, the counters counted by
the base and not by the step, failures, and snapshots."""

import numpy as np
import pytest

from topdrift.integrators import (
    C_EVALS,
    C_STEPS,
    ST_DIVERGED,
    ST_FAILED,
    ST_OK,
    ST_SINGULAR,
    FixedStepMethod,
    MethodInfo,
    MethodRefused,
    SnapshotRefused,
)
from topdrift.models import FORM_BODY, FORM_EULER, RigidBody, body_state, euler_state
from topdrift.models.dynamics import rhs

TOP = RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1))


def info(name):
    return MethodInfo(
        name=name,
        family="external",
        order=1,
        symplectic=False,
        forms=("body", "euler"),
        control="step",
        keeps=(),
        compensated=False,
        description="a test method",
    )


def euler_step(f, t, y, h):
    # The explicit Euler method (common practice): one evaluation per step.
    return y + h * f(y)


def sneaky_step(f, t, y, h):
    # Says nothing and calls the model once behind the base's back, once through f: only the
    # call through f is the step's counted work.
    dy = np.empty_like(y)
    rhs(FORM_BODY, np.ascontiguousarray(y), TOP.params(), dy)
    return y + h * f(y + 0.5 * h * dy)


EULER = FixedStepMethod(info("euler-test"), euler_step)
Y0 = body_state(TOP, 0.3, 0.9, 0.2, 1.0, 0.5, 20.0)


def start(method=EULER, h=1e-3, y0=Y0, form=FORM_BODY):
    return method.start(form, TOP.params(), 0.0, y0, {"step": h})


def test_steps_match_a_hand_loop_and_the_grid_is_the_contracts():
    st = start()
    assert st.advance_to(0.1 * 3) == ST_OK  # 0.30000000000000004: on the grid to round-off
    assert st.t == 0.1 * 3 and st.counters[C_STEPS] == 300 and st.counters[C_EVALS] == 300
    y = Y0.copy()
    for _ in range(300):
        dy = np.empty(7)
        rhs(FORM_BODY, y, TOP.params(), dy)
        y = y + 1e-3 * dy
    np.testing.assert_array_equal(st.y, y)
    with pytest.raises(MethodRefused, match="not on the step grid"):
        st.advance_to(0.3005)
    with pytest.raises(MethodRefused, match="before"):
        st.advance_to(0.2)


def test_the_base_counts_what_the_step_calls_through_f():
    st = start(FixedStepMethod(info("sneaky-test"), sneaky_step))
    assert st.advance_to(0.01) == ST_OK
    assert st.counters[C_EVALS] == 10  # one per step through f; the direct call is not f's


def test_failures_keep_the_last_good_state():
    blow = FixedStepMethod(info("blow-test"), lambda f, t, y, h: y * np.inf if t >= 0.005 else y)
    st = start(blow)
    assert st.advance_to(0.01) == ST_DIVERGED
    assert st.t_fail == pytest.approx(0.005, abs=1e-15) and st.t == st.t_fail
    assert st.counters[C_STEPS] == 5
    np.testing.assert_array_equal(st.y, Y0)
    assert st.advance_to(0.02) == ST_DIVERGED  # stays failed

    def raises(f, t, y, h):
        raise ZeroDivisionError("on purpose")

    st = start(FixedStepMethod(info("raise-test"), raises))
    assert st.advance_to(0.01) == ST_FAILED and "ZeroDivisionError" in st.message
    st = start(FixedStepMethod(info("shape-test"), lambda f, t, y, h: y[:3]))
    assert st.advance_to(0.01) == ST_FAILED and "shape" in st.message

    def to_pole(f, t, y, h):
        z = y.copy()
        z[1] = 0.0  # theta = 0: the pole of the Euler angles
        return z

    y0 = euler_state(TOP, 0.3, 0.9, 0.2, 1.0, 0.5, 20.0)
    st = start(FixedStepMethod(info("pole-test"), to_pole), y0=y0, form=FORM_EULER)
    assert st.advance_to(0.01) == ST_SINGULAR and st.t_fail == 0.0


def test_the_step_cannot_change_the_stepper_state():
    def writes(f, t, y, h):
        y[0] = 5.0  # the state handed in is read-only
        return y

    st = start(FixedStepMethod(info("write-test"), writes))
    assert st.advance_to(0.001) == ST_FAILED and "read-only" in st.message
    np.testing.assert_array_equal(st.y, Y0)


def test_snapshot_restore_is_bit_exact_and_refuses_other_settings():
    a = start()
    a.advance_to(0.25)
    snap = a.snapshot()
    a.advance_to(0.5)
    b = start()
    b.restore(snap)
    assert b.t == 0.25
    b.advance_to(0.5)
    np.testing.assert_array_equal(a.y, b.y)
    np.testing.assert_array_equal(a.counters, b.counters)
    with pytest.raises(SnapshotRefused, match="step"):
        start(h=2e-3).restore(snap)
    with pytest.raises(SnapshotRefused, match="method"):
        start(FixedStepMethod(info("other-test"), euler_step)).restore(snap)


def test_bad_settings_and_infos_are_refused():
    for bad in ({}, {"step": 1}, {"step": -1e-3}, {"step": 1e-3, "order": 2.0}):
        with pytest.raises(MethodRefused):
            EULER.start(FORM_BODY, TOP.params(), 0.0, Y0, bad)
    with pytest.raises(ValueError, match="control"):
        FixedStepMethod(
            MethodInfo("x", "external", 1, False, ("body",), "tolerance", (), False, "x"),
            euler_step,
        )
    with pytest.raises(TypeError):
        FixedStepMethod(info("x"), "not a function")
