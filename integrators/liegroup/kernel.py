"""The one kernel behind the Lie-group Runge-Kutta methods, body form only.

The state (q, m) lives on the group S^3 x R^3: the attitude is moved by right multiplication
with unit quaternions, q' = q (0, w / 2) with w = I^-1 m the body-frame rate, and the momentum
by addition, m' = m x w + tau(q), tau = M g Gamma(q) x chi the torque in body axes (the
Euler-Poisson equations of models/dynamics.py). turn(u) is the unit quaternion of a turn by |u|
about u, the exponential of the algebra element u (its bracket is the cross product). The
quaternion changes only by products with such turns, so |q| = 1 up to rounding of the products;
nothing renormalises it.

  SCHEME_RKMK4 Runge-Kutta-Munthe-Kaas with the classical RK4 tableau (Munthe-Kaas, BIT 38
               (1998) 92): the stages and the update solve, in the algebra, the equation of the
               coordinate u of q = q0 turn(u), u' = dexpinv_{-u}(w) = w + u x w / 2 +
               u x (u x w) / 12 + O(u^4); the series cut after the u^2 term, which order 4
               needs (the cut error is O(h^4) per stage and enters the step as O(h^5)).
  SCHEME_CG3   Crouch-Grossman of order 3 (Crouch and Grossman, J. Nonlinear Sci. 3 (1993) 1;
               order conditions of Owren and Marthinsen, BIT 39 (1999) 116): each stage and the
               update a product of turns by the frozen stage rates, one per earlier stage, in
               stage order (right action, so the first turn is next to q0).
  SCHEME_CF4   commutator-free of order 4 (Celledoni, Marthinsen and Owren, Future Gener.
               Comput. Syst. 19 (2003) 341): classical RK4 stages, the fourth and the update a
               product of two turns by combinations of stage rates.
The momentum, additive, takes the classical steps of the same tableaux. The coefficients are in
methods.py's notes and tests/test_liegroup.py checks them. Nothing is allocated in a step.
"""

from __future__ import annotations

import math

from numba import njit

