"""rk4 and rk4-kahan: measured order, the step grid, snapshots, failures, energy drift."""

from __future__ import annotations

import math

import numpy as np
import pytest
from demo_bodies import FAST_TOP, fast_top_energy_trend
from demo_bodies import fast_top_reference as reference
from demo_bodies import fast_top_start as y_start
from independent_references import attitude_error, exact_attitude

from topdrift.integrators import (
    C_EVALS,
    C_STEPS,
    ST_DIVERGED,
    ST_OK,
    ST_SINGULAR,
    MethodRefused,
    get,
)
from topdrift.integrators.rk.tableaux import RK4
from topdrift.models import FORM_BODY, FORM_EULER, euler_state
from topdrift.models.exact import LagrangeTop

TOP = FAST_TOP  # see demo_bodies.py
P = TOP.params()
METHODS = ["rk4", "rk4-kahan"]


def test_table_is_the_classical_method():
    # Kutta (1901); HNW I, sec. II.1, Table 1.2 [from memory]: c = (0, 1/2, 1/2, 1), b = (1, 2, 2,
    # 1)/6.
    assert np.array_equal(RK4.c, [0.0, 0.5, 0.5, 1.0])
    assert np.array_equal(RK4.b * 6.0, [1.0, 2.0, 2.0, 1.0])
    assert RK4.a[1, 0] == 0.5 and RK4.a[2, 1] == 0.5 and RK4.a[3, 2] == 1.0
    assert np.count_nonzero(RK4.a[:4]) == 3
    assert np.array_equal(RK4.a[4, :4], RK4.b)


def test_metadata():
    for name, comp in (("rk4", False), ("rk4-kahan", True)):
        info = get(name).info
        assert (info.family, info.order, info.control) == ("explicit-rk", 4, "step")
        assert info.forms == ("body", "euler")
        assert info.compensated is comp
        assert not info.symplectic
        assert info.keeps == () and info.keeps_roundoff == ("p_psi",)


@pytest.mark.parametrize("name", METHODS)
@pytest.mark.parametrize("form", [FORM_BODY, FORM_EULER], ids=["body", "euler"])
def test_measured_order_is_four(name, form):
    # Global error at t = 1 against the exact solution (tests/independent_references.py; no
    # Runge-Kutta method involved), in the attitude, over a decade of steps; the log-log slope is
    # the order, 4 for the classical method (HNW I, sec. II.3, Thm. 3.6, from memory). The Euler
    # form is smoother here (the fast spin is a nearly linear psi), so its decade sits at larger
    # steps.
    t_end = 1.0
    top = LagrangeTop.from_state(TOP, form, y_start(form))
    angles = exact_attitude(top, [t_end])[0]
    per_unit = (
        [1000, 1600, 2500, 4000, 6300, 10000]
        if form == FORM_BODY
        else [160, 250, 400, 630, 1000, 1600]
    )
    steps = 1.0 / np.array(per_unit)
    errs = []
    for h in steps:
        st = get(name).start(form, P, 0.0, y_start(form), {"step": float(h)})
        assert st.advance_to(t_end) == ST_OK
        errs.append(attitude_error(form, st.y, angles))
    slope = np.polyfit(np.log(steps), np.log(errs), 1)[0]
    assert abs(slope - 4.0) < 0.2, (slope, errs)
    assert errs[-1] > 1e3 * 1e-14  # still far above the exact solution's own error


def test_kahan_changes_only_the_rounding():
    # Same method: at a step where truncation error dominates, the two agree far below it.
    a = get("rk4").start(FORM_BODY, P, 0.0, y_start(FORM_BODY), {"step": 1e-3})
    b = get("rk4-kahan").start(FORM_BODY, P, 0.0, y_start(FORM_BODY), {"step": 1e-3})
    a.advance_to(2.0)
    b.advance_to(2.0)
    assert not np.array_equal(a.y, b.y)
    assert np.abs(a.y - b.y).max() < 1e-12


def test_kahan_reduces_round_off():
    # Round-off from adding small increments to a large state grows with the number of steps;
    # compensated summation (Kahan 1965) removes most of it. At h = 2e-6 the truncation error
    # of RK4 (~1e-18 here) is below round-off, so the error against the reference is round-off.
    # Higham, Accuracy and Stability of Numerical Algorithms, sec. 4.3 [from memory] (common
    # practice). The large state is psi (75 rad at t = 0.5), so this is measured on the
    # unfolded variant, whose psi rounds to ulp(psi) every step.
    t_end = 0.5
    y_ref = reference(FORM_EULER, t_end)
    errs = {}
    for name in METHODS:
        st = get(name).start(FORM_EULER, P, 0.0, y_start(FORM_EULER), {"step": 2e-6})
        st.keep_angles_unfolded()
        st.advance_to(t_end)
        errs[name] = np.abs(st.y - y_ref).max()
    assert errs["rk4-kahan"] < 0.2 * errs["rk4"], errs


