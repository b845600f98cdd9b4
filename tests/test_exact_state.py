"""The exact state of sample(t): quaternion and body-frame momentum from the folded angles.

Checked against the start itself (t = 0), against the invariants the motion keeps (energy,
p_phi = L . e_z and p_psi = L . e3: Goldstein, Classical Mechanics, sec. 5.7), and against
scipy's DOP853 (solve_ivp, rtol = atol = 1e-13) on the body-form equations of
topdrift.models.dynamics.rhs over 20 nutation periods.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from topdrift.benchmarks.cases.library import load_case
from topdrift.models import FORM_BODY, RigidBody, body_state
from topdrift.models.dynamics import rhs
from topdrift.models.exact import LagrangeTop
from topdrift.models.quaternion import figure_axis

TOP = RigidBody(0.5, (2.0e-3, 2.0e-3, 1.2e-3), com=(0.0, 0.0, 0.04))  # invented numbers
HANGING = RigidBody(0.5, (2.0e-3, 2.0e-3, 1.2e-3), com=(0.0, 0.0, -0.04))
FREE = RigidBody(0.5, (2.0e-3, 2.0e-3, 1.2e-3))


def library(name):
    case = load_case(name)
    return case.body, case.body_state()


STARTS = {
    "looping-nutation": library("looping-nutation"),
    "pole-passage": library("pole-passage"),
    "demo-wheel": library("demo-wheel"),
    "sleeping-below": library("sleeping-below"),
    # on the vertical with transverse momentum: passes the vertical every period
    "through-vertical": (
        TOP,
        np.array([math.cos(0.2), 0.0, 0.0, math.sin(0.2), 2e-3, -1e-3, 0.05]),
    ),
    "through-down": (TOP, np.array([0.0, math.cos(0.2), math.sin(0.2), 0.0, 2e-3, -1e-3, 0.05])),
    "sleeping": (TOP, np.array([math.cos(0.2), 0.0, 0.0, math.sin(0.2), 0.0, 0.0, 0.08])),
    "hanging loops": (HANGING, body_state(HANGING, 0.3, 2.5, -0.2, 1.0, -1.5, 20.0)),
    "free": (FREE, body_state(FREE, 0.3, 0.9, -0.2, 3.0, 1.5, 60.0)),
}


def invariants(body, q, m):
    """Energy, p_phi and p_psi of body-form states (rows of q and m)."""
    i1, _, i3 = body.inertia
    g3 = q[:, 0] ** 2 - q[:, 1] ** 2 - q[:, 2] ** 2 + q[:, 3] ** 2
    g1 = 2.0 * (q[:, 1] * q[:, 3] - q[:, 0] * q[:, 2])
    g2 = 2.0 * (q[:, 2] * q[:, 3] + q[:, 0] * q[:, 1])
    kinetic = (m[:, 0] ** 2 + m[:, 1] ** 2) / (2.0 * i1) + m[:, 2] ** 2 / (2.0 * i3)
    return kinetic + body.mgl * g3, m[:, 0] * g1 + m[:, 1] * g2 + m[:, 2] * g3, m[:, 2], kinetic


@pytest.mark.parametrize("name", list(STARTS))
def test_sample_at_zero_is_the_start(name):
    body, yb = STARTS[name]
    top = LagrangeTop.from_state(body, FORM_BODY, yb)
    s = top.sample(0.0)
    q0 = yb[:4] / np.linalg.norm(yb[:4])
    q = s.quaternion[0]
    # The quaternion's parts move by half the angle errors: the 2e-15 rad target of the angles
    # (test_exact_ulps.py) bounds them by 2e-15. (sleeping-below starts at its upper turning
    # point 1 deg from the vertical, where the third-kind term is O(1): 7.4e-16.)
    assert min(np.abs(q - q0).max(), np.abs(q + q0).max()) <= 2e-15, (q, q0)
    scale = np.linalg.norm(yb[4:])
    assert np.abs(s.momentum[0] - yb[4:]).max() < 4e-15 * scale, (s.momentum[0], yb[4:])
    assert np.abs(s.axis[0] - np.array(figure_axis(*q0))).max() < 4e-16


@pytest.mark.parametrize("name", list(STARTS))
def test_sample_keeps_the_invariants(name):
    body, yb = STARTS[name]
    top = LagrangeTop.from_state(body, FORM_BODY, yb)
    period = top.nutation_period if math.isfinite(top.nutation_period) else 1.0
    t = np.concatenate((np.linspace(0.0, 3.0 * period, 301), [1e4 * period + 0.37, 1e8 * period]))
    s = top.sample(t)
    assert np.allclose(np.linalg.norm(s.quaternion, axis=1), 1.0, rtol=0, atol=4e-16)
    e0, pphi0, ppsi0, kin0 = invariants(body, yb[None, :4] / np.linalg.norm(yb[:4]), yb[None, 4:])
    e, pphi, ppsi, kin = invariants(body, s.quaternion, s.momentum)
    scale = np.linalg.norm(yb[4:])
    assert np.abs(e - e0).max() < 1e-14 * (kin0[0] + abs(body.mgl)), np.abs(e - e0).max()
    assert np.abs(pphi - pphi0).max() < 1e-14 * scale
    assert np.all(ppsi == ppsi0)
    axis_q = np.array([figure_axis(*q) for q in s.quaternion])
    assert np.abs(axis_q - s.axis).max() < 1e-15


@pytest.mark.parametrize("name", ["looping-nutation", "through-vertical", "hanging loops"])
def test_sample_against_dop853(name):
    body, yb = STARTS[name]
    top = LagrangeTop.from_state(body, FORM_BODY, yb)
    t = np.linspace(0.0, 20.0 * top.nutation_period, 201)
    p = body.params()

    def f(_, y):
        d = np.empty(7)
        rhs(FORM_BODY, y, p, d)
        return d

    sol = solve_ivp(f, (0.0, t[-1]), yb, method="DOP853", rtol=1e-13, atol=1e-13, t_eval=t)
    assert sol.success
    s = top.sample(t)
    scale = np.linalg.norm(yb[4:])
    assert np.abs(s.momentum - sol.y[4:].T).max() < 1e-9 * scale
    sign = np.sign(np.sum(s.quaternion * sol.y[:4].T, axis=1))[:, None]
    assert np.abs(s.quaternion * sign - sol.y[:4].T).max() < 1e-9
