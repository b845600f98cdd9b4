"""The Lie-group generalized-alpha step (Bruls, Cardona and Arnold, Mech. Mach. Theory 48 (2012)
121) for a heavy body, body form only.

The body as a second-order system on SO(3) x R^3: R' = R hat(w), and the equation of motion
written in momentum units, r = m' + w x m - tau(q) = 0 with m = I w, tau = M g Gamma x chi
(models/dynamics.py). Besides (q, m) the scheme carries m' (md) and the pseudo-acceleration A,
both in momentum units (the scheme is linear, so scaling every rate by the constant diagonal I
changes nothing). One step, with the incremental rotation vector dth:

  (1 - a_m) A1 + a_m A = (1 - a_f) md1 + a_f md
  dth = h w + h^2 ((1/2 - beta) A + beta A1) / I,      q1 = q turn(dth)
  m1  = m + h ((1 - gamma) A + gamma A1)
  md1 + w1 x m1 - tau(q1) = 0                            (solved for md1)

with turn(v) the unit quaternion of the turn by |v| about v (its sine and cosine). The residual
is solved by Newton's method with the iteration matrix 1 + h gamma c (hat(w) - hat(m) I^-1)
+ h^2 beta c hat(chi_g) hat(Gamma) I^-1, c = (1 - a_f)/(1 - a_m): the exact derivative but for
the tangent operator of the exponential (1 + O(dth), so the iteration converges linearly at a
rate O(h |w|)); it stops when the correction is at the rounding level of the residual's terms,
not after a fixed count, and a step that has not converged in NEWTON_MAXIT iterations is not
committed (ST_NO_CONVERGENCE).

The coefficients from rho_inf (Chung and Hulbert, J. Appl. Mech. 60 (1993) 371; from memory,
the convention above): a_m = (2 rho - 1)/(rho + 1), a_f = rho/(rho + 1), gamma = 1/2 + a_f - a_m,
beta = (gamma + 1/2)^2 / 4. gamma = 1/2 + a_f - a_m makes the scheme second order.
"""

from __future__ import annotations

import math

from numba import njit

from topdrift.integrators.base import (
    C_EVALS,
    C_FORCE_EVALS,
    C_STEPS,
    ST_DIVERGED,
    ST_NO_CONVERGENCE,
    ST_OK,
)
from topdrift.models.body import P_INV1, P_INV2, P_INV3, P_MGX, P_MGY, P_MGZ
from topdrift.models.forms import FORM_BODY
from topdrift.models.quaternion import qmul, vertical_in_body

NEWTON_MAXIT = 50
# A correction below this many eps times the size of the residual's terms is rounding.
NEWTON_TOL = 16.0 * 2.0**-52
SMALL_HALF_ANGLE = 1e-4  # below it sin(x)/x by its series to x^2 (exact to rounding there)
N_AUX = 6  # md (3), A (3)


def coefficients(rho: float) -> tuple[float, float, float, float]:
    """(a_m, a_f, gamma, beta) of rho_inf (Chung and Hulbert 1993; from memory)."""
    am = (2.0 * rho - 1.0) / (rho + 1.0)
    af = rho / (rho + 1.0)
    gamma = 0.5 + af - am
    beta = 0.25 * (gamma + 0.5) ** 2
    return am, af, gamma, beta


@njit(cache=True, inline="always")
def _turn(v1, v2, v3):
    n = math.sqrt(v1 * v1 + v2 * v2 + v3 * v3)
    half = 0.5 * n
    if half < SMALL_HALF_ANGLE:
        s = 0.5 * (1.0 - half * half / 6.0)
    else:
        s = math.sin(half) / n
    return math.cos(half), s * v1, s * v2, s * v3


@njit(cache=True, inline="always")
def _torque(p, g1, g2, g3):
    cx, cy, cz = p[P_MGX], p[P_MGY], p[P_MGZ]
    return g2 * cz - g3 * cy, g3 * cx - g1 * cz, g1 * cy - g2 * cx


