"""rk45 and dop853: coefficient tables, agreement with scipy's implementations of the same
methods, tolerance proportionality, dense output, snapshots, failures, energy drift."""

from __future__ import annotations

import math

import numpy as np
import pytest
from demo_bodies import FAST_TOP, fast_top_energy_trend
from demo_bodies import fast_top_reference as reference
from demo_bodies import fast_top_start as y_start
from scipy.integrate import DOP853 as ScipyDOP853
from scipy.integrate import RK45 as ScipyRK45
from scipy.integrate import solve_ivp
from scipy.integrate._ivp import dop853_coefficients as scipy_dop853
from scipy.integrate._ivp import rk as scipy_rk
from scipy_reference import scipy_rhs

from topdrift.integrators import (
    C_EVALS,
    C_STEPS,
    ST_DIVERGED,
    ST_OK,
    ST_SINGULAR,
    ST_STEP_UNDERFLOW,
    MethodRefused,
    get,
)
from topdrift.integrators.rk.tableaux import DOP853, DP5
from topdrift.models import FORM_BODY, FORM_EULER, body_state, euler_state

TOP = FAST_TOP  # see demo_bodies.py
P = TOP.params()


# ---------------------------------------------------------------------------------------------
# Tables


def test_dp5_table_matches_scipy():
    # scipy/integrate/_ivp/rk.py (RK45) as the general-purpose reference library. scipy's error
    # weights are b - b_hat, Hairer's DOPRI5 (transcribed here) uses b_hat - b: opposite sign.
    S = scipy_rk.RK45
    assert np.array_equal(DP5.c[:6], S.C)
    assert np.array_equal(DP5.a[:6, :5], S.A)
    assert np.array_equal(DP5.b, S.B)
    assert np.array_equal(DP5.a[6, :6], S.B)  # FSAL row
    assert np.array_equal(DP5.e, -S.E)
    # Dense output: Hairer's nested form with Shampine's d coefficients must be the same quartic
    # as scipy's P matrix. Both are linear in the stages, so random stages test the identity.
    rng = np.random.default_rng(7)
    K = rng.normal(size=(7, 3))
    y0 = rng.normal(size=3)
    h = 0.37
    y1 = y0 + h * K[:6].T @ DP5.b
    f0 = y1 - y0
    f1 = h * K[0] - f0
    f2 = 2 * f0 - h * (K[0] + K[6])
    f3 = h * DP5.dense[0] @ K
    for x in np.linspace(0.0, 1.0, 11):
        ours = y0 + x * (f0 + (1 - x) * (f1 + x * (f2 + (1 - x) * f3)))
        theirs = y0 + h * (K.T @ S.P) @ np.cumprod(np.full(4, x))
        np.testing.assert_allclose(ours, theirs, rtol=0, atol=1e-14)


def test_dop853_table_matches_scipy():
    # scipy/integrate/_ivp/dop853_coefficients.py, the general-purpose reference library: the
    # same 30-digit decimals transcribed from Hairer's code, so equal to the last bit.
    assert np.array_equal(DOP853.c, scipy_dop853.C)
    assert np.array_equal(DOP853.a, scipy_dop853.A)
    assert np.array_equal(DOP853.b, scipy_dop853.B)
    assert np.array_equal(DOP853.e, scipy_dop853.E5)
    assert np.array_equal(DOP853.e3, scipy_dop853.E3)
    assert np.array_equal(DOP853.dense, scipy_dop853.D)


@pytest.mark.parametrize("tab", [DP5, DOP853], ids=lambda t: t.name)
def test_order_conditions(tab):
    # Independent of any library: row sums of A equal c (HNW I, sec. II.1, eq. (1.9) [from
    # memory]); the "bushy tree" conditions sum b_i c_i^(k-1) = 1/k for k = 1..order and sum b_i
    # a_ij c_j = 1/6 (HNW I, sec. II.2, Table 2.2) [from memory]; both error estimates weigh stages
    # summing to 0, so that they vanish on constant right-hand sides.
    rows = tab.a.shape[0]
    np.testing.assert_allclose(tab.a.sum(axis=1), tab.c[:rows], rtol=0, atol=1e-14)
    ns = tab.n_stages
    b, c, a = tab.b, tab.c[:ns], tab.a[:ns, :ns]
    for k in range(1, tab.order + 1):
        assert abs(b @ c ** (k - 1) - 1.0 / k) < 1e-14, k
    assert abs(b @ a @ c - 1.0 / 6.0) < 1e-14
    assert abs(tab.e.sum()) < 1e-14
    if tab.e3 is not None:
        assert abs(tab.e3.sum()) < 1e-14


