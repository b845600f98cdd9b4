"""Exact sub-flows for the splitting methods, in place on the state.

Both forms split the same way: a "drift" part A and a "kick" part B whose flows are exact and
explicit. `flow_a(form, h, y, p)` and `flow_b(form, h, y, p)` are the entry points integrator
kernels call by name.

euler: A = p_theta^2/(2 I1) + (p_psi - h3)^2/(2 I3)    (theta, psi move linearly)
       B = (p_phi - p_psi cos theta)^2/(2 I1 sin^2 theta) + M g l cos theta
                                                       (theta fixed: kick p_theta, move phi, psi)
body:  A = kinetic energy, the exact free flow          (I1 = I2: a closed form in two turns;
           I1 != I2: Jacobi elliptic functions, free_asymmetric.py)
       B = potential, M g chi.Gamma                    (q fixed: kick m)

A gyrostat (rotor momentum h, m = I w + h) has the free part (m - h).I^-1 (m - h) / 2: the rigid
free flow and the flow of -(I^-1 h).m, a turn of the body about the fixed body direction I^-1 h.
On the figure axis of a symmetric body the two commute and free_symmetric takes the turn into its
rotation about e3 (rate (1/I3 - 1/I1) m3 - h3/I3), still one exact flow; any other rotor is
refused by the splittings with these free flows (the two flows do not commute there); the
free rotation split into exact turns about the principal axes (FREE_AXES) takes any rotor, since
each turn's T_k = (m_k - h_k)^2 / (2 I_k) depends on m_k alone.

In a field other than uniform gravity (models/fields.py) A is T + n e_y.(R m), the free flow
followed by the frame turn (the two commute), and B the field's potential, the gravity-gradient
kick; the Euler form is refused there (phi is not cyclic). A plug-in field (fields.py) takes the
same branches: its frame does not turn (the frame turn by n = 0 is the identity) and B is its
kick. Uniform gravity takes the branches it always took, so a heavy top's bits are unchanged.

The body form has a second, cheaper free flow for I1 != I2: the symmetric part and one rotation
about body axis 2, composed symmetrically (second order in the step, exact for I1 = I2). A
kernel picks it with the free-flow code FREE_COMPOSED (flow_a_with, increment_a_with); flow_a and
increment_a are the exact flow.
"""

from __future__ import annotations

import math

from numba import njit

from .body import (
    P_FIELD,
    P_H3,
    P_HW1,
    P_HW3,
    P_I1,
    P_I2,
    P_INV1,
    P_INV2,
    P_INV3,
    P_MGX,
    P_MGY,
    P_MGZ,
)
from .field_spec import FIELD_UNIFORM
from .fields import field_kick, field_kick_increment, frame_turn, frame_turn_increment
from .forms import FORM_EULER
from .free_asymmetric import free_asymmetric, free_asymmetric_increment
from .quaternion import qmul, rotate, vertical_in_body

# Which free flow the body form uses for I1 != I2 (an int64 kernel argument).
FREE_EXACT = 0
FREE_COMPOSED = 1
# What both are for I1 = I2: a kernel that knows the body is symmetric passes this constant so
# that the dispatch folds away and the closed-form flow is compiled in place (flow_a_fixed).
FREE_SYMMETRIC = 2
# The free rotation split into exact rotations about the principal axes (free_body_axes): a
# different method on every body, symmetric ones included, so it never becomes FREE_SYMMETRIC.
FREE_AXES = 3


@njit(cache=True, error_model="numpy")
def drift_euler(h, y, p):
    y[1] += h * y[4] * p[P_INV1]
    y[2] += h * (y[5] - p[P_H3]) * p[P_INV3]  # y[5] - 0.0 is y[5]: a rigid top's bits stay


@njit(cache=True, error_model="numpy")
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


# The Euler-form kick split in two: its rates, then their application. The kick holds theta
# fixed, so its rates depend on theta (and the invariants p_phi, p_psi) alone and stay constant
# over the kick: a kernel that kicks twice at one theta (the variable-step splittings close a
# step and open the next with steps of different length) evaluates the torque once. kick_euler
# is kick_euler_apply(h, y, kick_euler_rates(y)) to round-off (tests/test_sundman.py).
KR_PHI = 0  # phi' under H_b: A / (I1 s^2), A = p_phi - p_psi cos(theta)
KR_PSI = 1  # psi' under H_b: -cos(theta) A / (I1 s^2)
KR_PTHETA = 2  # p_theta' = -dH/dtheta: the torque
KR_SIN = 3  # sin(theta), cos(theta): for a caller that needs them at the same point
KR_COS = 4
N_KICK_RATES = 5


