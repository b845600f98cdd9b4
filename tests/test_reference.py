"""The scipy reference methods through the method contract: the same steps and results as
scipy's solve_ivp, accuracy against a tight solution, output times that do not move the steps,
honest counters, bit-exact resume through an HDF5 round trip (LSODA aside: never resumed), and
failures as statuses."""

import math

import numpy as np
import pytest
from demo_bodies import CASE_IDS, CASES, GENERAL, LAGRANGE, state
from run_files import through_hdf5
from scipy.integrate import solve_ivp
from scipy.integrate._ivp import rk as scipy_rk
from scipy_reference import scipy_rhs

from topdrift.integrators import (
    C_EVALS,
    C_REJECTED,
    C_STEPS,
    ST_DIVERGED,
    ST_FAILED,
    ST_OK,
    ST_SINGULAR,
    ST_STEP_UNDERFLOW,
    MethodRefused,
    get,
)
from topdrift.integrators.reference.scipy_methods import REJECTED_UNKNOWN
from topdrift.models import FORM_BODY, FORM_EULER
from topdrift.models.body import P_MGZ

NAMES = {
    "scipy-rk45": "RK45",
    "scipy-dop853": "DOP853",
    "scipy-radau": "Radau",
    "scipy-lsoda": "LSODA",
}
TOL = {"rtol": 1e-8, "atol": 1e-10}
TIMES = np.linspace(0.1, 2.0, 20)


def plain_f(form, body):
    return scipy_rhs(form, body.params())


def sampled(name, form, body, times, settings=TOL):
    st = get(name).start(form, body.params(), 0.0, state(form, body), dict(settings))
    out = []
    for t in times:
        assert st.advance_to(float(t)) == ST_OK
        out.append(st.y.copy())
    return st, np.array(out)


def test_registry_metadata():
    for name in NAMES:
        info = get(name).info
        assert info.family == "reference"
        assert info.control == "tolerance"
        assert set(info.forms) == {"euler", "body"}
        assert not info.symplectic and info.keeps == ()
        assert info.keeps_roundoff == ("p_psi",)


@pytest.mark.parametrize("form,body", CASES, ids=CASE_IDS)
@pytest.mark.parametrize("name", list(NAMES))
def test_same_steps_and_results_as_solve_ivp(name, form, body):
    # What a user would have written: solve_ivp over a span longer than the samples, with
    # dense output. Its step sequence does not depend on the span until its last step, except
    # LSODA's first step, which ODEPACK sizes from the span; so LSODA agrees to its tolerance.
    st, ours = sampled(name, form, body, TIMES)
    sol = solve_ivp(
        plain_f(form, body),
        (0.0, 5.0),
        state(form, body),
        method=NAMES[name],
        dense_output=True,
        **TOL,
    )
    theirs = sol.sol(TIMES).T
    steps_to_cover = int(np.searchsorted(sol.t, TIMES[-1]))
    assert st.counters[C_STEPS] == steps_to_cover
    if name == "scipy-lsoda":
        np.testing.assert_allclose(ours, theirs, rtol=0, atol=1e-7)
    else:
        np.testing.assert_array_equal(ours, theirs)


@pytest.mark.parametrize("form,body", CASES, ids=CASE_IDS)
@pytest.mark.parametrize("name", list(NAMES))
def test_agrees_with_a_tight_solution_within_tolerance(name, form, body):
    # Reference: scipy DOP853 at rtol 1e-13. Over 2 s the global error of a tolerance-controlled
    # solver stays within a modest multiple of its local tolerance (common practice; measured
    # here: 0.3 to 72 times rtol), and it shrinks as the tolerance does.
    y0 = state(form, body)
    ref = solve_ivp(
        plain_f(form, body),
        (0.0, TIMES[-1]),
        y0,
        method="DOP853",
        rtol=1e-13,
        atol=1e-15,
        t_eval=TIMES,
    ).y.T
    scale = np.abs(ref) + 1e-2
    errs = []
    for rtol in (1e-6, 1e-9):
        _, ours = sampled(name, form, body, TIMES, {"rtol": rtol, "atol": rtol * 1e-2})
        err = np.max(np.abs(ours - ref) / scale)
        assert err < 100.0 * rtol, (rtol, err)
        errs.append(err)
    assert errs[1] < errs[0] / 30.0


@pytest.mark.parametrize("form,body", CASES, ids=CASE_IDS)
@pytest.mark.parametrize("name", list(NAMES))
def test_output_times_do_not_change_the_steps(name, form, body):
    dense, _ = sampled(name, form, body, np.linspace(0.01, 2.0, 200))
    sparse, last = sampled(name, form, body, [2.0])
    assert dense.counters[C_STEPS] == sparse.counters[C_STEPS]
    assert dense.counters[C_REJECTED] == sparse.counters[C_REJECTED]
    np.testing.assert_array_equal(dense.y, last[-1])
    if name == "scipy-dop853":
        # Its dense output costs 3 more calls per sampled step; the others' costs nothing.
        assert dense.counters[C_EVALS] > sparse.counters[C_EVALS]
    else:
        assert dense.counters[C_EVALS] == sparse.counters[C_EVALS]


