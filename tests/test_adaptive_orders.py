"""Measured orders of the adaptive methods, against the exact solution (no Runge-Kutta method
involved: tests/independent_references.py).

An adaptive method's order is the order of its tableau, which shows only at a fixed step: rk45's
and dop853's tableaux (ours, the very arrays the kernel packs) and scipy's RK45 and DOP853 are run
at fixed steps (scipy's with first_step = max_step = h and tolerances so wide that every step is
accepted). scipy's Radau and LSODA solve implicitly to a tolerance (LSODA also changes its order
as it goes), so for them, and for all four scipy solvers, the measured quantity is the exponent
of the error against the tolerance: about 1 for a code with tolerance proportionality (HNW I,
sec. II.4, from memory; common practice)."""

import dataclasses

import numpy as np
import pytest
from independent_references import attitude_error, exact_attitude
from scipy import integrate

from topdrift.integrators.reference.scipy_methods import wrapped_rhs
from topdrift.integrators.rk.fixed import FixedStepRK
from topdrift.integrators.rk.tableaux import DOP853, DP5
from topdrift.models import RigidBody, body_state
from topdrift.models.exact import LagrangeTop
from topdrift.models.forms import FORM_BODY

# A top of our own (as in test_rk_explicit.py), in the body form, where the fast spin makes the
# error of even an eighth-order tableau visible over a decade of steps.
TOP = RigidBody(mass=0.5, inertia=(0.003, 0.003, 0.001), com=(0.0, 0.0, 0.04))
P = TOP.params()
START = (0.0, 0.6, 0.0, 2.0, 0.0, 150.0)
T_END = 1.0
STEPS = {5: [250, 400, 630, 1000, 1600, 2500], 8: [100, 130, 160, 200, 250, 320]}


def y0():
    return body_state(TOP, *START)


def exact_end():
    return exact_attitude(LagrangeTop.from_state(TOP, FORM_BODY, y0()), [T_END])[0]


def fixed_step_tableau(tab):
    """The stages and weights of an embedded pair, without its error estimate and dense output."""
    ns = tab.n_stages
    return dataclasses.replace(
        tab,
        a=tab.a[: ns + 1, : ns + 1].copy(),
        c=tab.c[: ns + 1].copy(),
        e=None,
        e3=None,
        dense=None,
        fsal=False,
    )


def slope(steps, errs):
    return float(np.polyfit(np.log(1.0 / np.asarray(steps)), np.log(errs), 1)[0])


@pytest.mark.parametrize("tab,order", [(DP5, 5), (DOP853, 8)], ids=["rk45", "dop853"])
def test_our_tableaux_at_fixed_steps(tab, order):
    method = FixedStepRK(fixed_step_tableau(tab), tab.name, False, "fixed-step test of the tableau")
    angles = exact_end()
    errs = []
    for n in STEPS[order]:
        st = method.start(FORM_BODY, P, 0.0, y0(), {"step": T_END / n})
        st.advance_to(T_END)
        errs.append(attitude_error(FORM_BODY, st.y, angles))
    assert abs(slope(STEPS[order], errs) - order) < 0.25, errs
    assert min(errs) > 1e-12  # above the exact solution's and the runs' round-off


def scipy_fixed(cls, h):
    solver = getattr(integrate, cls)(
        wrapped_rhs(FORM_BODY, P, [0]),
        0.0,
        y0(),
        T_END,
        first_step=h,
        max_step=h,
        rtol=1e10,
        atol=1e10,  # every step accepted: the step stays h
    )
    while solver.t < T_END:
        solver.step()
    return solver.y


@pytest.mark.parametrize("cls,order", [("RK45", 5), ("DOP853", 8)])
def test_scipy_tableaux_at_fixed_steps(cls, order):
    angles = exact_end()
    errs = [attitude_error(FORM_BODY, scipy_fixed(cls, T_END / n), angles) for n in STEPS[order]]
    assert abs(slope(STEPS[order], errs) - order) < 0.25, errs


@pytest.mark.parametrize("cls", ["RK45", "DOP853", "Radau", "LSODA"])
def test_scipy_error_against_tolerance(cls):
    # The error at t = 1 over six decades of rtol (atol = rtol / 1000; five for Radau, whose
    # Newton solves at rtol 1e-10 cost half a minute here): measured exponents 1.04 (RK45),
    # 1.02 (DOP853), 1.20 (Radau, 1e-4 .. 1e-10), 1.02 (LSODA) on this top.
    angles = exact_end()
    rtols = np.geomspace(1e-3, 1e-8, 6) if cls == "Radau" else np.geomspace(1e-4, 1e-10, 7)
    errs = []
    for r in rtols:
        sol = integrate.solve_ivp(
            wrapped_rhs(FORM_BODY, P, [0]), (0.0, T_END), y0(), method=cls, rtol=r, atol=r * 1e-3
        )
        assert sol.success
        errs.append(attitude_error(FORM_BODY, sol.y[:, -1], angles))
    exponent = float(np.polyfit(np.log(rtols), np.log(errs), 1)[0])
    assert 0.8 < exponent < 1.4, (exponent, errs)
    assert errs[-1] < 1e-3 * errs[0]  # five or six decades of tolerance buy three of error