from topdrift.integrators.base import C_EVALS, C_FORCE_EVALS, C_STEPS, ST_DIVERGED, ST_OK
from topdrift.models.body import (
    P_FIELD,
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
from topdrift.models.field_spec import FIELD_UNIFORM
from topdrift.models.fields import frame_rate, other_torque
from topdrift.models.forms import FORM_BODY
from topdrift.models.quaternion import qmul, vertical_in_body

SCHEME_RKMK4 = 0
SCHEME_CG3 = 1
SCHEME_CF4 = 2

# Below this half-angle sin(half) / half is its series to the square term, exact to rounding
# there (the next term is half^4 / 120 < 1e-18 relative), which avoids 0 / 0 at u = 0.
SMALL_HALF_ANGLE = 1e-4

# Crouch-Grossman order 3 (Owren and Marthinsen 1999, from memory; the order conditions are
# checked in exact rationals in tests/test_liegroup.py): c = (0, 3/4, 17/24).
CG_A21 = 3.0 / 4.0
CG_A31 = 119.0 / 216.0
CG_A32 = 17.0 / 108.0
CG_B1 = 13.0 / 51.0
CG_B2 = -2.0 / 3.0
CG_B3 = 24.0 / 17.0


@njit(cache=True, inline="always")
def turn(u1, u2, u3):
    """exp(u) as a unit quaternion: the turn by |u| about u."""
    n = math.sqrt(u1 * u1 + u2 * u2 + u3 * u3)
    half = 0.5 * n
    if half < SMALL_HALF_ANGLE:
        s = 0.5 * (1.0 - half * half / 6.0)
    else:
        s = math.sin(half) / n
    return math.cos(half), s * u1, s * u2, s * u3


@njit(cache=True, inline="always")
def turned(q0, q1, q2, q3, u1, u2, u3):
    """q turn(u): q turned in the body frame by u."""
    e0, e1, e2, e3 = turn(u1, u2, u3)
    return qmul(q0, q1, q2, q3, e0, e1, e2, e3)


@njit(cache=True, inline="always")
def rates(p, q0, q1, q2, q3, m1, m2, m3):
    """(w, m') at (q, m): the body rate and the momentum's rate (a gyrostat's w = I^-1 m -
    I^-1 h; minus 0.0 for a rigid body, which leaves its bits). w is the rate q turns at: in a
    field with a turning frame, the rate relative to that frame."""
    w1 = m1 * p[P_INV1] - p[P_HW1]
    w2 = m2 * p[P_INV2] - p[P_HW2]
    w3 = m3 * p[P_INV3] - p[P_HW3]
    g1, g2, g3 = vertical_in_body(q0, q1, q2, q3)
    if p[P_FIELD] != FIELD_UNIFORM:
        # in the gravity gradient the attitude turns at the rate relative to the orbit frame
        # and the torque is the gradient's (models/fields.py; a plug-in field's own, its frame
        # at rest); the stages' q are unit
        f1, f2, f3 = frame_rate(p, q0, q1, q2, q3)
        t1, t2, t3 = other_torque(p, q0, q1, q2, q3, m1, m2, m3)
        return (
            w1 + f1,
            w2 + f2,
            w3 + f3,
            m2 * w3 - m3 * w2 + t1,
            m3 * w1 - m1 * w3 + t2,
            m1 * w2 - m2 * w1 + t3,
        )
    cx, cy, cz = p[P_MGX], p[P_MGY], p[P_MGZ]
    return (
        w1,
        w2,
        w3,
        m2 * w3 - m3 * w2 + g2 * cz - g3 * cy,
        m3 * w1 - m1 * w3 + g3 * cx - g1 * cz,
        m1 * w2 - m2 * w1 + g1 * cy - g2 * cx,
    )


@njit(cache=True, inline="always")
def dexpinv(u1, u2, u3, w1, w2, w3):
    """dexpinv_{-u}(w) cut after the u^2 term: w + u x w / 2 + u x (u x w) / 12."""
    c1 = u2 * w3 - u3 * w2
    c2 = u3 * w1 - u1 * w3
    c3 = u1 * w2 - u2 * w1
    d1 = u2 * c3 - u3 * c2
    d2 = u3 * c1 - u1 * c3
    d3 = u1 * c2 - u2 * c1
    return (
        w1 + 0.5 * c1 + d1 / 12.0,
        w2 + 0.5 * c2 + d2 / 12.0,
        w3 + 0.5 * c3 + d3 / 12.0,
    )


@njit(cache=True, inline="always")
def step_rkmk4(p, h, q0, q1, q2, q3, m1, m2, m3):
    w1, w2, w3, f1, f2, f3 = rates(p, q0, q1, q2, q3, m1, m2, m3)
    ka1, ka2, ka3 = w1, w2, w3  # dexpinv at u = 0 is the identity
    la1, la2, la3 = f1, f2, f3
    # stage 2: u = h K1 / 2
    u1, u2, u3 = 0.5 * h * ka1, 0.5 * h * ka2, 0.5 * h * ka3
    s0, s1, s2, s3 = turned(q0, q1, q2, q3, u1, u2, u3)
    w1, w2, w3, f1, f2, f3 = rates(
        p, s0, s1, s2, s3, m1 + 0.5 * h * la1, m2 + 0.5 * h * la2, m3 + 0.5 * h * la3
    )
    kb1, kb2, kb3 = dexpinv(u1, u2, u3, w1, w2, w3)
    lb1, lb2, lb3 = f1, f2, f3
    # stage 3: u = h K2 / 2
    u1, u2, u3 = 0.5 * h * kb1, 0.5 * h * kb2, 0.5 * h * kb3
    s0, s1, s2, s3 = turned(q0, q1, q2, q3, u1, u2, u3)
    w1, w2, w3, f1, f2, f3 = rates(
        p, s0, s1, s2, s3, m1 + 0.5 * h * lb1, m2 + 0.5 * h * lb2, m3 + 0.5 * h * lb3
    )
    kc1, kc2, kc3 = dexpinv(u1, u2, u3, w1, w2, w3)
    lc1, lc2, lc3 = f1, f2, f3
    # stage 4: u = h K3
    u1, u2, u3 = h * kc1, h * kc2, h * kc3
    s0, s1, s2, s3 = turned(q0, q1, q2, q3, u1, u2, u3)
    w1, w2, w3, f1, f2, f3 = rates(p, s0, s1, s2, s3, m1 + h * lc1, m2 + h * lc2, m3 + h * lc3)
    kd1, kd2, kd3 = dexpinv(u1, u2, u3, w1, w2, w3)
    g = h / 6.0
    a0, a1, a2, a3 = turned(
        q0,
        q1,
        q2,
        q3,
        g * (ka1 + 2.0 * kb1 + 2.0 * kc1 + kd1),
        g * (ka2 + 2.0 * kb2 + 2.0 * kc2 + kd2),
        g * (ka3 + 2.0 * kb3 + 2.0 * kc3 + kd3),
    )
    n1 = m1 + g * (la1 + 2.0 * lb1 + 2.0 * lc1 + f1)
    n2 = m2 + g * (la2 + 2.0 * lb2 + 2.0 * lc2 + f2)
    n3 = m3 + g * (la3 + 2.0 * lb3 + 2.0 * lc3 + f3)
    return a0, a1, a2, a3, n1, n2, n3


@njit(cache=True, inline="always")
def step_cg3(p, h, q0, q1, q2, q3, m1, m2, m3):
    wa1, wa2, wa3, la1, la2, la3 = rates(p, q0, q1, q2, q3, m1, m2, m3)
    c = CG_A21 * h
    s0, s1, s2, s3 = turned(q0, q1, q2, q3, c * wa1, c * wa2, c * wa3)
    wb1, wb2, wb3, lb1, lb2, lb3 = rates(
        p, s0, s1, s2, s3, m1 + c * la1, m2 + c * la2, m3 + c * la3
    )
    c, d = CG_A31 * h, CG_A32 * h
    s0, s1, s2, s3 = turned(q0, q1, q2, q3, c * wa1, c * wa2, c * wa3)
    s0, s1, s2, s3 = turned(s0, s1, s2, s3, d * wb1, d * wb2, d * wb3)
    wc1, wc2, wc3, lc1, lc2, lc3 = rates(
        p,
        s0,
        s1,
        s2,
        s3,
        m1 + c * la1 + d * lb1,
        m2 + c * la2 + d * lb2,
        m3 + c * la3 + d * lb3,
    )
    b1, b2, b3 = CG_B1 * h, CG_B2 * h, CG_B3 * h
    a0, a1, a2, a3 = turned(q0, q1, q2, q3, b1 * wa1, b1 * wa2, b1 * wa3)
    a0, a1, a2, a3 = turned(a0, a1, a2, a3, b2 * wb1, b2 * wb2, b2 * wb3)
    a0, a1, a2, a3 = turned(a0, a1, a2, a3, b3 * wc1, b3 * wc2, b3 * wc3)
    n1 = m1 + b1 * la1 + b2 * lb1 + b3 * lc1
    n2 = m2 + b1 * la2 + b2 * lb2 + b3 * lc2
    n3 = m3 + b1 * la3 + b2 * lb3 + b3 * lc3
    return a0, a1, a2, a3, n1, n2, n3


@njit(cache=True, inline="always")
def step_cf4(p, h, q0, q1, q2, q3, m1, m2, m3):
    # Stages 2 and 3 turn q0 by h F1 / 2 and h F2 / 2; stage 4 turns the second stage's
    # attitude q0 turn(h F1 / 2) further by h (F3 - F1 / 2); the update is q0 turned by
    # h (3 F1 + 2 F2 + 2 F3 - F4) / 12, then by h (-F1 + 2 F2 + 2 F3 + 3 F4) / 12.
    wa1, wa2, wa3, la1, la2, la3 = rates(p, q0, q1, q2, q3, m1, m2, m3)
    c = 0.5 * h
    r0, r1, r2, r3 = turned(q0, q1, q2, q3, c * wa1, c * wa2, c * wa3)
    wb1, wb2, wb3, lb1, lb2, lb3 = rates(
        p, r0, r1, r2, r3, m1 + c * la1, m2 + c * la2, m3 + c * la3
    )
    s0, s1, s2, s3 = turned(q0, q1, q2, q3, c * wb1, c * wb2, c * wb3)
    wc1, wc2, wc3, lc1, lc2, lc3 = rates(
        p, s0, s1, s2, s3, m1 + c * lb1, m2 + c * lb2, m3 + c * lb3
    )
    s0, s1, s2, s3 = turned(
        r0, r1, r2, r3, h * (wc1 - 0.5 * wa1), h * (wc2 - 0.5 * wa2), h * (wc3 - 0.5 * wa3)
    )
    wd1, wd2, wd3, ld1, ld2, ld3 = rates(
        p, s0, s1, s2, s3, m1 + h * lc1, m2 + h * lc2, m3 + h * lc3
    )
    g = h / 12.0
    a0, a1, a2, a3 = turned(
        q0,
        q1,
        q2,
        q3,
        g * (3.0 * wa1 + 2.0 * wb1 + 2.0 * wc1 - wd1),
        g * (3.0 * wa2 + 2.0 * wb2 + 2.0 * wc2 - wd2),
        g * (3.0 * wa3 + 2.0 * wb3 + 2.0 * wc3 - wd3),
    )
    a0, a1, a2, a3 = turned(
        a0,
        a1,
        a2,
        a3,
        g * (-wa1 + 2.0 * wb1 + 2.0 * wc1 + 3.0 * wd1),
        g * (-wa2 + 2.0 * wb2 + 2.0 * wc2 + 3.0 * wd2),
        g * (-wa3 + 2.0 * wb3 + 2.0 * wc3 + 3.0 * wd3),
    )
    g = h / 6.0
    n1 = m1 + g * (la1 + 2.0 * lb1 + 2.0 * lc1 + ld1)
    n2 = m2 + g * (la2 + 2.0 * lb2 + 2.0 * lc2 + ld2)
    n3 = m3 + g * (la3 + 2.0 * lb3 + 2.0 * lc3 + ld3)
    return a0, a1, a2, a3, n1, n2, n3


@njit(cache=True)
def liegroup_steps(scheme, y, p, h, nsteps, counters):
    """Take up to nsteps steps of h in place on the body state y. Returns (status, steps
    taken); a step that comes out non-finite is not committed (ST_DIVERGED)."""
    stages = 4 if scheme != SCHEME_CG3 else 3
    done = 0
    for _ in range(nsteps):
        q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
        m1, m2, m3 = y[4], y[5], y[6]
        if scheme == SCHEME_RKMK4:
            a0, a1, a2, a3, n1, n2, n3 = step_rkmk4(p, h, q0, q1, q2, q3, m1, m2, m3)
        elif scheme == SCHEME_CG3:
            a0, a1, a2, a3, n1, n2, n3 = step_cg3(p, h, q0, q1, q2, q3, m1, m2, m3)
        else:
            a0, a1, a2, a3, n1, n2, n3 = step_cf4(p, h, q0, q1, q2, q3, m1, m2, m3)
        counters[C_EVALS] += stages
        counters[C_FORCE_EVALS] += stages
        total = a0 + a1 + a2 + a3 + n1 + n2 + n3
        if not math.isfinite(total):
            return ST_DIVERGED, done
        y[0], y[1], y[2], y[3] = a0, a1, a2, a3
        y[4], y[5], y[6] = n1, n2, n3
        counters[C_STEPS] += 1
        done += 1
    return ST_OK, done


# The form these methods run in (kept here so that the methods module need not know it).
FORM = FORM_BODY