@pytest.mark.parametrize("name", ["scipy-rk45", "scipy-dop853"])
def test_rejected_steps_counted_exactly_for_explicit_rk(name, monkeypatch):
    # Count scipy's own step attempts by wrapping the function its RK classes call per attempt.
    attempts = [0]
    original = scipy_rk.rk_step

    def counting(*args, **kwargs):
        attempts[0] += 1
        return original(*args, **kwargs)

    monkeypatch.setattr(scipy_rk, "rk_step", counting)
    st, _ = sampled(name, FORM_EULER, LAGRANGE, TIMES, {"rtol": 1e-6, "atol": 1e-8})
    assert st.counters[C_REJECTED] == attempts[0] - st.counters[C_STEPS]
    assert st.counters[C_REJECTED] > 0  # this case does reject some steps
    assert st.counters[C_EVALS] == st.nfev


@pytest.mark.parametrize("name", ["scipy-radau", "scipy-lsoda"])
def test_counts_what_scipy_exposes_for_implicit_solvers(name):
    st, _ = sampled(name, FORM_BODY, GENERAL, TIMES)
    assert st.counters[C_REJECTED] == REJECTED_UNKNOWN
    assert st.counters[C_STEPS] > 0
    if name == "scipy-radau":
        # Radau's finite-difference Jacobian calls f without counting it in nfev; we count it.
        assert st.counters[C_EVALS] > st.nfev
    else:
        assert st.counters[C_EVALS] == st.nfev


# The references that resume from their snapshot; LSODA is run again from its start instead
# (scipy_methods.py says why; tests/test_snapshot_data.py checks the refusal).
RESUMABLE = ["scipy-rk45", "scipy-dop853", "scipy-radau"]


@pytest.mark.parametrize("form,body", CASES, ids=CASE_IDS)
@pytest.mark.parametrize("name", RESUMABLE)
def test_resume_repeats_the_same_bits(name, form, body):
    y0 = state(form, body)
    first = get(name).start(form, body.params(), 0.0, y0, dict(TOL))
    for t in TIMES[:10]:
        assert first.advance_to(float(t)) == ST_OK
    snap = through_hdf5(first.snapshot())
    for t in TIMES[10:]:
        assert first.advance_to(float(t)) == ST_OK
    resumed = get(name).start(form, body.params(), 0.0, y0, dict(TOL))
    resumed.restore(snap)
    assert resumed.t == TIMES[9]
    for t in TIMES[10:]:
        assert resumed.advance_to(float(t)) == ST_OK
    np.testing.assert_array_equal(resumed.y, first.y)
    np.testing.assert_array_equal(resumed.counters, first.counters)
    wrong = get(name).start(form, body.params(), 0.0, y0, {"rtol": 1e-6, "atol": 1e-10})
    with pytest.raises(MethodRefused, match="snapshot"):
        wrong.restore(snap)


@pytest.mark.parametrize("name", list(NAMES))
def test_pole_passage_is_singular_in_the_euler_form(name):
    # p_phi = p_psi: the axis passes through the vertical and theta leaves (0, pi).
    y0 = np.array([0.0, 0.3, 0.0, 1.0, -2.0, 1.0])
    st = get(name).start(FORM_EULER, LAGRANGE.params(), 0.0, y0, dict(TOL))
    assert st.advance_to(2.0) == ST_SINGULAR
    assert 0.0 < st.t_fail < 0.3 and st.t == st.t_fail
    assert 0.0 < st.y[1] < 0.3


@pytest.mark.parametrize("name", list(NAMES))
def test_non_finite_right_hand_side_is_a_status_not_a_crash(name):
    p = LAGRANGE.params()
    p[P_MGZ] = math.inf
    st = get(name).start(FORM_EULER, p, 0.0, state(FORM_EULER, LAGRANGE), dict(TOL))
    status = st.advance_to(1.0)
    assert status in (ST_DIVERGED, ST_STEP_UNDERFLOW, ST_FAILED)
    assert st.t_fail == 0.0 and st.message
    assert st.advance_to(2.0) == status  # a failed run stays failed


@pytest.mark.parametrize(
    "settings",
    [{}, {"rtol": 1e-8}, {"rtol": 1e-8, "atol": 0.0}, {"rtol": 1e-8, "atol": 1e-10, "step": 0.1}],
)
def test_refuses_bad_settings(settings):
    with pytest.raises(MethodRefused):
        get("scipy-rk45").start(
            FORM_BODY, GENERAL.params(), 0.0, state(FORM_BODY, GENERAL), settings
        )


def test_refuses_to_run_backwards():
    st, _ = sampled("scipy-dop853", FORM_BODY, GENERAL, [1.0])
    with pytest.raises(MethodRefused, match="forward"):
        st.advance_to(0.5)
