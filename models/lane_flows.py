"""The splitting sub-flows of flows.py for one member held in scalars, with the vectorisable
sine and cosine (lane_trig.py): what an ensemble kernel applies to every SIMD lane at once.

Each function takes the state's numbers and the body's (1/I1, 1/I3, M g chi: never the parameter
array, whose reference counting inside an inlined call would keep the loop from vectorising) and
returns the new numbers, so that a loop over members keeps them in vector registers; the
arithmetic is that of the in-place flows in flows.py, operation for operation, except that sin
and cos come from lane_trig instead of libm (at most about an ulp apart) and the branches are
selects. tests/test_lane_flows.py pins every twin to
its original: within a few ulps after one application.

Covered: the Euler form (drift_euler, kick_euler) and the body form of a symmetric body
(free_symmetric, kick_body). An asymmetric body's free flow composes a turn about axis 2 and is
left to the scalar ensemble kernels.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .double_double import two_prod
from .lane_trig import sincos
from .quaternion import qmul, rotate, vertical_in_body
from .turns import HALF_TURN, TURN


@njit(cache=True, inline="always", error_model="numpy")
def drift_euler_lane(h, theta, psi, p_theta, p_psi, inv1, inv3):
    """flows.drift_euler: (theta, psi) after the drift."""
    return theta + h * p_theta * inv1, psi + h * p_psi * inv3


@njit(cache=True, inline="always", error_model="numpy")
def kick_euler_lane(h, phi, theta, psi, p_phi, p_theta, p_psi, inv1, mgz):
    """flows.kick_euler: (phi, psi, p_theta) after the kick (theta, p_phi, p_psi unchanged)."""
    s, c = sincos(theta)
    a = p_phi - p_psi * c
    r = a * inv1 / (s * s)
    phi = phi + h * r
    psi = psi - h * c * r
    p_theta = p_theta + h * (r * (a * c / s - p_psi * s) + mgz * s)
    return phi, psi, p_theta


@njit(cache=True, inline="always", error_model="numpy")
def kick_body_lane(h, q0, q1, q2, q3, m1, m2, m3, cx, cy, cz):
    """flows.kick_body: (m1, m2, m3) after the kick. m3 gains h (g1 cy - g2 cx), which is an
    exact zero when the centre of mass is on axis 3: the same bits as the scalar flow's branch."""
    g1, g2, g3 = vertical_in_body(q0, q1, q2, q3)
    m1 = m1 + h * (g2 * cz - g3 * cy)
    m2 = m2 + h * (g3 * cx - g1 * cz)
    if cx != 0.0 or cy != 0.0:  # the same for every lane: hoisted out of the loop by LLVM
        m3 = m3 + h * (g1 * cy - g2 * cx)
    return m1, m2, m3


@njit(cache=True, inline="always", error_model="numpy")
def free_symmetric_lane(h, q0, q1, q2, q3, m1, m2, m3, inv1, inv3):
    """flows.free_symmetric (see there for why each rounding is arranged as it is):
    (q0, q1, q2, q3, m1, m2) after the exact free flow of a body with I1 = I2."""
    lx, ly, lz = rotate(q0, q1, q2, q3, m1, m2, m3)
    lnorm = math.sqrt(lx * lx + ly * ly + lz * lz)
    quarter = 0.25 * h * lnorm * inv1
    t, ct = sincos(quarter)
    # lnorm = 0 (no momentum): no turn, as the scalar flow's branch; the selects keep it a lane
    sh = 2.0 * t * ct / (lnorm if lnorm > 0.0 else 1.0)
    d0, d1, d2, d3 = qmul(-2.0 * t * t, sh * lx, sh * ly, sh * lz, q0, q1, q2, q3)
    turn = lnorm > 0.0
    q0 = q0 + d0 if turn else q0
    q1 = q1 + d1 if turn else q1
    q2 = q2 + d2 if turn else q2
    q3 = q3 + d3 if turn else q3
    qb = 0.25 * h * (inv3 - inv1) * m3
    t3, c3 = sincos(qb)
    e0 = -2.0 * t3 * t3
    sh3 = 2.0 * t3 * c3
    ch = 1.0 + e0
    d0, d1, d2, d3 = qmul(q0, q1, q2, q3, e0, 0.0, 0.0, sh3)
    q0 = q0 + d0
    q1 = q1 + d1
    q2 = q2 + d2
    q3 = q3 + d3
    g = 0.5 * (1.0 - (q0 * q0 + q1 * q1 + q2 * q2 + q3 * q3))
    cb1 = -2.0 * sh3 * sh3
    sb = 2.0 * sh3 * ch
    return (
        q0 + q0 * g,
        q1 + q1 * g,
        q2 + q2 * g,
        q3 + q3 * g,
        m1 + (m1 * cb1 + m2 * sb),
        m2 + (m2 * cb1 - m1 * sb),
    )


@njit(cache=True, inline="always", error_model="numpy")
def fold_lane(a):
    """turns.fold_one for one angle in a lane: (folded angle, whole turns T taken off, as a
    double). The same operations with selects for its branch, so the same bits: for an angle
    already in (-fl(pi), fl(pi)], k = 0 and the angle comes back as it was."""
    # np.floor, not math.floor: numba's math.floor returns an integer, and the conversion to
    # int64 and back has no vector instruction before AVX-512, so the loop over lanes stayed
    # scalar on AVX2 machines (measured on a family 25 model 1 EPYC: 19 ns per member per step
    # for the fold against 1.5 for the rest of the check). Same value: floor is exact.
    k = np.floor(a / TURN + 0.5)
    ph, pl = two_prod(k, TURN)
    r = (a - ph) - pl
    up = r > HALF_TURN
    down = r <= -HALF_TURN
    r = r - TURN if up else (r + TURN if down else r)
    k = k + 1.0 if up else (k - 1.0 if down else k)
    inside = a <= HALF_TURN and a > -HALF_TURN
    return (a if inside else r), (0.0 if inside else k)
