"""Exact sub-flows for the splitting methods, in place on the state.

Both forms split the same way: a "drift" part A and a "kick" part B whose flows are exact and
explicit. `flow_a(form, h, y, p)` and `flow_b(form, h, y, p)` are the entry points integrator
kernels call by name.

euler: A = p_theta^2/(2 I1) + p_psi^2/(2 I3)           (theta, psi move linearly)
       B = (p_phi - p_psi cos theta)^2/(2 I1 sin^2 theta) + M g l cos theta
                                                       (theta fixed: kick p_theta, move phi, psi)
body:  A = kinetic energy, the exact free flow          (exact for I1 = I2; for I1 != I2 the
           symmetric part and one rotation about body axis 2, composed symmetrically)
       B = potential, M g chi.Gamma                    (q fixed: kick m)
"""

from __future__ import annotations

import math

from numba import njit

from .body import P_I1, P_I2, P_INV1, P_INV2, P_INV3, P_MGX, P_MGY, P_MGZ
from .forms import FORM_EULER
from .quaternion import qmul, rotate, vertical_in_body


@njit(cache=True)
def drift_euler(h, y, p):
    y[1] += h * y[4] * p[P_INV1]
    y[2] += h * y[5] * p[P_INV3]


@njit(cache=True)
def kick_euler(h, y, p):
    theta = y[1]
    p_psi = y[5]
    s = math.sin(theta)
    c = math.cos(theta)
    a = y[3] - p_psi * c
    r = a * p[P_INV1] / (s * s)
    y[0] += h * r
    y[2] -= h * c * r
    y[4] += h * (r * (a * c / s - p_psi * s) + p[P_MGZ] * s)


@njit(cache=True)
def kick_body(h, y, p):
    """Potential flow: q fixed, m += h M g (Gamma x chi); m3 untouched when chi is on axis 3."""
    g1, g2, g3 = vertical_in_body(y[0], y[1], y[2], y[3])
    cx, cy, cz = p[P_MGX], p[P_MGY], p[P_MGZ]
    y[4] += h * (g2 * cz - g3 * cy)
    y[5] += h * (g3 * cx - g1 * cz)
    if cx != 0.0 or cy != 0.0:
        y[6] += h * (g1 * cy - g2 * cx)


@njit(cache=True)
def free_symmetric(h, y, p):
    """Exact free flow of a body with I1 = I2 = p[P_I1].

    R(h) = Rot(L/|L|, |L| h / I1) R(0) Rot(e3, c3 h), m(h) = Rot(e3, -c3 h) m(0),
    c3 = (1/I3 - 1/I1) m3. m is turned about e3 directly, so m3 is never touched.
    """
    q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
    m1, m2, m3 = y[4], y[5], y[6]
    lx, ly, lz = rotate(q0, q1, q2, q3, m1, m2, m3)
    lnorm = math.sqrt(lx * lx + ly * ly + lz * lz)
    if lnorm > 0.0:
        half = 0.5 * h * lnorm * p[P_INV1]
        sh = math.sin(half) / lnorm
        q0, q1, q2, q3 = qmul(math.cos(half), sh * lx, sh * ly, sh * lz, q0, q1, q2, q3)
    beta = h * (p[P_INV3] - p[P_INV1]) * m3
    cb = math.cos(beta)
    sb = math.sin(beta)
    hb = 0.5 * beta
    q0, q1, q2, q3 = qmul(q0, q1, q2, q3, math.cos(hb), 0.0, 0.0, math.sin(hb))
    # One Newton step towards |q| = 1: division-free and enough, since the error is round-off.
    f = 0.5 * (3.0 - (q0 * q0 + q1 * q1 + q2 * q2 + q3 * q3))
    y[0] = q0 * f
    y[1] = q1 * f
    y[2] = q2 * f
    y[3] = q3 * f
    y[4] = m1 * cb + m2 * sb
    y[5] = m2 * cb - m1 * sb


@njit(cache=True)
def turn_axis2(h, y, p):
    """Exact flow of the remainder (1/I2 - 1/I1) m2^2 / 2: a turn about body axis 2."""
    beta = h * (p[P_INV2] - p[P_INV1]) * y[5]
    hb = 0.5 * beta
    q0, q1, q2, q3 = qmul(y[0], y[1], y[2], y[3], math.cos(hb), 0.0, math.sin(hb), 0.0)
    y[0], y[1], y[2], y[3] = q0, q1, q2, q3
    cb = math.cos(beta)
    sb = math.sin(beta)
    m1, m3 = y[4], y[6]
    y[4] = m1 * cb - m3 * sb
    y[6] = m1 * sb + m3 * cb


@njit(cache=True)
def free_body(h, y, p):
    """Free flow of any body: exact when I1 = I2, else a symmetric second-order composition."""
    if p[P_I1] == p[P_I2]:
        free_symmetric(h, y, p)
    else:
        turn_axis2(0.5 * h, y, p)
        free_symmetric(h, y, p)
        turn_axis2(0.5 * h, y, p)


@njit(cache=True)
def flow_a(form, h, y, p):
    if form == FORM_EULER:
        drift_euler(h, y, p)
    else:
        free_body(h, y, p)


@njit(cache=True)
def flow_b(form, h, y, p):
    if form == FORM_EULER:
        kick_euler(h, y, p)
    else:
        kick_body(h, y, p)
