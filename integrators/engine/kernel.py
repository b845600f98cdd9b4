"""The one kernel behind the first-order engine schemes, body form only: fixed steps of explicit
Euler with the quaternion renormalised, semi-implicit Euler (momentum kicked by the torque in
space, attitude turned by the exact exponential of the new angular velocity), and semi-implicit
Euler with the gyroscopic term implicit (one Newton iteration on the body-frame rate).

All three are common practice in real-time engines (no single source); the equations are the
Euler-Poisson equations of models/dynamics.py. What each step does, with w = I^-1 m, tau(q) =
M g Gamma(q) x chi the torque in body axes and exp(v) the unit quaternion of a turn by |v| about v:

  SCHEME_EXPLICIT      y <- y + h f(y), then q <- q / |q|.
  SCHEME_SEMI_IMPLICIT m* = m + h tau(q); w* = I^-1 m*; e = exp(h w*); q <- q e and
                       m <- conj(e) m* e (the angular momentum held fixed in space while the body
                       turns, which is how the gyroscopic term enters).
  SCHEME_IMPLICIT_GYRO solve I (w' - w) + h w' x I w' - h tau(q) = 0 for w' by one Newton
                       iteration from w' = w; m <- I w', q <- q exp(h w').

Everything is scalar inside the step; nothing is allocated.
"""

from __future__ import annotations

import math

from numba import njit

from topdrift.integrators.base import C_EVALS, C_FORCE_EVALS, C_STEPS, ST_DIVERGED, ST_OK
from topdrift.models.body import (
    P_FIELD,
    P_H1,
    P_H2,
    P_H3,
    P_HW1,
    P_HW2,
    P_HW3,
    P_I1,
    P_I2,
    P_I3,
    P_INV1,
    P_INV2,
    P_INV3,
    P_MGX,
    P_MGY,
    P_MGZ,
    P_ORBIT_N,
)
from topdrift.models.field_spec import FIELD_UNIFORM
from topdrift.models.fields import field_torque, frame_rate
from topdrift.models.forms import FORM_BODY
from topdrift.models.quaternion import qmul, rotate_inverse, vertical_in_body

SCHEME_EXPLICIT = 0
SCHEME_SEMI_IMPLICIT = 1
SCHEME_IMPLICIT_GYRO = 2

# Below this half-angle the sine of the exponential map is its series to the cubic term, which
# is exact to rounding there (the next term is half^4 / 120 < 1e-18 relative) and avoids 0 / 0.
SMALL_HALF_ANGLE = 1e-4


@njit(cache=True, inline="always")
def _exp_turn(h, w1, w2, w3):
    """exp(h w / 2) as a unit quaternion: the turn by h |w| about w."""
    n = math.sqrt(w1 * w1 + w2 * w2 + w3 * w3)
    half = 0.5 * h * n
    if half < SMALL_HALF_ANGLE:
        s = 0.5 * h * (1.0 - half * half / 6.0)
    else:
        s = math.sin(half) / n
    return math.cos(half), s * w1, s * w2, s * w3


@njit(cache=True, inline="always")
def _torque(p, q0, q1, q2, q3, m1, m2, m3):
    if p[P_FIELD] != FIELD_UNIFORM:
        return field_torque(p, q0, q1, q2, q3, m1, m2, m3)
    g1, g2, g3 = vertical_in_body(q0, q1, q2, q3)
    cx, cy, cz = p[P_MGX], p[P_MGY], p[P_MGZ]
    return g2 * cz - g3 * cy, g3 * cx - g1 * cz, g1 * cy - g2 * cx