def test_metadata():
    for name, order in (("rk45", 5), ("dop853", 8)):
        info = get(name).info
        assert info.family == "adaptive-rk"
        assert info.order == order
        assert info.forms == ("body", "euler")
        assert info.control == "tolerance"
        assert not info.symplectic and not info.compensated
        assert info.keeps == () and info.keeps_roundoff == ("p_psi",)
        assert info.keeps_by_form == {
            "euler": (("p_phi", "p_psi", "norm"), ()),
            "body": ((), ("p_psi",)),
        }
        assert "Dormand" in info.source


# ---------------------------------------------------------------------------------------------
# Against scipy


def scipy_run(cls, form, t_end, rtol, atol, first_step):
    solver = cls(
        scipy_rhs(form, P), 0.0, y_start(form), t_end, rtol=rtol, atol=atol, first_step=first_step
    )
    steps = 0
    while solver.status == "running":
        solver.step()
        steps += 1
    assert solver.status == "finished"
    return steps, solver.y


@pytest.mark.parametrize("form", [FORM_BODY, FORM_EULER], ids=["body", "euler"])
@pytest.mark.parametrize(
    "name,cls,rtol",
    [
        ("rk45", ScipyRK45, 1e-6),
        ("rk45", ScipyRK45, 1e-9),
        ("dop853", ScipyDOP853, 1e-6),
        ("dop853", ScipyDOP853, 1e-10),
    ],
)
def test_steps_and_end_state_match_scipy(form, name, cls, rtol):
    # scipy's RK45 / DOP853 (scipy.integrate), the general-purpose reference library, on the
    # same problem, tolerances, first step and end time: the step-size controller is the same,
    # so the accepted steps agree within 2 % and the end states within 10 rtol. The Euler form
    # folds phi and psi (models/turns.py): compared with their turns put back, as scipy has them.
    t_end, atol, h0 = 3.0, rtol * 1e-3, 1e-4
    n_ref, y_ref = scipy_run(cls, form, t_end, rtol, atol, h0)
    st = get(name).start(
        form,
        P,
        0.0,
        y_start(form),
        {"rtol": rtol, "atol": atol, "first_step": h0, "horizon": t_end},
    )
    assert st.advance_to(t_end) == ST_OK
    n = int(st.counters[C_STEPS])
    assert abs(n - n_ref) <= 0.02 * n_ref, (n, n_ref)
    scale = np.maximum(np.abs(y_ref), 1.0 if form == FORM_EULER else np.abs(y_ref).max())
    y = st.unfolded_y()
    assert np.all(np.abs(y - y_ref) <= 10 * rtol * scale), np.abs(y - y_ref) / scale


@pytest.mark.parametrize("name,cls", [("rk45", ScipyRK45), ("dop853", ScipyDOP853)])
def test_default_first_step_and_dense_output_match_scipy(name, cls):
    # No first_step: both pick Hairer's starting step (scipy's select_initial_step). The dense
    # output at 40 sample times is compared with scipy's solve_ivp(dense_output=True), the
    # general-purpose reference library, to 10 rtol.
    form, t_end, rtol, atol = FORM_BODY, 2.0, 1e-8, 1e-11
    sol = solve_ivp(
        scipy_rhs(form, P),
        (0.0, t_end),
        y_start(form),
        method=name.upper(),
        rtol=rtol,
        atol=atol,
        dense_output=True,
    )
    st = get(name).start(
        form, P, 0.0, y_start(form), {"rtol": rtol, "atol": atol, "horizon": t_end}
    )
    for t in np.linspace(0.0, t_end, 41)[1:]:
        assert st.advance_to(t) == ST_OK
        theirs = sol.sol(t)
        assert np.all(np.abs(st.y - theirs) <= 10 * rtol * np.abs(theirs).max()), t
    assert abs(int(st.counters[C_STEPS]) - (sol.t.size - 1)) <= 0.02 * (sol.t.size - 1)