@njit(cache=True, error_model="numpy", inline="always")
def kick_euler_rates(y, p, out):
    """The Euler-form kick's rates at y's theta, into out[KR_*] (length N_KICK_RATES)."""
    theta = y[1]
    p_psi = y[5]
    s = math.sin(theta)
    c = math.cos(theta)
    a = y[3] - p_psi * c
    r = a * p[P_INV1] / (s * s)
    out[KR_PHI] = r
    out[KR_PSI] = -(c * r)
    out[KR_PTHETA] = r * (a * c / s - p_psi * s) + p[P_MGZ] * s
    out[KR_SIN] = s
    out[KR_COS] = c


@njit(cache=True, error_model="numpy", inline="always")
def kick_euler_apply(h, y, rates):
    """The Euler-form kick of time h with rates from kick_euler_rates at the same theta."""
    y[0] += h * rates[KR_PHI]
    y[2] += h * rates[KR_PSI]
    y[4] += h * rates[KR_PTHETA]


@njit(cache=True, error_model="numpy")
def kick_body(h, y, p):
    """Potential flow: q fixed, m += h M g (Gamma x chi); m3 untouched when chi is on axis 3."""
    g1, g2, g3 = vertical_in_body(y[0], y[1], y[2], y[3])
    cx, cy, cz = p[P_MGX], p[P_MGY], p[P_MGZ]
    y[4] += h * (g2 * cz - g3 * cy)
    y[5] += h * (g3 * cx - g1 * cz)
    if cx != 0.0 or cy != 0.0:
        y[6] += h * (g1 * cy - g2 * cx)


@njit(cache=True, error_model="numpy")
def free_symmetric(h, y, p):
    """Exact free flow of a body with I1 = I2 = p[P_I1].

    R(h) = Rot(L/|L|, |L| h / I1) R(0) Rot(e3, c3 h), m(h) = Rot(e3, -c3 h) m(0),
    c3 = (1/I3 - 1/I1) m3. m is turned about e3 directly, so m3 is never touched. A rotor on
    axis 3 adds its own turn about e3, c3 = (1/I3 - 1/I1) m3 - h3/I3 (it commutes with the rest).

    Round-off without a bias. The two quaternion factors are nearly the same every step (m3 is
    constant, |L| nearly so), so whatever a factor rounds the same way every step adds up
    linearly instead of like a random walk. Measured on a symmetric top, 16 starts, 10^6 steps
    of 1e-3: L.e_z drifted 2.9e-12 (RMS 1.5e-12 for the free flow alone), from three such
    roundings, each removed here:
    - q (qL) is formed as q + q (qL - 1), qL - 1 = (cos - 1, sin L/|L|): the small increment
      carries the factor's rounding at its own size, and q is rounded once, by an addition
      whose error changes from step to step; the same for qe3;
    - the renormalisation factor 1 + (1 - |q|^2)/2 is applied as q + q g: the factor itself,
      formed as 0.5 (3 - |q|^2), is a double next to 1 and can only be 1, 1 - 2^-53 or 1 + 2^-52,
      a quantised, biased correction;
    - m turns as m + (m (cos - 1) + m' sin) with cos - 1 = -2 sin^2: the rounded 1 - 2 sin^2
      (constant for a run) scaled the transverse momentum by the same 1 + O(1e-16) every step.
    What is left: RMS 1.2e-13 for the free flow alone and 1.9e-13 with gravity after 10^6
    steps (the members still share a sign: some bias remains, 1e-19 per step).
    """
    q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
    m1, m2, m3 = y[4], y[5], y[6]
    lx, ly, lz = rotate(q0, q1, q2, q3, m1, m2, m3)
    lnorm = math.sqrt(lx * lx + ly * ly + lz * lz)
    # Each factor from the sine and cosine of half its half-angle: sin = 2 t u and
    # cos - 1 = -2 t^2 without a cancellation, and no division.
    if lnorm > 0.0:
        quarter = 0.25 * h * lnorm * p[P_INV1]
        t = math.sin(quarter)
        sh = 2.0 * t * math.cos(quarter) / lnorm
        d0, d1, d2, d3 = qmul(-2.0 * t * t, sh * lx, sh * ly, sh * lz, q0, q1, q2, q3)
        q0 = q0 + d0
        q1 = q1 + d1
        q2 = q2 + d2
        q3 = q3 + d3
    # minus 0.25 h h3/I3, which is exactly 0.0 for a rigid body (x - 0.0 is x: bits unchanged)
    qb = 0.25 * h * (p[P_INV3] - p[P_INV1]) * m3 - 0.25 * h * p[P_HW3]
    t3 = math.sin(qb)
    e0 = -2.0 * t3 * t3
    sh3 = 2.0 * t3 * math.cos(qb)
    ch = 1.0 + e0
    d0, d1, d2, d3 = qmul(q0, q1, q2, q3, e0, 0.0, 0.0, sh3)
    q0 = q0 + d0
    q1 = q1 + d1
    q2 = q2 + d2
    q3 = q3 + d3
    # One Newton step towards |q| = 1: division-free and enough, since the error is round-off.
    g = 0.5 * (1.0 - (q0 * q0 + q1 * q1 + q2 * q2 + q3 * q3))
    y[0] = q0 + q0 * g
    y[1] = q1 + q1 * g
    y[2] = q2 + q2 * g
    y[3] = q3 + q3 * g
    # m turns by the angle the quaternion factor (ch, 0, 0, sh3) turns the body frame, built
    # from the same numbers (double-angle formulas): no transcendental calls of its own, and
    # the same rotation to round-off.
    cb1 = -2.0 * sh3 * sh3
    sb = 2.0 * sh3 * ch
    y[4] = m1 + (m1 * cb1 + m2 * sb)
    y[5] = m2 + (m2 * cb1 - m1 * sb)