@njit(cache=True)
def engine_steps(scheme, y, p, h, nsteps, counters):
    """Take up to nsteps steps of h in place on the body state y. Returns (status, steps
    taken); a step that comes out non-finite is not committed (ST_DIVERGED)."""
    inv1, inv2, inv3 = p[P_INV1], p[P_INV2], p[P_INV3]
    i1, i2, i3 = p[P_I1], p[P_I2], p[P_I3]
    # A gyrostat: w = I^-1 m - I^-1 h and m = I v + h (all offsets 0.0 for a rigid body, where
    # x - 0.0 is x; the momentum offset is added only when non-zero, since -0.0 + 0.0 is +0.0).
    hw1, hw2, hw3 = p[P_HW1], p[P_HW2], p[P_HW3]
    hr1, hr2, hr3 = p[P_H1], p[P_H2], p[P_H3]
    rotor = hr1 != 0.0 or hr2 != 0.0 or hr3 != 0.0
    # A field with a turning frame (the gravity gradient): the explicit scheme turns q at the
    # rate relative to the frame; the two semi-implicit ones turn the body at its inertial rate,
    # as in uniform gravity, and then the frame turn of models/fields.py, exactly (first order
    # either way).
    turning = p[P_FIELD] != FIELD_UNIFORM
    fc = math.cos(0.5 * h * p[P_ORBIT_N])
    fs = math.sin(0.5 * h * p[P_ORBIT_N])
    done = 0
    for _ in range(nsteps):
        q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
        m1, m2, m3 = y[4], y[5], y[6]
        t1, t2, t3 = _torque(p, q0, q1, q2, q3, m1, m2, m3)
        if scheme == SCHEME_EXPLICIT:
            w1, w2, w3 = m1 * inv1 - hw1, m2 * inv2 - hw2, m3 * inv3 - hw3
            n1 = m1 + h * (m2 * w3 - m3 * w2 + t1)
            n2 = m2 + h * (m3 * w1 - m1 * w3 + t2)
            n3 = m3 + h * (m1 * w2 - m2 * w1 + t3)
            if turning:
                f1, f2, f3 = frame_rate(p, q0, q1, q2, q3)
                w1, w2, w3 = w1 + f1, w2 + f2, w3 + f3
            a0 = q0 + h * 0.5 * (-q1 * w1 - q2 * w2 - q3 * w3)
            a1 = q1 + h * 0.5 * (q0 * w1 + q2 * w3 - q3 * w2)
            a2 = q2 + h * 0.5 * (q0 * w2 - q1 * w3 + q3 * w1)
            a3 = q3 + h * 0.5 * (q0 * w3 + q1 * w2 - q2 * w1)
            r = 1.0 / math.sqrt(a0 * a0 + a1 * a1 + a2 * a2 + a3 * a3)
            a0, a1, a2, a3 = a0 * r, a1 * r, a2 * r, a3 * r
        elif scheme == SCHEME_SEMI_IMPLICIT:
            k1, k2, k3 = m1 + h * t1, m2 + h * t2, m3 + h * t3
            e0, e1, e2, e3 = _exp_turn(h, k1 * inv1 - hw1, k2 * inv2 - hw2, k3 * inv3 - hw3)
            a0, a1, a2, a3 = qmul(q0, q1, q2, q3, e0, e1, e2, e3)
            n1, n2, n3 = rotate_inverse(e0, e1, e2, e3, k1, k2, k3)
        else:
            # Newton on g(v) = I (v - w) + h v x I v - h tau at v = w: g(w) = h (w x I w - tau),
            # g'(w) = I + h (skew(w) I - skew(I w)); solve g'(w) dv = -g(w) by Cramer's rule.
            # A gyrostat: g(v) = I (v - w) + h v x (I v + h_r) - h tau, the same with m = I w +
            # h_r the total momentum in g(w) and in skew(m), and the new m = I v + h_r.
            w1, w2, w3 = m1 * inv1 - hw1, m2 * inv2 - hw2, m3 * inv3 - hw3
            r1 = -h * (w2 * m3 - w3 * m2 - t1)
            r2 = -h * (w3 * m1 - w1 * m3 - t2)
            r3 = -h * (w1 * m2 - w2 * m1 - t3)
            # rows of g'(w): column j of skew(w) I is w x (I_j e_j); skew(I w) v = m x v
            j11 = i1
            j12 = h * (-w3 * i2 + m3)
            j13 = h * (w2 * i3 - m2)
            j21 = h * (w3 * i1 - m3)
            j22 = i2
            j23 = h * (-w1 * i3 + m1)
            j31 = h * (-w2 * i1 + m2)
            j32 = h * (w1 * i2 - m1)
            j33 = i3
            c11 = j22 * j33 - j23 * j32
            c12 = j23 * j31 - j21 * j33
            c13 = j21 * j32 - j22 * j31
            det = j11 * c11 + j12 * c12 + j13 * c13
            d1 = (r1 * c11 + r2 * (j13 * j32 - j12 * j33) + r3 * (j12 * j23 - j13 * j22)) / det
            d2 = (r1 * c12 + r2 * (j11 * j33 - j13 * j31) + r3 * (j13 * j21 - j11 * j23)) / det
            d3 = (r1 * c13 + r2 * (j12 * j31 - j11 * j32) + r3 * (j11 * j22 - j12 * j21)) / det
            v1, v2, v3 = w1 + d1, w2 + d2, w3 + d3
            n1, n2, n3 = i1 * v1, i2 * v2, i3 * v3
            if rotor:
                n1, n2, n3 = n1 + hr1, n2 + hr2, n3 + hr3
            e0, e1, e2, e3 = _exp_turn(h, v1, v2, v3)
            a0, a1, a2, a3 = qmul(q0, q1, q2, q3, e0, e1, e2, e3)
        if turning and scheme != SCHEME_EXPLICIT:
            a0, a1, a2, a3 = qmul(fc, 0.0, fs, 0.0, a0, a1, a2, a3)
        counters[C_EVALS] += 1
        counters[C_FORCE_EVALS] += 1  # one torque per step, in every scheme
        total = a0 + a1 + a2 + a3 + n1 + n2 + n3
        if not math.isfinite(total):
            return ST_DIVERGED, done
        y[0], y[1], y[2], y[3] = a0, a1, a2, a3
        y[4], y[5], y[6] = n1, n2, n3
        counters[C_STEPS] += 1
        done += 1
    return ST_OK, done


# The form these schemes run in (kept here so that the methods module need not know it).
FORM = FORM_BODY
