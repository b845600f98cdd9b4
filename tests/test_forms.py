"""State forms: conversions, the angular velocity of the z-x-z angles, and H = T + V."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from topdrift.models import (
    RigidBody,
    SingularAttitude,
    body_state,
    euler_rates,
    euler_state,
    invariants_of,
    to_body,
    to_euler_form,
)
from topdrift.models.forms import B_M1, B_M3, FORM_BODY, FORM_EULER
from topdrift.models.quaternion import figure_axis, from_euler, vertical_in_body

TOP = RigidBody(1.3, (0.042, 0.042, 0.017), com=(0.0, 0.0, 0.11))


def rot_z(a):
    c, s = math.cos(a), math.sin(a)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def rot_x(a):
    c, s = math.cos(a), math.sin(a)
    return np.array([[1.0, 0.0, 0.0], [0.0, c, -s], [0.0, s, c]])


def matrix(phi, theta, psi):
    return rot_z(phi) @ rot_x(theta) @ rot_z(psi)


def quat_matrix(q):
    # Body-to-space rotation matrix of a unit quaternion, scalar first (common practice): the
    # transpose of the attitude matrix A(q) of Shuster 1993, A Survey of Attitude
    # Representations, eq. 159, which maps space to body with the scalar last (both from memory).
    q0, q1, q2, q3 = q
    return np.array(
        [
            [1 - 2 * (q2 * q2 + q3 * q3), 2 * (q1 * q2 - q0 * q3), 2 * (q1 * q3 + q0 * q2)],
            [2 * (q1 * q2 + q0 * q3), 1 - 2 * (q1 * q1 + q3 * q3), 2 * (q2 * q3 - q0 * q1)],
            [2 * (q1 * q3 - q0 * q2), 2 * (q2 * q3 + q0 * q1), 1 - 2 * (q1 * q1 + q2 * q2)],
        ]
    )


angles = st.tuples(st.floats(-3.1, 3.1), st.floats(0.05, 3.09), st.floats(-3.1, 3.1))
rates = st.tuples(st.floats(-20, 20), st.floats(-20, 20), st.floats(-200, 200))


@settings(max_examples=200, deadline=None)
@given(angles)
def test_quaternion_matches_rotation_matrix(a):
    q = from_euler(*a)
    assert np.allclose(quat_matrix(q), matrix(*a), atol=1e-14)
    r = matrix(*a)
    assert np.allclose(figure_axis(*q), r[:, 2], atol=1e-14)
    assert np.allclose(vertical_in_body(*q), r[2, :], atol=1e-14)


def test_angular_velocity_against_finite_difference_of_rotation():
    # hat(w_body) = R^T dR/dt, evaluated by a central difference of the matrix path.
    a = np.array([0.4, 1.1, -0.7])
    r = np.array([0.9, -0.6, 13.0])
    h = 1e-6
    rdot = (matrix(*(a + h * r)) - matrix(*(a - h * r))) / (2 * h)
    w_hat = matrix(*a).T @ rdot
    w_fd = np.array([w_hat[2, 1], w_hat[0, 2], w_hat[1, 0]])
    body = RigidBody(1.0, (1.0, 1.0, 1.0))  # unit moments: m equals w
    y = body_state(body, *a, r[0], r[1], r[2])
    assert np.allclose(y[B_M1 : B_M3 + 1], w_fd, atol=1e-8)


@settings(max_examples=200, deadline=None)
@given(angles, rates)
def test_round_trips(a, r):
    ye = euler_state(TOP, *a, *r)
    yb = body_state(TOP, *a, *r)
    scale = np.maximum(1.0, np.abs(ye))
    assert np.all(np.abs(to_euler_form(to_body(ye)) - ye) <= 1e-14 * scale * 10)
    assert np.all(np.abs(to_body(ye) - yb) <= 1e-14 * np.maximum(1.0, np.abs(yb)) * 10)
    rr = euler_rates(TOP, ye)
    # Rates from momenta go through A = p_phi - p_psi cos(theta), a cancellation: the round-off
    # is eps |L| / (I1 sin^2 theta), which grows towards the pole. |L| and not |p_phi| + |p_psi|:
    # the momenta come out of a rotation of the whole angular momentum, so each carries rounding
    # of |L| (a start with phi and psi rates 0 has p_phi = p_psi = 0 up to eps p_theta).
    cond = (abs(ye[3]) + abs(ye[4]) + abs(ye[5])) / (TOP.inertia[0] * math.sin(a[1]) ** 2)
    assert np.allclose(rr, r, rtol=1e-13, atol=1e-14 + 8 * 2.2e-16 * cond)


@settings(max_examples=200, deadline=None)
@given(angles, rates)
def test_hamiltonian_equals_kinetic_plus_potential(a, r):
    # Lagrangian of the symmetric heavy top (Goldstein, Classical Mechanics, eq. 5.63 and sec. 5.7)
    # [from memory]: T = I1/2 (thetadot^2 + phidot^2 sin^2 theta) + I3/2 (psidot + phidot cos
    # theta)^2, V = M g l cos theta.
    phi, theta, psi = a
    phidot, thetadot, psidot = r
    i1, _, i3 = TOP.inertia
    t = 0.5 * i1 * (thetadot**2 + phidot**2 * math.sin(theta) ** 2)
    t += 0.5 * i3 * (psidot + phidot * math.cos(theta)) ** 2
    v = TOP.mgl * math.cos(theta)
    ye = euler_state(TOP, *a, *r)
    yb = body_state(TOP, *a, *r)
    e = t + v
    p = TOP.params()
    assert invariants_of(FORM_EULER, ye, p)["energy"] == pytest.approx(e, rel=1e-12, abs=1e-12)
    assert invariants_of(FORM_BODY, yb, p)["energy"] == pytest.approx(e, rel=1e-12, abs=1e-12)
    # p_phi = I1 phidot sin^2 theta + p_psi cos theta, p_psi = I3 w3 (Goldstein eq. 5.64-5.65)
    # [from memory].
    p_psi = i3 * (psidot + phidot * math.cos(theta))
    p_phi = i1 * phidot * math.sin(theta) ** 2 + p_psi * math.cos(theta)
    inv = invariants_of(FORM_BODY, yb, p)
    assert inv["p_psi"] == pytest.approx(p_psi, rel=1e-12, abs=1e-13)
    assert inv["p_phi"] == pytest.approx(p_phi, rel=1e-12, abs=1e-13)


def test_pole_is_refused():
    with pytest.raises(SingularAttitude, match="theta"):
        euler_state(TOP, 0.0, 0.0, 0.0, 1.0, 0.0, 10.0)
    yb = body_state(TOP, 0.3, 0.0, 0.2, 1.0, 0.0, 10.0)
    with pytest.raises(SingularAttitude, match="vertical"):
        to_euler_form(yb)