@njit(cache=True, error_model="numpy")
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


@njit(cache=True, error_model="numpy")
def free_body_composed(h, y, p):
    """Free flow of any body: exact when I1 = I2, else a symmetric second-order composition."""
    if p[P_I1] == p[P_I2]:
        free_symmetric(h, y, p)
    else:
        turn_axis2(0.5 * h, y, p)
        free_symmetric(h, y, p)
        turn_axis2(0.5 * h, y, p)


@njit(cache=True, error_model="numpy")
def turn_principal(k, h, y, p):
    """Exact flow of T_k = m_k^2 / (2 I_k) alone: m_k fixed, the body turns about its axis k by
    alpha = h m_k / I_k (q <- q (cos alpha/2, sin alpha/2 e_k)) and m turns by -alpha about e_k
    in the body frame (m' = m x w_k, w_k = (m_k / I_k) e_k). Written as q + q (factor - 1) and
    m + (m (cos - 1) + m' sin), cos - 1 = -2 sin^2 of the half angle, as free_symmetric does, so
    that the factor's rounding enters at the increment's size."""
    q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
    mk = y[4 + k]
    # A gyrostat's T_k = (m_k - h_k)^2 / (2 I_k) turns at (m_k - h_k) / I_k, still exactly:
    # every rotor is exact in this split (minus h * 0.0 for a rigid body: its bits stay).
    alpha = h * mk * p[P_INV1 + k] - h * p[P_HW1 + k]
    t = math.sin(0.25 * alpha)
    c = math.cos(0.25 * alpha)
    sh = 2.0 * t * c  # sin(alpha / 2)
    e0 = -2.0 * t * t  # cos(alpha / 2) - 1
    if k == 0:
        d0, d1, d2, d3 = qmul(q0, q1, q2, q3, e0, sh, 0.0, 0.0)
    elif k == 1:
        d0, d1, d2, d3 = qmul(q0, q1, q2, q3, e0, 0.0, sh, 0.0)
    else:
        d0, d1, d2, d3 = qmul(q0, q1, q2, q3, e0, 0.0, 0.0, sh)
    y[0] = q0 + d0
    y[1] = q1 + d1
    y[2] = q2 + d2
    y[3] = q3 + d3
    cb1 = -2.0 * sh * sh  # cos(alpha) - 1
    sb = 2.0 * sh * (1.0 + e0)  # sin(alpha)
    # the two components transverse to e_k, (a, b) cyclic after k: (a, b) <- R(-alpha) (a, b)
    ia = 4 + (k + 1) % 3
    ib = 4 + (k + 2) % 3
    a = y[ia]
    b = y[ib]
    y[ia] = a + (a * cb1 + b * sb)
    y[ib] = b + (b * cb1 - a * sb)