# ---------------------------------------------------------------------------------------------
# Behaviour


@pytest.mark.parametrize("name", ["rk45", "dop853"])
def test_error_falls_in_proportion_to_tolerance(name):
    # Tolerance proportionality of local-extrapolation codes (HNW I, sec. II.4 [from memory], common
    # practice): over four decades of rtol the global error falls at every step, and the
    # fitted log-log slope is close to 1.
    t_end = 2.0
    y_ref = reference(FORM_BODY, t_end)
    tols = np.array([1e-4, 1e-6, 1e-8, 1e-10])
    errs = []
    for tol in tols:
        st = get(name).start(
            FORM_BODY, P, 0.0, y_start(FORM_BODY), {"rtol": float(tol), "atol": float(tol) * 1e-2}
        )
        st.advance_to(t_end)
        errs.append(np.abs(st.y - y_ref).max())
    errs = np.array(errs)
    assert np.all(np.diff(errs) < 0), errs
    slope = np.polyfit(np.log(tols), np.log(errs), 1)[0]
    assert 0.8 < slope < 1.2, (slope, errs)
    assert errs[-1] < 1e-7


@pytest.mark.parametrize("name", ["rk45", "dop853"])
@pytest.mark.parametrize("horizon", [None, 3.0])
def test_sampling_does_not_change_the_steps(name, horizon):
    # Asking for 600 outputs or for 3 must take the same steps and end on the same bits.
    settings = {"rtol": 1e-7, "atol": 1e-10}
    if horizon is not None:
        settings["horizon"] = horizon
    runs = []
    for n_out in (3, 600):
        st = get(name).start(FORM_BODY, P, 0.0, y_start(FORM_BODY), settings)
        for t in np.linspace(0.0, 3.0, n_out + 1)[1:]:
            assert st.advance_to(float(t)) == ST_OK
        runs.append((st.counters.copy(), st.y.copy(), st.t_internal))
    (c_few, y_few, ti_few), (c_many, y_many, ti_many) = runs
    assert c_few[C_STEPS] == c_many[C_STEPS]
    assert ti_few == ti_many
    assert np.array_equal(y_few, y_many)
    if horizon is not None:
        assert ti_few == horizon  # the last step was clipped to end on the horizon
    else:
        assert ti_few > 3.0  # no clipping: the end state came from the dense output


@pytest.mark.parametrize("name", ["rk45", "dop853"])
def test_snapshot_restore_continues_to_identical_bits(name):
    settings = {"rtol": 1e-8, "atol": 1e-11}
    a = get(name).start(FORM_BODY, P, 0.0, y_start(FORM_BODY), settings)
    a.advance_to(0.73)  # mid-step: the dense coefficients are part of the state
    snap = a.snapshot()
    for t in (1.0, 1.5, 2.25):
        a.advance_to(t)
    b = get(name).start(FORM_BODY, P, 0.0, y_start(FORM_BODY), settings)
    b.restore(snap)
    assert b.t == 0.73
    for t in (1.0, 1.5, 2.25):
        b.advance_to(t)
    assert np.array_equal(a.y, b.y)
    assert np.array_equal(a.counters, b.counters)
    assert np.array_equal(a.ctrl, b.ctrl)
    # And back on the same stepper.
    a.restore(snap)
    a.advance_to(2.25)
    assert np.array_equal(a.y, b.y)
    # Plain numbers and arrays only (a checkpoint writer stores them as they are).
    # Plain numbers, strings (the snapshot's identity) and numeric arrays, no objects.
    assert all(
        isinstance(v, (int, float, str)) or (isinstance(v, np.ndarray) and v.dtype.kind in "fi")
        for v in snap.values()
    )
    other = get(name).start(FORM_BODY, P, 0.0, y_start(FORM_BODY), {"rtol": 1e-6, "atol": 1e-9})
    with pytest.raises(MethodRefused, match="tolerances"):
        other.restore(snap)
    # The other pair's snapshot: refused by its shapes before its order is compared.
    with pytest.raises(MethodRefused, match="snapshot"):
        get("rk45" if name == "dop853" else "dop853").start(
            FORM_BODY, P, 0.0, y_start(FORM_BODY), settings
        ).restore(snap)


