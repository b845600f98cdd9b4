"""Equations of motion in both state forms, as numba kernels that write into a given array.

`rhs(form, y, p, dy)` is the one entry point integrator kernels call by name: a module-level
jitted function switching on the form, which numba caches across processes (DEVELOPERS.md).
"""

from __future__ import annotations

import math

from numba import njit

from .body import (
    P_FIELD,
    P_H3,
    P_HW1,
    P_HW2,
    P_HW3,
    P_INV1,
    P_INV2,
    P_INV3,
    P_MGX,
    P_MGY,
    P_MGZ,
)
from .field_spec import FIELD_UNIFORM
from .fields import frame_rate, other_torque
from .forms import FORM_EULER
from .quaternion import vertical_in_body


@njit(cache=True)
def rhs_euler(y, p, dy):
    """Hamilton's equations of the symmetric heavy top, canonical Euler-angle variables. A rotor
    on the figure axis (h3) only slows the shell's spin: psidot = (p_psi - h3) / I3 - c phidot."""
    theta = y[1]
    p_phi = y[3]
    p_theta = y[4]
    p_psi = y[5]
    s = math.sin(theta)
    c = math.cos(theta)
    inv1 = p[P_INV1]
    a = p_phi - p_psi * c
    r = a * inv1 / (s * s)  # phidot
    dy[0] = r
    dy[1] = p_theta * inv1
    dy[2] = (p_psi - p[P_H3]) * p[P_INV3] - c * r  # p_psi - 0.0 is p_psi, bit for bit
    dy[3] = 0.0
    dy[4] = r * (a * c / s - p_psi * s) + p[P_MGZ] * s
    dy[5] = 0.0


@njit(cache=True)
def rhs_body(y, p, dy):
    """Euler-Poisson equations: m' = m x w + M g (Gamma x chi), q' = q (0, w) / 2. For a
    gyrostat m is the total body momentum I w + h and w = I^-1 m - I^-1 h (the offset is zero,
    and x - 0.0 is x, for a rigid body: its bits are unchanged)."""
    q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
    m1, m2, m3 = y[4], y[5], y[6]
    w1 = m1 * p[P_INV1] - p[P_HW1]
    w2 = m2 * p[P_INV2] - p[P_HW2]
    w3 = m3 * p[P_INV3] - p[P_HW3]
    g1, g2, g3 = vertical_in_body(q0, q1, q2, q3)
    cx, cy, cz = p[P_MGX], p[P_MGY], p[P_MGZ]
    dy[0] = 0.5 * (-q1 * w1 - q2 * w2 - q3 * w3)
    dy[1] = 0.5 * (q0 * w1 + q2 * w3 - q3 * w2)
    dy[2] = 0.5 * (q0 * w2 - q1 * w3 + q3 * w1)
    dy[3] = 0.5 * (q0 * w3 + q1 * w2 - q2 * w1)
    dy[4] = m2 * w3 - m3 * w2 + (g2 * cz - g3 * cy)
    dy[5] = m3 * w1 - m1 * w3 + (g3 * cx - g1 * cz)
    dy[6] = m1 * w2 - m2 * w1 + (g1 * cy - g2 * cx)


@njit(cache=True)
def rhs_field(y, p, dy):
    """The body form in a field other than uniform gravity (models/fields.py): the attitude
    turns at the rate relative to the field's frame, w + n R^T e_y, and the momentum feels the
    gravity-gradient torque, m' = m x w + 3 n^2 Gamma x I Gamma; a plug-in field's frame does not
    turn (n = 0) and its torque is its own. A function of its own, chosen by `rhs`, so that
    rhs_body, the heavy top's, is compiled exactly as before fields."""
    q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
    m1, m2, m3 = y[4], y[5], y[6]
    w1 = m1 * p[P_INV1] - p[P_HW1]
    w2 = m2 * p[P_INV2] - p[P_HW2]
    w3 = m3 * p[P_INV3] - p[P_HW3]
    f1, f2, f3 = frame_rate(p, q0, q1, q2, q3)
    t1, t2, t3 = other_torque(p, q0, q1, q2, q3, m1, m2, m3)
    r1, r2, r3 = w1 + f1, w2 + f2, w3 + f3
    dy[0] = 0.5 * (-q1 * r1 - q2 * r2 - q3 * r3)
    dy[1] = 0.5 * (q0 * r1 + q2 * r3 - q3 * r2)
    dy[2] = 0.5 * (q0 * r2 - q1 * r3 + q3 * r1)
    dy[3] = 0.5 * (q0 * r3 + q1 * r2 - q2 * r1)
    dy[4] = m2 * w3 - m3 * w2 + t1
    dy[5] = m3 * w1 - m1 * w3 + t2
    dy[6] = m1 * w2 - m2 * w1 + t3


# inline="always": a plain call from another cached kernel is not inlined and costs about 30 ns
# per evaluation in reference counting of its three arrays (measured, numba 0.68); inlined, the
# switch folds away in kernels that pass the form as a constant.
@njit(cache=True, inline="always")
def rhs(form, y, p, dy):
    if form == FORM_EULER:
        rhs_euler(y, p, dy)
    elif p[P_FIELD] == FIELD_UNIFORM:
        rhs_body(y, p, dy)
    else:
        rhs_field(y, p, dy)


@njit(cache=True)
def singular(form, y):
    """True where the state has left the domain of its form (Euler angles at the pole)."""
    if form == FORM_EULER:
        theta = y[1]
        return not (theta > 0.0 and theta < math.pi)
    return False
