"""Unit quaternions, scalar first, body to space: x_space = q x_body conj(q).

Scalar-in, scalar-out numba helpers, so that kernels build no arrays inside a step.
"""

from __future__ import annotations

import math

from numba import njit


@njit(cache=True, inline="always")
def qmul(a0, a1, a2, a3, b0, b1, b2, b3):
    """Hamilton product a * b."""
    return (
        a0 * b0 - a1 * b1 - a2 * b2 - a3 * b3,
        a0 * b1 + a1 * b0 + a2 * b3 - a3 * b2,
        a0 * b2 - a1 * b3 + a2 * b0 + a3 * b1,
        a0 * b3 + a1 * b2 - a2 * b1 + a3 * b0,
    )


@njit(cache=True, inline="always")
def rotate(q0, q1, q2, q3, x, y, z):
    """q x conj(q) for a unit q: a body vector seen in space."""
    # t = 2 (qv x v); v' = v + q0 t + qv x t  (the usual two-cross-product form)
    tx = 2.0 * (q2 * z - q3 * y)
    ty = 2.0 * (q3 * x - q1 * z)
    tz = 2.0 * (q1 * y - q2 * x)
    return (
        x + q0 * tx + (q2 * tz - q3 * ty),
        y + q0 * ty + (q3 * tx - q1 * tz),
        z + q0 * tz + (q1 * ty - q2 * tx),
    )


@njit(cache=True, inline="always")
def rotate_inverse(q0, q1, q2, q3, x, y, z):
    """conj(q) x q for a unit q: a space vector seen from the body."""
    return rotate(q0, -q1, -q2, -q3, x, y, z)


@njit(cache=True, inline="always")
def vertical_in_body(q0, q1, q2, q3):
    """Gamma = R^T e_z, the upward vertical in body axes (third row of R)."""
    return (
        2.0 * (q1 * q3 - q0 * q2),
        2.0 * (q2 * q3 + q0 * q1),
        q0 * q0 - q1 * q1 - q2 * q2 + q3 * q3,
    )


@njit(cache=True, inline="always")
def figure_axis(q0, q1, q2, q3):
    """R e3, body axis 3 in space (third column of R)."""
    return (
        2.0 * (q1 * q3 + q0 * q2),
        2.0 * (q2 * q3 - q0 * q1),
        q0 * q0 - q1 * q1 - q2 * q2 + q3 * q3,
    )


@njit(cache=True, inline="always")
def from_euler(phi, theta, psi):
    """q for R = Rz(phi) Rx(theta) Rz(psi)."""
    ch = math.cos(0.5 * theta)
    sh = math.sin(0.5 * theta)
    sp = 0.5 * (phi + psi)
    sm = 0.5 * (phi - psi)
    return (ch * math.cos(sp), sh * math.cos(sm), sh * math.sin(sm), ch * math.sin(sp))


@njit(cache=True, inline="always")
def to_euler(q0, q1, q2, q3):
    """(phi, theta, psi) of a unit quaternion, z-x-z; theta in [0, pi], phi and psi in (-pi, pi].

    At sin(theta) = 0 only phi + psi (or phi - psi) is defined; the caller must check.
    """
    # theta from the half-angle parts, which stays accurate near 0 and pi (unlike acos).
    a = math.hypot(q0, q3)
    b = math.hypot(q1, q2)
    theta = 2.0 * math.atan2(b, a)
    splus = math.atan2(q3, q0)  # (phi + psi) / 2
    sminus = math.atan2(q2, q1)  # (phi - psi) / 2
    phi = splus + sminus
    psi = splus - sminus
    # Fold into (-pi, pi].
    phi = math.atan2(math.sin(phi), math.cos(phi))
    psi = math.atan2(math.sin(psi), math.cos(psi))
    return phi, theta, psi
