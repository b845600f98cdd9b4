"""The equations of motion in both forms and the exact sub-flows, checked against scipy."""

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy_reference import scipy_rhs

from topdrift.models import RigidBody, body_state, euler_state, invariants_of
from topdrift.models.flows import flow_a, flow_b, free_body
from topdrift.models.forms import FORM_BODY, FORM_EULER
from topdrift.models.quaternion import figure_axis, from_euler

TOP = RigidBody(1.3, (0.042, 0.042, 0.017), com=(0.0, 0.0, 0.11))
START = (0.3, 0.9, 0.2, 1.0, 0.5, 40.0)


def solve(form, body, y0, t_end, **kw):
    # scipy's DOP853 at tight tolerance: a general-purpose reference integrator.
    return solve_ivp(
        scipy_rhs(form, body.params()),
        (0.0, t_end),
        y0,
        method="DOP853",
        rtol=1e-12,
        atol=1e-12,
        **kw,
    )


def test_both_forms_give_the_same_figure_axis():
    ye = euler_state(TOP, *START)
    yb = body_state(TOP, *START)
    ts = np.linspace(0.0, 3.0, 7)
    se = solve(FORM_EULER, TOP, ye, 3.0, t_eval=ts)
    sb = solve(FORM_BODY, TOP, yb, 3.0, t_eval=ts)
    for k in range(len(ts)):
        a_e = np.array(figure_axis(*from_euler(*se.y[:3, k])))
        q = sb.y[:4, k] / np.linalg.norm(sb.y[:4, k])
        a_b = np.array(figure_axis(*q))
        assert np.linalg.norm(a_e - a_b) < 1e-9


@pytest.mark.parametrize(
    "body",
    [
        TOP,
        RigidBody(1.0, (0.04, 0.05, 0.03), com=(0.01, 0.02, 0.1)),
        RigidBody(1.0, (0.02, 0.02, 0.01), com=(0.05, 0.03, 0.0)),  # Kovalevskaya
    ],
)
def test_invariants_along_reference_solution(body):
    p = body.params()
    y0 = body_state(body, *START[:5], 10.0)
    sol = solve(FORM_BODY, body, y0, 4.0)
    i0 = invariants_of(FORM_BODY, y0, p)
    i1 = invariants_of(FORM_BODY, sol.y[:, -1], p)
    assert i1["energy"] == pytest.approx(i0["energy"], rel=1e-9)
    assert i1["p_phi"] == pytest.approx(i0["p_phi"], rel=1e-9, abs=1e-11)
    if body.lagrange_top:
        assert i1["p_psi"] == pytest.approx(i0["p_psi"], rel=1e-9)
    if body.kovalevskaya:
        assert i1["kovalevskaya"] == pytest.approx(i0["kovalevskaya"], rel=1e-8)


@pytest.mark.parametrize("inertia", [(0.03, 0.03, 0.05), (0.03, 0.045, 0.05)])
def test_free_flow_matches_reference(inertia):
    # A free body (centre of mass at the pivot): the sub-flow A alone is the whole motion.
    body = RigidBody(1.0, inertia)
    p = body.params()
    y0 = body_state(body, 0.2, 0.7, -0.4, 2.0, 1.0, 9.0)
    sol = solve(FORM_BODY, body, y0, 2.0)
    y = y0.copy()
    n = 1 if inertia[0] == inertia[1] else 4000
    for _ in range(n):
        free_body(2.0 / n, y, p)
    # Exact for I1 = I2; second order (error ~ h^2) otherwise.
    tol = 1e-10 if n == 1 else 1e-5
    q_ref = sol.y[:4, -1] / np.linalg.norm(sol.y[:4, -1])
    if np.dot(q_ref, y[:4]) < 0:
        q_ref = -q_ref
    assert np.abs(y[:4] - q_ref).max() < tol
    assert np.abs(y[4:] - sol.y[4:, -1]).max() < tol * 10


@pytest.mark.parametrize("form", [FORM_EULER, FORM_BODY])
def test_strang_splitting_is_second_order(form):
    y0 = euler_state(TOP, *START) if form == FORM_EULER else body_state(TOP, *START)
    ref = solve(form, TOP, y0, 1.0).y[:, -1]
    p = TOP.params()
    errs = []
    for n in (400, 800, 1600):
        y = y0.copy()
        h = 1.0 / n
        for _ in range(n):
            flow_b(form, 0.5 * h, y, p)
            flow_a(form, h, y, p)
            flow_b(form, 0.5 * h, y, p)
        errs.append(np.abs(y - ref).max())
    slopes = np.diff(np.log(errs)) / np.log(0.5)
    assert np.all(np.abs(slopes - 2.0) < 0.1)