@njit(cache=True, error_model="numpy")
def free_body_axes(h, y, p):
    """The free rotation as the symmetric sequence of exact rotations about the principal axes,
    3 (h/2), 2 (h/2), 1 (h), 2 (h/2), 3 (h/2) (Miller, Eleftheriou, Pattnaik, Ndirango, Newns and
    Martyna, J. Chem. Phys. 116 (2002) 8649, there on the quaternion and its conjugate momentum
    p = 2 q (0, m), the same map; the sequence as we recall it from that paper). Second order,
    symmetric, a Poisson map; exact for no body with two or more non-zero components of m. One
    division-free Newton step back to |q| = 1 at the end, as the other free flows take."""
    turn_principal(2, 0.5 * h, y, p)
    turn_principal(1, 0.5 * h, y, p)
    turn_principal(0, h, y, p)
    turn_principal(1, 0.5 * h, y, p)
    turn_principal(2, 0.5 * h, y, p)
    q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
    g = 0.5 * (1.0 - (q0 * q0 + q1 * q1 + q2 * q2 + q3 * q3))
    y[0] = q0 + q0 * g
    y[1] = q1 + q1 * g
    y[2] = q2 + q2 * g
    y[3] = q3 + q3 * g


@njit(cache=True, error_model="numpy")
def free_body(h, y, p):
    """The exact free flow of any body: the closed form for I1 = I2, else the elliptic one."""
    if p[P_I1] == p[P_I2]:
        free_symmetric(h, y, p)
    else:
        free_asymmetric(h, y, p)


@njit(cache=True, error_model="numpy")
def flow_a(form, h, y, p):
    if form == FORM_EULER:
        drift_euler(h, y, p)
    else:
        free_body(h, y, p)
        if p[P_FIELD] != FIELD_UNIFORM:
            frame_turn(h, y, p)


@njit(cache=True, error_model="numpy")
def flow_a_with(form, free, h, y, p):
    """flow_a with the body form's free flow chosen by `free` (FREE_EXACT, FREE_COMPOSED,
    FREE_AXES). For I1 = I2 the first two are free_symmetric, called from here directly: one call
    level less on the hot path of the symmetric tops (free_body and free_body_composed decide the
    same way); FREE_AXES is its own map on every body."""
    if form == FORM_EULER:
        drift_euler(h, y, p)
        return
    elif free == FREE_AXES:
        free_body_axes(h, y, p)
    elif p[P_I1] == p[P_I2]:
        free_symmetric(h, y, p)
    elif free == FREE_COMPOSED:
        free_body_composed(h, y, p)
    else:
        free_asymmetric(h, y, p)
    if p[P_FIELD] != FIELD_UNIFORM:
        frame_turn(h, y, p)


@njit(cache=True, error_model="numpy")
def flow_a_fixed(form, free, h, y, p):
    """flow_a_with for a kernel that passes form and free as constants: the Euler drift and the
    symmetric free flow are then called directly (small, compiled into the step loop with no
    call and no reference counting of y and p), anything else through flow_a_with. Measured on
    the body-form leapfrog of a symmetric top: see benchmarks/timing/against_c.py."""
    if form == FORM_EULER:
        drift_euler(h, y, p)
    elif free == FREE_SYMMETRIC:
        # uniform gravity only (run_plain_body takes this loop for no other field): a branch to
        # the frame turn here cost the body-form leapfrog 1.08 -> 1.12-1.16 of C's time
        free_symmetric(h, y, p)
    else:
        flow_a_with(form, free, h, y, p)


@njit(cache=True, error_model="numpy")
def flow_b(form, h, y, p):
    if form == FORM_EULER:
        kick_euler(h, y, p)
    elif p[P_FIELD] == FIELD_UNIFORM:
        kick_body(h, y, p)
    else:
        field_kick(h, y, p)


# Increment forms of the sub-flows, for compensated summation: each writes d = flow(y) - y
# into d (same length as y) without forming flow(y) first, so that no increment is computed as
# the difference of two nearly equal numbers (cos(a) - 1 is written -2 sin^2(a/2)). The
# integrator adds d to y with compensation; y itself is not changed here.


