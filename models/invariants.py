"""Conserved quantities in both forms.

energy  H = T + V                      (every body; a gyrostat's T is the shell's,
                                        (m - h).I^-1 (m - h) / 2 with m = I w + h)
p_phi   L.e_z, vertical momentum        (every body: gravity exerts no torque about e_z)
p_psi   L.e3, spin momentum             (exact when I1 = I2 and the centre of mass and any rotor
                                        are on axis 3; it is then I3 w3 + h3)
norm    |q|                             (body form; 1 in the Euler form)
kov     Kovalevskaya's integral |(w1 + i w2)^2 - c (G1 + i G2)|^2, c = M g |chi| / I3, in body
        axes turned so that chi lies on axis 1 (a first integral when I1 = I2 = 2 I3 and chi is
        in the equatorial plane; derived from the Euler-Poisson equations, see Kovalevskaya 1889)

In the gravity gradient (models/fields.py) "energy" is the Jacobi integral of the orbit frame,
T + V + n e_y.(R m) with V = (3 n^2 / 2) Gamma.I Gamma; p_phi and p_psi are still L.e_z and m3
(written so that a run can show them) but are no invariants there: the metrics null them.
A plug-in field's energy is T + its potential (zero for one without a potential); whether it,
p_phi and p_psi are invariants the field says (models/field_plugins.py), and the metrics null
those it breaks.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .body import (
    P_FIELD,
    P_H1,
    P_H2,
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
    P_ORBIT_N,
)
from .field_spec import FIELD_UNIFORM
from .fields import orbit_axis_in_body, other_potential
from .forms import FORM_EULER
from .quaternion import vertical_in_body

INV_ENERGY = 0
INV_P_PHI = 1
INV_P_PSI = 2
INV_NORM = 3
INV_KOV = 4
N_INVARIANTS = 5
INVARIANT_NAMES = ("energy", "p_phi", "p_psi", "norm", "kovalevskaya")


@njit(cache=True)
def _unit_vertical(y):
    q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
    n2 = q0 * q0 + q1 * q1 + q2 * q2 + q3 * q3
    g1, g2, g3 = vertical_in_body(q0, q1, q2, q3)
    return g1 / n2, g2 / n2, g3 / n2, math.sqrt(n2)


@njit(cache=True)
def invariants(form, y, p, out):
    """Write energy, p_phi, p_psi, |q| and Kovalevskaya's integral into out (5)."""
    if form == FORM_EULER:
        theta = y[1]
        s = math.sin(theta)
        c = math.cos(theta)
        a = y[3] - y[5] * c
        spin = y[5] - p[P_H3]  # I3 w3 (x - 0.0 is x: a rigid top's bits are unchanged)
        out[INV_ENERGY] = (
            0.5 * y[4] * y[4] * p[P_INV1]
            + 0.5 * a * a * p[P_INV1] / (s * s)
            + 0.5 * spin * spin * p[P_INV3]
            + p[P_MGZ] * c
        )
        out[INV_P_PHI] = y[3]
        out[INV_P_PSI] = y[5]
        out[INV_NORM] = 1.0
        out[INV_KOV] = math.nan
        return
    g1, g2, g3, nq = _unit_vertical(y)
    m1, m2, m3 = y[4], y[5], y[6]
    # The shell's rate and momentum I w = m - h (a gyrostat); x - 0.0 is x for a rigid body.
    w1 = m1 * p[P_INV1] - p[P_HW1]
    w2 = m2 * p[P_INV2] - p[P_HW2]
    w3 = m3 * p[P_INV3] - p[P_HW3]
    s1, s2, s3 = m1 - p[P_H1], m2 - p[P_H2], m3 - p[P_H3]
    if p[P_FIELD] != FIELD_UNIFORM:
        a1, a2, a3 = orbit_axis_in_body(y[0], y[1], y[2], y[3])
        out[INV_ENERGY] = (
            0.5 * (s1 * w1 + s2 * w2 + s3 * w3)
            + other_potential(p, y[0] / nq, y[1] / nq, y[2] / nq, y[3] / nq, g1, g2, g3)
            + p[P_ORBIT_N] * (a1 * m1 + a2 * m2 + a3 * m3) / (nq * nq)
        )
    else:
        out[INV_ENERGY] = 0.5 * (s1 * w1 + s2 * w2 + s3 * w3) + (
            p[P_MGX] * g1 + p[P_MGY] * g2 + p[P_MGZ] * g3
        )
    out[INV_P_PHI] = m1 * g1 + m2 * g2 + m3 * g3
    out[INV_P_PSI] = m3
    out[INV_NORM] = nq
    r = math.hypot(p[P_MGX], p[P_MGY])
    rotor = p[P_H1] != 0.0 or p[P_H2] != 0.0 or p[P_H3] != 0.0
    if r > 0.0 and not rotor:  # no integral of a gyrostat
        ca = p[P_MGX] / r
        sa = p[P_MGY] / r
        x1 = w1 * ca + w2 * sa
        x2 = -w1 * sa + w2 * ca
        h1 = g1 * ca + g2 * sa
        h2 = -g1 * sa + g2 * ca
        k = r * p[P_INV3]
        re = x1 * x1 - x2 * x2 - k * h1
        im = 2.0 * x1 * x2 - k * h2
        out[INV_KOV] = re * re + im * im
    else:
        out[INV_KOV] = math.nan


def invariants_of(form: int, y: np.ndarray, params: np.ndarray) -> dict[str, float]:
    out = np.empty(N_INVARIANTS)
    invariants(form, np.ascontiguousarray(y, dtype=np.float64), params, out)
    return dict(zip(INVARIANT_NAMES, (float(v) for v in out), strict=True))
