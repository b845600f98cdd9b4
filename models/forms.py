"""The two state forms and the conversions between them and from Euler angles and rates.

euler: (phi, theta, psi, p_phi, p_theta, p_psi), the canonical variables of a symmetric top with
       its centre of mass on axis 3; singular where sin(theta) = 0.
body:  (q0, q1, q2, q3, m1, m2, m3), the body-to-space unit quaternion and the angular momentum
       about the fixed point in body axes (a gyrostat's total, I w + h); valid for every body
       and attitude.

The map between the momenta is inertia-free: with n = (cos psi, -sin psi, 0) the line of nodes,
k = e3 x n = (sin psi, cos psi, 0) and Gamma the vertical, all in body axes,
p_theta = m.n, p_psi = m.e3, p_phi = m.Gamma, and conversely m = p_theta n + p_psi e3 + (A/s) k
with A = p_phi - p_psi cos(theta), s = sin(theta).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .body import P_H1, P_H2, P_H3, P_I1, P_I2, P_I3, P_ORBIT_N, RigidBody
from .quaternion import from_euler, rotate_inverse, to_euler, vertical_in_body

FORM_EULER = 0
FORM_BODY = 1
FORM_NAMES = ("euler", "body")
FORM_SIZE = (6, 7)

E_PHI, E_THETA, E_PSI, E_PPHI, E_PTHETA, E_PPSI = range(6)
B_Q0, B_Q1, B_Q2, B_Q3, B_M1, B_M2, B_M3 = range(7)
N_EULER = 6
N_BODY = 7


class SingularAttitude(ValueError):
    """The figure axis is on the vertical, where the Euler angles phi and psi are undefined."""


def form_code(name: str) -> int:
    try:
        return FORM_NAMES.index(name)
    except ValueError:
        raise ValueError(f"unknown state form {name!r}; expected one of {FORM_NAMES}") from None


@njit(cache=True)
def euler_to_body(ye, out):
    """Canonical Euler state -> body state, written into out (7)."""
    phi, theta, psi = ye[E_PHI], ye[E_THETA], ye[E_PSI]
    q0, q1, q2, q3 = from_euler(phi, theta, psi)
    s = math.sin(theta)
    c = math.cos(theta)
    a_over_s = (ye[E_PPHI] - ye[E_PPSI] * c) / s
    cp = math.cos(psi)
    sp = math.sin(psi)
    pt = ye[E_PTHETA]
    out[B_Q0] = q0
    out[B_Q1] = q1
    out[B_Q2] = q2
    out[B_Q3] = q3
    out[B_M1] = pt * cp + a_over_s * sp
    out[B_M2] = -pt * sp + a_over_s * cp
    out[B_M3] = ye[E_PPSI]


@njit(cache=True)
def body_to_euler(yb, out):
    """Body state -> canonical Euler state, written into out (6); False where sin(theta) = 0."""
    q0, q1, q2, q3 = yb[B_Q0], yb[B_Q1], yb[B_Q2], yb[B_Q3]
    nrm = math.sqrt(q0 * q0 + q1 * q1 + q2 * q2 + q3 * q3)
    q0 /= nrm
    q1 /= nrm
    q2 /= nrm
    q3 /= nrm
    phi, theta, psi = to_euler(q0, q1, q2, q3)
    g1, g2, g3 = vertical_in_body(q0, q1, q2, q3)
    m1, m2, m3 = yb[B_M1], yb[B_M2], yb[B_M3]
    out[E_PHI] = phi
    out[E_THETA] = theta
    out[E_PSI] = psi
    out[E_PPHI] = m1 * g1 + m2 * g2 + m3 * g3
    out[E_PTHETA] = m1 * math.cos(psi) - m2 * math.sin(psi)
    out[E_PPSI] = m3
    return math.sin(theta) != 0.0


def _angular_velocity(phi, theta, psi, phidot, thetadot, psidot):
    """Body-axis angular velocity of the z-x-z angles and their rates."""
    st, ct = math.sin(theta), math.cos(theta)
    sp, cp = math.sin(psi), math.cos(psi)
    return (
        phidot * st * sp + thetadot * cp,
        phidot * st * cp - thetadot * sp,
        phidot * ct + psidot,
    )


def body_state(body: RigidBody, phi, theta, psi, phidot, thetadot, psidot) -> np.ndarray:
    """Body-form state from Euler angles and their rates (rad, rad/s). In a field other than
    uniform gravity the angles and rates are relative to the field's frame (the orbit frame,
    turning at -n about e_y), and the momentum is inertial: w = w_rel - n R^T e_y."""
    p = body.params()
    w = _angular_velocity(phi, theta, psi, phidot, thetadot, psidot)
    y = np.empty(N_BODY)
    y[:4] = from_euler(phi, theta, psi)
    if not body.uniform_gravity:
        a = rotate_inverse(y[0], y[1], y[2], y[3], 0.0, 1.0, 0.0)
        n = p[P_ORBIT_N]
        w = (w[0] - n * a[0], w[1] - n * a[1], w[2] - n * a[2])
    y[B_M1] = p[P_I1] * w[0]
    y[B_M2] = p[P_I2] * w[1]
    y[B_M3] = p[P_I3] * w[2]
    # A gyrostat's momentum m = I w + h; added only where h is non-zero, since -0.0 + 0.0 is
    # +0.0 and a rigid body's start must keep its bits.
    for i, k in ((B_M1, P_H1), (B_M2, P_H2), (B_M3, P_H3)):
        if p[k] != 0.0:
            y[i] += p[k]
    return y


def euler_state(body: RigidBody, phi, theta, psi, phidot, thetadot, psidot) -> np.ndarray:
    """Canonical Euler state from Euler angles and their rates; refuses sin(theta) = 0."""
    if math.sin(theta) == 0.0:
        raise SingularAttitude(
            "theta: the figure axis is on the vertical (sin(theta) = 0), where phi and psi "
            "are undefined; use the body form"
        )
    yb = body_state(body, phi, theta, psi, phidot, thetadot, psidot)
    ye = np.empty(N_EULER)
    body_to_euler(yb, ye)
    # Keep the caller's angles rather than the folded ones from the quaternion.
    ye[E_PHI], ye[E_THETA], ye[E_PSI] = phi, theta, psi
    return ye


def to_body(y_euler: np.ndarray) -> np.ndarray:
    out = np.empty(N_BODY)
    if math.sin(float(y_euler[E_THETA])) == 0.0:
        raise SingularAttitude("theta: sin(theta) = 0, the Euler state is singular")
    euler_to_body(np.ascontiguousarray(y_euler, dtype=np.float64), out)
    return out


def to_euler_form(y_body: np.ndarray) -> np.ndarray:
    out = np.empty(N_EULER)
    if not body_to_euler(np.ascontiguousarray(y_body, dtype=np.float64), out):
        raise SingularAttitude(
            "theta: the figure axis is on the vertical (sin(theta) = 0); the body state has no "
            "Euler-angle form there"
        )
    return out


def euler_rates(body: RigidBody, y_euler: np.ndarray) -> tuple[float, float, float]:
    """(phidot, thetadot, psidot) of a canonical state of a symmetric top (DESIGN relations)."""
    p = body.params()
    i1, i3 = p[P_I1], p[P_I3]
    theta = y_euler[E_THETA]
    s, c = math.sin(theta), math.cos(theta)
    a = y_euler[E_PPHI] - y_euler[E_PPSI] * c
    phidot = a / (i1 * s * s)
    return phidot, y_euler[E_PTHETA] / i1, (y_euler[E_PPSI] - p[P_H3]) / i3 - c * phidot