def test_folded_angles_remove_the_round_off_of_a_large_psi():
    # Folded to (-pi, pi] every step (models/turns.py), psi rounds to ulp(pi), not ulp(75):
    # the plain method's psi error then falls to the level compensated summation reaches
    # (the same reference and step as above; both errors are then the reference's floor and
    # the other components' round-off, within a factor 2 of each other).
    t_end = 0.5
    y_ref = reference(FORM_EULER, t_end)
    psi_err = {}
    for name in METHODS:
        st = get(name).start(FORM_EULER, P, 0.0, y_start(FORM_EULER), {"step": 2e-6})
        st.advance_to(t_end)
        assert abs(st.y[2]) <= math.pi and st.turns[1] == 12  # 75.3 rad = 12 turns + 0.03
        psi_err[name] = abs(st.unfolded_y()[2] - y_ref[2])
    assert psi_err["rk4"] < 2.0 * psi_err["rk4-kahan"] + 2.0 * np.spacing(y_ref[2]), psi_err


@pytest.mark.parametrize("name", METHODS)
def test_step_grid(name):
    st = get(name).start(FORM_BODY, P, 0.0, y_start(FORM_BODY), {"step": 1e-3})
    assert st.advance_to(0.1 * 3) == ST_OK  # 0.30000000000000004: on the grid to round-off
    assert st.t == 0.1 * 3 and st.counters[C_STEPS] == 300
    assert st.counters[C_EVALS] == 4 * 300
    with pytest.raises(MethodRefused, match="not on the step grid"):
        st.advance_to(0.3005)
    with pytest.raises(MethodRefused, match="before"):
        st.advance_to(0.2)
    assert st.advance_to(0.1 * 3 + 0.1 * 7) == ST_OK
    assert st.counters[C_STEPS] == 1000


@pytest.mark.parametrize("name", METHODS)
def test_sampling_does_not_change_the_result(name):
    ends = []
    for n_out in (1, 100):
        st = get(name).start(FORM_BODY, P, 0.0, y_start(FORM_BODY), {"step": 1e-3})
        for k in range(1, n_out + 1):
            st.advance_to(k * (1.0 / n_out))
        ends.append(st.y.copy())
    assert np.array_equal(ends[0], ends[1])


@pytest.mark.parametrize("name", METHODS)
def test_snapshot_restore_continues_to_identical_bits(name):
    a = get(name).start(FORM_BODY, P, 0.0, y_start(FORM_BODY), {"step": 1e-3})
    a.advance_to(0.5)
    snap = a.snapshot()
    a.advance_to(1.25)
    b = get(name).start(FORM_BODY, P, 0.0, y_start(FORM_BODY), {"step": 1e-3})
    b.restore(snap)
    b.advance_to(1.25)
    assert np.array_equal(a.y, b.y) and np.array_equal(a.counters, b.counters)
    assert np.array_equal(a.comp, b.comp)
    # Plain numbers, strings (the snapshot's identity) and numeric arrays, no objects.
    assert all(
        isinstance(v, (int, float, str)) or (isinstance(v, np.ndarray) and v.dtype.kind in "fi")
        for v in snap.values()
    )
    with pytest.raises(MethodRefused, match="step"):
        get(name).start(FORM_BODY, P, 0.0, y_start(FORM_BODY), {"step": 2e-3}).restore(snap)


@pytest.mark.parametrize("name", METHODS)
def test_energy_drifts_secularly(name):
    # RK4 is not symplectic: the energy error is a trend over the run, not a bounded
    # oscillation (Hairer, Lubich and Wanner, Geometric Numerical Integration, ch. I [from memory];
    # common practice). The fitted drift is many times the scatter about the fitted line.
    settings = {"step": 2e-3}
    ts = 0.5 * np.arange(1, 201)
    drift, scatter, last = fast_top_energy_trend(name, settings, ts)
    assert abs(drift) > 10 * scatter, (drift, scatter)
    assert abs(last) > 0.5 * abs(drift)


@pytest.mark.parametrize("name", METHODS)
def test_euler_form_keeps_the_cyclic_momenta_exactly(name):
    y0 = y_start(FORM_EULER)
    st = get(name).start(FORM_EULER, P, 0.0, y0, {"step": 1e-3})
    st.advance_to(3.0)
    assert st.y[3] == y0[3] and st.y[5] == y0[5]


def test_failures_stop_with_status():
    y0 = euler_state(TOP, 0.0, 1e-4, 0.0, 0.0, -50.0, 10.0)  # falls through the pole at once
    st = get("rk4").start(FORM_EULER, P, 0.0, y0, {"step": 1e-3})
    assert st.advance_to(0.01) == ST_SINGULAR
    assert st.t_fail == 0.0 and np.array_equal(st.y, y0)
    p = P.copy()
    p[8] = math.nan
    st = get("rk4-kahan").start(FORM_BODY, p, 0.0, y_start(FORM_BODY), {"step": 1e-3})
    st.advance_to(0.005)
    assert st.status == ST_DIVERGED and st.t_fail == 0.0
    assert st.advance_to(0.01) == ST_DIVERGED  # stays failed


@pytest.mark.parametrize(
    "settings", [{}, {"step": 0.0}, {"step": math.inf}, {"step": "1"}, {"step": 1e-3, "rtol": 1e-6}]
)
def test_bad_settings_are_refused(settings):
    with pytest.raises(MethodRefused):
        get("rk4").start(FORM_BODY, P, 0.0, y_start(FORM_BODY), settings)