@njit(cache=True)
def initial_aux(y, p, aux):
    """md and A at the start: md from the equation of motion, A = md (common practice)."""
    m1, m2, m3 = y[4], y[5], y[6]
    g1, g2, g3 = vertical_in_body(y[0], y[1], y[2], y[3])
    t1, t2, t3 = _torque(p, g1, g2, g3)
    aux[0] = t1 - m2 * m3 * (p[P_INV2] - p[P_INV3])  # w x m, written so that a component
    aux[1] = t2 - m3 * m1 * (p[P_INV3] - p[P_INV1])  # whose two moments are equal is exactly
    aux[2] = t3 - m1 * m2 * (p[P_INV1] - p[P_INV2])  # zero (m3 of a Lagrange top kept to the bit)
    aux[3], aux[4], aux[5] = aux[0], aux[1], aux[2]


@njit(cache=True)
def galpha_steps(coef, y, aux, p, h, nsteps, counters):
    """Take up to nsteps steps of h in place on the body state y and its (md, A) in aux; coef
    is (a_m, a_f, gamma, beta). Returns (status, steps taken); a failed step is not committed."""
    am, af, gam, beta = coef[0], coef[1], coef[2], coef[3]
    c = (1.0 - af) / (1.0 - am)
    inv1, inv2, inv3 = p[P_INV1], p[P_INV2], p[P_INV3]
    cx, cy, cz = p[P_MGX], p[P_MGY], p[P_MGZ]
    cg = h * gam * c
    cb = h * h * beta * c
    done = 0
    for _ in range(nsteps):
        q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
        m1, m2, m3 = y[4], y[5], y[6]
        d1, d2, d3 = aux[0], aux[1], aux[2]
        a1, a2, a3 = aux[3], aux[4], aux[5]
        # the part of A1 that does not depend on md1
        f1 = (af * d1 - am * a1) / (1.0 - am)
        f2 = (af * d2 - am * a2) / (1.0 - am)
        f3 = (af * d3 - am * a3) / (1.0 - am)
        x1, x2, x3 = d1, d2, d3  # md1, from the last step's md
        converged = False
        for _it in range(NEWTON_MAXIT):
            b1, b2, b3 = c * x1 + f1, c * x2 + f2, c * x3 + f3
            n1 = m1 + h * ((1.0 - gam) * a1 + gam * b1)
            n2 = m2 + h * ((1.0 - gam) * a2 + gam * b2)
            n3 = m3 + h * ((1.0 - gam) * a3 + gam * b3)
            e1 = h * (m1 + h * ((0.5 - beta) * a1 + beta * b1)) * inv1
            e2 = h * (m2 + h * ((0.5 - beta) * a2 + beta * b2)) * inv2
            e3 = h * (m3 + h * ((0.5 - beta) * a3 + beta * b3)) * inv3
            u0, u1, u2, u3 = _turn(e1, e2, e3)
            r0, r1, r2, r3 = qmul(q0, q1, q2, q3, u0, u1, u2, u3)
            g1, g2, g3 = vertical_in_body(r0, r1, r2, r3)
            t1, t2, t3 = _torque(p, g1, g2, g3)
            counters[C_EVALS] += 1
            counters[C_FORCE_EVALS] += 1
            w1, w2, w3 = n1 * inv1, n2 * inv2, n3 * inv3
            k1, k2, k3 = n2 * n3 * (inv2 - inv3), n3 * n1 * (inv3 - inv1), n1 * n2 * (inv1 - inv2)
            s1, s2, s3 = x1 + k1 - t1, x2 + k2 - t2, x3 + k3 - t3
            # J = 1 + cg (hat(w) - hat(m) I^-1) + cb hat(chi) hat(Gamma) I^-1, column by column
            # (column j: e_j, inv_j e_j); hat(a) hat(b) v = b (a . v) - v (a . b). Each gyroscopic
            # entry is one difference, exactly zero where the two moments are equal
            ab = cx * g1 + cy * g2 + cz * g3
            j11 = 1.0 + cb * inv1 * (g1 * cx - ab)
            j21 = cg * (w3 - n3 * inv1) + cb * inv1 * (g2 * cx)
            j31 = cg * (n2 * inv1 - w2) + cb * inv1 * (g3 * cx)
            j12 = cg * (n3 * inv2 - w3) + cb * inv2 * (g1 * cy)
            j22 = 1.0 + cb * inv2 * (g2 * cy - ab)
            j32 = cg * (w1 - n1 * inv2) + cb * inv2 * (g3 * cy)
            j13 = cg * (w2 - n2 * inv3) + cb * inv3 * (g1 * cz)
            j23 = cg * (n1 * inv3 - w1) + cb * inv3 * (g2 * cz)
            j33 = 1.0 + cb * inv3 * (g3 * cz - ab)
            c11 = j22 * j33 - j23 * j32
            c12 = j23 * j31 - j21 * j33
            c13 = j21 * j32 - j22 * j31
            det = j11 * c11 + j12 * c12 + j13 * c13
            z1 = -(s1 * c11 + s2 * (j13 * j32 - j12 * j33) + s3 * (j12 * j23 - j13 * j22)) / det
            z2 = -(s1 * c12 + s2 * (j11 * j33 - j13 * j31) + s3 * (j13 * j21 - j11 * j23)) / det
            z3 = -(s1 * c13 + s2 * (j12 * j31 - j11 * j32) + s3 * (j11 * j22 - j12 * j21)) / det
            x1, x2, x3 = x1 + z1, x2 + z2, x3 + z3
            size = abs(z1) + abs(z2) + abs(z3)
            # the rounding level of the residual's terms: md1, the gyroscopic term (|w| |m|)
            # and the torque (|chi_g|: Gamma is a unit vector, so the torque rounds at eps
            # |chi_g| even where it is small, near the vertical)
            scale = (
                abs(x1)
                + abs(x2)
                + abs(x3)
                + (abs(w1) + abs(w2) + abs(w3)) * (abs(n1) + abs(n2) + abs(n3))
                + abs(cx)
                + abs(cy)
                + abs(cz)
            )
            if not math.isfinite(size):
                break
            if size <= NEWTON_TOL * scale:
                converged = True
                break
        if not converged:
            return ST_NO_CONVERGENCE, done
        # the state of the converged md1
        b1, b2, b3 = c * x1 + f1, c * x2 + f2, c * x3 + f3
        n1 = m1 + h * ((1.0 - gam) * a1 + gam * b1)
        n2 = m2 + h * ((1.0 - gam) * a2 + gam * b2)
        n3 = m3 + h * ((1.0 - gam) * a3 + gam * b3)
        e1 = h * (m1 + h * ((0.5 - beta) * a1 + beta * b1)) * inv1
        e2 = h * (m2 + h * ((0.5 - beta) * a2 + beta * b2)) * inv2
        e3 = h * (m3 + h * ((0.5 - beta) * a3 + beta * b3)) * inv3
        u0, u1, u2, u3 = _turn(e1, e2, e3)
        r0, r1, r2, r3 = qmul(q0, q1, q2, q3, u0, u1, u2, u3)
        total = r0 + r1 + r2 + r3 + n1 + n2 + n3 + x1 + x2 + x3 + b1 + b2 + b3
        if not math.isfinite(total):
            return ST_DIVERGED, done
        y[0], y[1], y[2], y[3] = r0, r1, r2, r3
        y[4], y[5], y[6] = n1, n2, n3
        aux[0], aux[1], aux[2] = x1, x2, x3
        aux[3], aux[4], aux[5] = b1, b2, b3
        counters[C_STEPS] += 1
        done += 1
    return ST_OK, done


FORM = FORM_BODY