@njit(cache=True, error_model="numpy")
def drift_euler_increment(h, y, p, d):
    d[0] = 0.0
    d[1] = h * y[4] * p[P_INV1]
    d[2] = h * (y[5] - p[P_H3]) * p[P_INV3]
    d[3] = 0.0
    d[4] = 0.0
    d[5] = 0.0


@njit(cache=True, error_model="numpy")
def kick_euler_increment(h, y, p, d):
    theta = y[1]
    p_psi = y[5]
    s = math.sin(theta)
    c = math.cos(theta)
    a = y[3] - p_psi * c
    r = a * p[P_INV1] / (s * s)
    d[0] = h * r
    d[1] = 0.0
    d[2] = -h * c * r
    d[3] = 0.0
    d[4] = h * (r * (a * c / s - p_psi * s) + p[P_MGZ] * s)
    d[5] = 0.0


@njit(cache=True, error_model="numpy")
def kick_body_increment(h, y, p, d):
    g1, g2, g3 = vertical_in_body(y[0], y[1], y[2], y[3])
    cx, cy, cz = p[P_MGX], p[P_MGY], p[P_MGZ]
    d[0] = 0.0
    d[1] = 0.0
    d[2] = 0.0
    d[3] = 0.0
    d[4] = h * (g2 * cz - g3 * cy)
    d[5] = h * (g3 * cx - g1 * cz)
    if cx != 0.0 or cy != 0.0:
        d[6] = h * (g1 * cy - g2 * cx)
    else:
        d[6] = 0.0


@njit(cache=True, error_model="numpy")
def _free_symmetric_increment(h, q0, q1, q2, q3, m1, m2, m3, p):
    """Increment of free_symmetric: q' - q = (qL - 1)(q qe3) + q (qe3 - 1), then the same
    one-step renormalisation, q'' - q = (q' - q) + q' (1 - |q'|^2) / 2."""
    lx, ly, lz = rotate(q0, q1, q2, q3, m1, m2, m3)
    lnorm = math.sqrt(lx * lx + ly * ly + lz * lz)
    # qe3 = (cos hb, 0, 0, sin hb); qe3 - 1 = (-2 sin^2(hb/2), 0, 0, sin hb)
    beta = h * (p[P_INV3] - p[P_INV1]) * m3 - h * p[P_HW3]  # a rotor on axis 3 (else - 0.0)
    hb = 0.5 * beta
    s_hb = math.sin(hb)
    s_qb = math.sin(0.5 * hb)
    e0 = -2.0 * s_qb * s_qb
    e3 = s_hb
    # q qe3 = q + q (qe3 - 1)
    r0, r1, r2, r3 = qmul(q0, q1, q2, q3, e0, 0.0, 0.0, e3)
    dq0, dq1, dq2, dq3 = r0, r1, r2, r3
    if lnorm > 0.0:
        half = 0.5 * h * lnorm * p[P_INV1]
        sh = math.sin(half) / lnorm
        s_q = math.sin(0.5 * half)
        a0 = -2.0 * s_q * s_q
        u0, u1, u2, u3 = qmul(a0, sh * lx, sh * ly, sh * lz, q0 + r0, q1 + r1, q2 + r2, q3 + r3)
        dq0 += u0
        dq1 += u1
        dq2 += u2
        dq3 += u3
    n0 = q0 + dq0
    n1 = q1 + dq1
    n2 = q2 + dq2
    n3 = q3 + dq3
    g = 0.5 * (1.0 - (n0 * n0 + n1 * n1 + n2 * n2 + n3 * n3))
    # m(h) = Rot(e3, -beta) m: cos(beta) - 1 = -2 sin^2(beta/2), sin(beta) = 2 sin(hb) cos(hb)
    cb1 = -2.0 * s_hb * s_hb
    sb = 2.0 * s_hb * (1.0 + e0)
    return (
        dq0 + n0 * g,
        dq1 + n1 * g,
        dq2 + n2 * g,
        dq3 + n3 * g,
        m1 * cb1 + m2 * sb,
        m2 * cb1 - m1 * sb,
    )