@pytest.mark.parametrize("name", ["rk45", "dop853"])
def test_energy_drifts_secularly(name):
    # Explicit RK is not symplectic: over a long run the energy error is a trend, not a bounded
    # oscillation (HNW I, sec. II.16 [from memory] and Hairer, Lubich and Wanner, Geometric
    # Numerical Integration, ch. I [from memory]; common practice). The fitted drift over the run
    # is many times the scatter about the fitted line.
    settings = {"rtol": 1e-6, "atol": 1e-9}
    ts = np.linspace(0.0, 100.0, 201)[1:]
    drift, scatter, last = fast_top_energy_trend(name, settings, ts)
    assert abs(drift) > 10 * scatter, (drift, scatter)
    assert abs(last) > 0.5 * abs(drift)


@pytest.mark.parametrize("name", ["rk45", "dop853"])
def test_linear_invariants_in_the_euler_form_only(name):
    # Why p_psi is kept to the bit in the Euler form and only to round-off in the body form
    # (`keeps_by_form`). In the Euler form p_phi and p_psi have an identically zero derivative,
    # so every stage adds exactly 0.0 and they never change. In the body form the spin momentum
    # m3 of the same symmetric top has the derivative m1 w2 - m2 w1, which rounds to nonzero
    # (checked below on a tumbling start, where m1, m2 are as large as m3), so m3 moves by
    # round-off, not by truncation error.
    settings = {"rtol": 1e-6, "atol": 1e-9}
    y0 = y_start(FORM_EULER)
    st = get(name).start(FORM_EULER, P, 0.0, y0, settings)
    st.advance_to(5.0)
    assert st.y[3] == y0[3] and st.y[5] == y0[5]
    yb = body_state(TOP, 0.0, 1.2, 0.0, 20.0, 15.0, 5.0)
    sb = get(name).start(FORM_BODY, P, 0.0, yb, settings)
    sb.advance_to(5.0)
    assert sb.y[6] != yb[6]
    assert abs(sb.y[6] - yb[6]) < 1e-14  # round-off only


def test_counters_are_the_kernels():
    # rk45 evaluates 6 new stages per attempt (FSAL), plus 2 to start (f0 and the starting step).
    st = get("rk45").start(FORM_BODY, P, 0.0, y_start(FORM_BODY), {"rtol": 1e-6, "atol": 1e-9})
    st.advance_to(1.0)
    steps, rejected, evals, forces = (int(v) for v in st.counters)
    assert evals == 2 + 6 * (steps + rejected) + 0  # the end fell on a step or dense output
    assert forces == evals  # every stage evaluates the torque
    # dop853 evaluates its FSAL stage after acceptance (11 + 1 per accepted step, 11 per
    # rejected) and its 3 dense stages once per step that serves an output.
    st = get("dop853").start(FORM_BODY, P, 0.0, y_start(FORM_BODY), {"rtol": 1e-6, "atol": 1e-9})
    st.advance_to(1.0)
    steps, rejected, evals, forces = (int(v) for v in st.counters)
    assert evals == 2 + 12 * steps + 11 * rejected + 3
    assert forces == evals


# ---------------------------------------------------------------------------------------------
# Failures and refusals


def test_singular_state_stops_with_status():
    # Euler form, axis 1e-4 rad from the vertical and falling onto it fast: the first accepted
    # state lies past the pole, where the Euler angles are not a chart.
    y0 = euler_state(TOP, 0.0, 1e-4, 0.0, 0.0, -50.0, 10.0)
    st = get("rk45").start(FORM_EULER, P, 0.0, y0, {"rtol": 1e-3, "atol": 1e-3, "first_step": 1e-3})
    assert st.advance_to(1.0) == ST_SINGULAR
    assert st.t_fail == 0.0 and st.t == 0.0
    assert np.array_equal(st.y, y0)


