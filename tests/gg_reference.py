"""An independent reference for the gravity-gradient field: the same physics written again in
another formulation, sharing no code with topdrift's kernels.

Inertial space, rotation matrices, no quaternion and no rotating frame: the body's attitude in
inertial axes R_I (3 x 3, body to inertial) and its inertial rate w in body axes obey

    R_I' = R_I [w]x,    I w' = (I w + h) x w + 3 n^2 c x (I c),    c = R_I^T a(t)

with a(t) the direction to the primary in inertial axes: the orbit frame coincides with the
inertial one at t = 0 and turns at -n about e_y, so a(t) = Rot(e_y, -n t) e_z. The body's attitude
relative to the orbit frame is A(t)^T R_I(t), A(t) = Rot(e_y, -n t). The torque is the textbook
gravity-gradient torque of a point-mass primary on a circular orbit, mu / r^3 = n^2 (Hughes,
Spacecraft Attitude Dynamics, 1986, ch. 8; Wie, Space Vehicle Dynamics and Control, 1998,
sec. 6.3; from memory). Integrated with scipy's DOP853 at rtol 1e-13.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.integrate import solve_ivp


def rot(axis: int, angle: float) -> np.ndarray:
    """The rotation matrix by `angle` about coordinate axis 0, 1 or 2 (right-handed)."""
    c, s = math.cos(angle), math.sin(angle)
    i, j = (axis + 1) % 3, (axis + 2) % 3
    r = np.eye(3)
    r[i, i] = c
    r[j, j] = c
    r[i, j] = -s
    r[j, i] = s
    return r


def euler_matrix(phi: float, theta: float, psi: float) -> np.ndarray:
    """z-x-z: Rz(phi) Rx(theta) Rz(psi), body to the orbit frame."""
    return rot(2, phi) @ rot(0, theta) @ rot(2, psi)


def start(phi, theta, psi, phidot, thetadot, psidot, n):
    """(R_I(0), inertial body rate w(0)) from the angles and rates relative to the orbit frame:
    the relative rate in space is phidot e_z + thetadot e_N + psidot e_3 (e_N = Rz(phi) e_x the
    line of nodes, e_3 = R e_z), and the orbit frame's own rate -n e_y is added to it."""
    r = euler_matrix(phi, theta, psi)
    e_n = rot(2, phi) @ np.array([1.0, 0.0, 0.0])
    e_3 = r @ np.array([0.0, 0.0, 1.0])
    w_space = phidot * np.array([0.0, 0.0, 1.0]) + thetadot * e_n + psidot * e_3
    w_space = w_space + np.array([0.0, -n, 0.0])
    return r, r.T @ w_space


def integrate(inertia, n, r0, w0, times, rotor=(0.0, 0.0, 0.0), rtol=1e-13):
    """Relative attitudes (len(times), 3, 3) and inertial rates (len(times), 3)."""
    inertia = np.asarray(inertia, dtype=float)
    h = np.asarray(rotor, dtype=float)
    k = 3.0 * n * n

    def f(t, y):
        r = y[:9].reshape(3, 3)
        w = y[9:]
        a = rot(1, -n * t)[:, 2]  # Rot(e_y, -n t) e_z
        c = r.T @ a
        torque = k * np.cross(c, inertia * c)
        dw = (np.cross(inertia * w + h, w) + torque) / inertia
        wx = np.array([[0.0, -w[2], w[1]], [w[2], 0.0, -w[0]], [-w[1], w[0], 0.0]])
        return np.concatenate(((r @ wx).ravel(), dw))

    y0 = np.concatenate((np.asarray(r0).ravel(), w0))
    sol = solve_ivp(f, (0.0, times[-1]), y0, method="DOP853", t_eval=times, rtol=rtol,
                    atol=rtol * 1e-3)  # fmt: skip
    assert sol.success, sol.message
    rel = np.empty((len(times), 3, 3))
    for i, t in enumerate(times):
        a_t = rot(1, -n * t)  # the orbit frame's axes in inertial space
        rel[i] = a_t.T @ sol.y[:9, i].reshape(3, 3)
    return rel, sol.y[9:].T.copy()


def jacobi(inertia, n, rel, w, rotor=(0.0, 0.0, 0.0)) -> np.ndarray:
    """T + V + n e_y.L in the orbit frame, from the relative attitude and the inertial rate:
    L = R (I w + h), V = (3 n^2 / 2) c.I c with c = R^T e_z."""
    inertia = np.asarray(inertia, dtype=float)
    h = np.asarray(rotor, dtype=float)
    out = np.empty(len(w))
    for i in range(len(w)):
        m = inertia * w[i] + h
        c = rel[i].T @ np.array([0.0, 0.0, 1.0])
        out[i] = (
            0.5 * w[i] @ (inertia * w[i]) + 1.5 * n * n * c @ (inertia * c) + n * (rel[i] @ m)[1]
        )
    return out


def quaternion_matrix(q) -> np.ndarray:
    """Body-to-frame matrix of a unit quaternion (scalar first), written out (common practice)."""
    q0, q1, q2, q3 = np.asarray(q, dtype=float) / np.linalg.norm(q)
    return np.array(
        [
            [
                q0 * q0 + q1 * q1 - q2 * q2 - q3 * q3,
                2 * (q1 * q2 - q0 * q3),
                2 * (q1 * q3 + q0 * q2),
            ],
            [
                2 * (q1 * q2 + q0 * q3),
                q0 * q0 - q1 * q1 + q2 * q2 - q3 * q3,
                2 * (q2 * q3 - q0 * q1),
            ],
            [
                2 * (q1 * q3 - q0 * q2),
                2 * (q2 * q3 + q0 * q1),
                q0 * q0 - q1 * q1 - q2 * q2 + q3 * q3,
            ],
        ]
    )


def rotation_angle(a: np.ndarray, b: np.ndarray) -> float:
    """The angle of the rotation a^T b (rad), from its skew part and trace (no acos near 0)."""
    d = a.T @ b
    s = 0.5 * np.array([d[2, 1] - d[1, 2], d[0, 2] - d[2, 0], d[1, 0] - d[0, 1]])
    return math.atan2(float(np.linalg.norm(s)), 0.5 * (float(np.trace(d)) - 1.0))