@njit(cache=True, error_model="numpy")
def _turn_axis2_increment(h, q0, q1, q2, q3, m1, m2, m3, p):
    """Increment of turn_axis2: q (qe2 - 1) with qe2 - 1 = (-2 sin^2(hb/2), 0, sin hb, 0)."""
    beta = h * (p[P_INV2] - p[P_INV1]) * m2
    hb = 0.5 * beta
    s_hb = math.sin(hb)
    s_qb = math.sin(0.5 * hb)
    e0 = -2.0 * s_qb * s_qb
    dq0, dq1, dq2, dq3 = qmul(q0, q1, q2, q3, e0, 0.0, s_hb, 0.0)
    cb1 = -2.0 * s_hb * s_hb
    sb = 2.0 * s_hb * (1.0 + e0)
    return dq0, dq1, dq2, dq3, m1 * cb1 - m3 * sb, m1 * sb + m3 * cb1


@njit(cache=True, error_model="numpy")
def free_body_increment(h, y, p, d):
    """Increment of free_body (exact), written into d; y is left as it is."""
    if p[P_I1] == p[P_I2]:
        free_body_composed_increment(h, y, p, d)
    else:
        free_asymmetric_increment(h, y, p, d)


@njit(cache=True, error_model="numpy")
def free_body_composed_increment(h, y, p, d):
    """Increment of free_body_composed, written into d; y is left as it is. For I1 != I2 the
    three pieces are evaluated in turn and their increments summed (never y_end - y)."""
    q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
    m1, m2, m3 = y[4], y[5], y[6]
    if p[P_I1] == p[P_I2]:
        d0, d1, d2, d3, dm1, dm2 = _free_symmetric_increment(h, q0, q1, q2, q3, m1, m2, m3, p)
        d[0] = d0
        d[1] = d1
        d[2] = d2
        d[3] = d3
        d[4] = dm1
        d[5] = dm2
        d[6] = 0.0
        return
    a0, a1, a2, a3, am1, am3 = _turn_axis2_increment(0.5 * h, q0, q1, q2, q3, m1, m2, m3, p)
    r0, r1, r2, r3 = q0 + a0, q1 + a1, q2 + a2, q3 + a3
    rm1, rm3 = m1 + am1, m3 + am3
    b0, b1, b2, b3, bm1, bm2 = _free_symmetric_increment(h, r0, r1, r2, r3, rm1, m2, rm3, p)
    r0, r1, r2, r3 = r0 + b0, r1 + b1, r2 + b2, r3 + b3
    rm1, rm2 = rm1 + bm1, m2 + bm2
    c0, c1, c2, c3, cm1, cm3 = _turn_axis2_increment(0.5 * h, r0, r1, r2, r3, rm1, rm2, rm3, p)
    d[0] = a0 + b0 + c0
    d[1] = a1 + b1 + c1
    d[2] = a2 + b2 + c2
    d[3] = a3 + b3 + c3
    d[4] = am1 + bm1 + cm1
    d[5] = bm2
    d[6] = am3 + cm3


@njit(cache=True, error_model="numpy")
def increment_a(form, h, y, p, d):
    """flow_a(form, h, y, p) - y, written into d, y unchanged (compensated summation)."""
    if form == FORM_EULER:
        drift_euler_increment(h, y, p, d)
    else:
        free_body_increment(h, y, p, d)
        if p[P_FIELD] != FIELD_UNIFORM:
            frame_turn_increment(h, y, p, d)


@njit(cache=True, error_model="numpy")
def increment_a_with(form, free, h, y, p, d):
    """increment_a with the body form's free flow chosen by `free` (as flow_a_with)."""
    if form == FORM_EULER:
        drift_euler_increment(h, y, p, d)
        return
    elif free == FREE_COMPOSED:
        free_body_composed_increment(h, y, p, d)
    else:
        free_body_increment(h, y, p, d)
    if p[P_FIELD] != FIELD_UNIFORM:
        frame_turn_increment(h, y, p, d)


@njit(cache=True, error_model="numpy")
def increment_b(form, h, y, p, d):
    """flow_b(form, h, y, p) - y, written into d, y unchanged (compensated summation)."""
    if form == FORM_EULER:
        kick_euler_increment(h, y, p, d)
    elif p[P_FIELD] == FIELD_UNIFORM:
        kick_body_increment(h, y, p, d)
    else:
        field_kick_increment(h, y, p, d)