def test_non_finite_stops_as_diverged():
    p = P.copy()
    p[8] = math.nan  # M g l: every stage turns NaN
    st = get("dop853").start(
        FORM_BODY, p, 0.0, y_start(FORM_BODY), {"rtol": 1e-6, "atol": 1e-9, "first_step": 1e-3}
    )
    assert st.advance_to(1.0) == ST_DIVERGED
    assert st.t_fail == 0.0
    assert int(st.counters[C_EVALS]) > 0


@pytest.mark.parametrize(
    "settings,match",
    [
        ({"rtol": 1e-6}, "atol"),
        ({"rtol": 1e-6, "atol": 1e-9, "stepsize": 1.0}, "unknown"),
        ({"rtol": 1e-16, "atol": 1e-9}, "machine"),
        ({"rtol": 1e-6, "atol": -1.0}, "atol"),
        ({"rtol": 1e-6, "atol": 1e-9, "horizon": 1.0, "first_step": 2.0}, "first_step"),
        ({"rtol": 1e-6, "atol": 1e-9, "horizon": -1.0}, "horizon"),
    ],
)
def test_bad_settings_are_refused(settings, match):
    with pytest.raises(MethodRefused, match=match):
        get("rk45").start(FORM_BODY, P, 0.0, y_start(FORM_BODY), settings)


def test_bad_times_are_refused():
    st = get("dop853").start(
        FORM_BODY, P, 0.0, y_start(FORM_BODY), {"rtol": 1e-6, "atol": 1e-9, "horizon": 1.0}
    )
    st.advance_to(0.5)
    with pytest.raises(MethodRefused, match="before"):
        st.advance_to(0.25)
    with pytest.raises(MethodRefused, match="horizon"):
        st.advance_to(1.5)


def test_step_below_round_off_of_t_stops_as_underflow():
    # Started at t0 = 1e13 s, where 10 ulp of t is 0.02 s: the fast spin (150 rad/s) needs steps
    # of about a millisecond at this tolerance, so the controller runs into the round-off floor.
    t0 = 1e13
    st = get("rk45").start(FORM_BODY, P, t0, y_start(FORM_BODY), {"rtol": 1e-10, "atol": 1e-12})
    assert st.advance_to(t0 + 10.0) == ST_STEP_UNDERFLOW
    assert st.t_fail == t0


@pytest.mark.parametrize("n", [1, 2, 3, 5, 6, 7, 9])
def test_stage_sums_for_any_state_size(n):
    # The kernels' stage combination against numpy for state sizes the models do not have yet
    # (blocks of four, the overlapping last block, and the short path).
    from topdrift.integrators.rk.embedded_kernel import combine, weighted_pair
    from topdrift.integrators.rk.packed import pack

    pk = pack(DOP853)
    rng = np.random.default_rng(n)
    K = rng.normal(size=16 * n)
    y = rng.normal(size=n)
    out = np.empty(n)
    for row in (1, 5, 12, 15):
        combine(n, row, pk.a, row * 16, 0.25, y, K, out)
        expect = y + 0.25 * DOP853.a[row] @ K.reshape(16, n)
        np.testing.assert_allclose(out, expect, rtol=1e-14, atol=1e-14)
    combine(n, 16, pk.d, 2 * 16, 1.0, None, K, out)
    np.testing.assert_allclose(out, DOP853.dense[2] @ K.reshape(16, n), rtol=1e-13, atol=1e-14)
    pair = np.empty(2 * n)
    weighted_pair(n, 13, pk.e, K, pair)
    np.testing.assert_allclose(pair[:n], DOP853.e @ K.reshape(16, n)[:13], rtol=1e-13, atol=1e-14)
    np.testing.assert_allclose(pair[n:], DOP853.e3 @ K.reshape(16, n)[:13], rtol=1e-13, atol=1e-14)
