"""The Taylor-series kernel of `taylor-adaptive`, in plain double precision.

The body-form equations are polynomial of degree 2 in (q, m) (common practice; the same
equations as integrators/extended/taylor_dd.py, which carries them in double-double):

    q' = q (0, w) / 2,   m' = m x w + Gamma(q) x (M g chi),   w = I^-1 m,
    Gamma(q) = (2 (q1 q3 - q0 q2), 2 (q2 q3 + q0 q1), q0^2 - q1^2 - q2^2 + q3^2),

so the Taylor coefficients about the current state follow from Cauchy products of the
coefficients already known, (k + 1) y_(k+1) = [f(y)]_k (the recurrences of automatic
differentiation, common practice): order p costs O(p^2) products, no symbolic algebra.

Order and step (A. Jorba and M. Zou, Exp. Math. 14 (2005) 99-117, sec. 3.2, from memory): for a
local tolerance eps the order is p = ceil(-ln(eps) / 2) + 1 and the step
h = exp(-0.7 / (p - 1)) min((1 / |y_(p-1)|)^(1/(p-1)), (1 / |y_p|)^(1/p)), the norms of the last
two coefficients taken relative to the tolerance (here: the quaternion components against
atol + rtol, |q| being 1; the momentum against atol + rtol |m|). There is no rejected step:
the step is chosen from the series before it is taken.

Output times inside a step are evaluated from the step's polynomial (dense output at the full
order), so the step sequence never depends on the output times. Nothing is allocated: the
coefficient array (7 x (P_MAX + 1), flat) and the work arrays are the stepper's.
"""

from __future__ import annotations

import math

from numba import njit

from topdrift.integrators.base import C_EVALS, C_FORCE_EVALS, C_STEPS, ST_DIVERGED, ST_OK
from topdrift.integrators.eft import two_sum
from topdrift.models.body import (
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

P_MIN = 4  # below this the two-coefficient step rule has too little to go on
P_MAX = 32  # the order at eps = 1e-27; double precision ends well before (rtol >= eps)
N_COEF = 7 * (P_MAX + 1)  # coefficient k of component i at i * (P_MAX + 1) + k
STRIDE = P_MAX + 1
N_WORK = 6 * STRIDE  # w (3 rows) and Gamma (3 rows), coefficient k at row * STRIDE + k

# Slots of the controller array.
CT_T = 0  # the time of the series' centre (the end of the last step taken)
CT_H = 1  # the step the series at CT_T will take
CT_ORDER = 2  # the order of that series
CT_T_LO = 3  # the rounding error of CT_T: the time is the sum of the steps, kept compensated
N_CTRL = 4

# Slots of the tolerance array.
TL_RTOL = 0
TL_ATOL = 1
N_TOL = 2


@njit(cache=True, inline="always")
def _conv(c, a, b, k):
    """sum_(i=0..k) c[a, i] c[b, k - i], rows a and b of the flat coefficient array c."""
    s = 0.0
    ra = a * STRIDE
    rb = b * STRIDE + k
    for i in range(k + 1):
        s += c[ra + i] * c[rb - i]
    return s


@njit(cache=True, inline="always")
def _convw(c, a, w, b, k):
    """sum_(i=0..k) c[a, i] w[b, k - i]."""
    s = 0.0
    ra = a * STRIDE
    rb = b * STRIDE + k
    for i in range(k + 1):
        s += c[ra + i] * w[rb - i]
    return s


@njit(cache=True)
def series(params, c, w, order):
    """Fill coefficients 1..order of (q0..q3, m1..m3) in c from coefficient 0 (the state).
    w holds the coefficients of w = I^-1 m (rows 0-2) and Gamma (rows 3-5)."""
    inv0 = params[P_INV1]
    inv1 = params[P_INV2]
    inv2 = params[P_INV3]
    e0 = inv2 - inv1  # (m x w)_1 = (1/I3 - 1/I2) m2 m3, and cyclically
    e1 = inv0 - inv2
    e2 = inv1 - inv0
    cx = params[P_MGX]
    cy = params[P_MGY]
    cz = params[P_MGZ]
    # A gyrostat: w = I^-1 m - I^-1 h, a constant off the first coefficient, and m x w gains
    # the linear terms -m x (I^-1 h); a rigid body skips both (its bits stay).
    hw0 = params[P_HW1]
    hw1 = params[P_HW2]
    hw2 = params[P_HW3]
    rotor = hw0 != 0.0 or hw1 != 0.0 or hw2 != 0.0
    for k in range(order):
        w[k] = c[4 * STRIDE + k] * inv0
        w[STRIDE + k] = c[5 * STRIDE + k] * inv1
        w[2 * STRIDE + k] = c[6 * STRIDE + k] * inv2
        if rotor and k == 0:
            w[0] -= hw0
            w[STRIDE] -= hw1
            w[2 * STRIDE] -= hw2
        g0 = 2.0 * (_conv(c, 1, 3, k) - _conv(c, 0, 2, k))
        g1 = 2.0 * (_conv(c, 2, 3, k) + _conv(c, 0, 1, k))
        g2 = _conv(c, 0, 0, k) - _conv(c, 1, 1, k) - _conv(c, 2, 2, k) + _conv(c, 3, 3, k)
        w[3 * STRIDE + k] = g0
        w[4 * STRIDE + k] = g1
        w[5 * STRIDE + k] = g2
        # q' = q (0, w) / 2, the Hamilton product.
        d = 0.5 / (k + 1)
        a0 = -_convw(c, 1, w, 0, k) - _convw(c, 2, w, 1, k) - _convw(c, 3, w, 2, k)
        a1 = _convw(c, 0, w, 0, k) + _convw(c, 2, w, 2, k) - _convw(c, 3, w, 1, k)
        a2 = _convw(c, 0, w, 1, k) - _convw(c, 1, w, 2, k) + _convw(c, 3, w, 0, k)
        a3 = _convw(c, 0, w, 2, k) + _convw(c, 1, w, 1, k) - _convw(c, 2, w, 0, k)
        c[k + 1] = a0 * d
        c[STRIDE + k + 1] = a1 * d
        c[2 * STRIDE + k + 1] = a2 * d
        c[3 * STRIDE + k + 1] = a3 * d
        # m' = m x w + Gamma x c; (Gamma x c)_i = Gamma_j c_n - Gamma_n c_j.
        r = 1.0 / (k + 1)
        b0 = e0 * _conv(c, 5, 6, k) + (g1 * cz - g2 * cy)
        b1 = e1 * _conv(c, 6, 4, k) + (g2 * cx - g0 * cz)
        b2 = e2 * _conv(c, 4, 5, k) + (g0 * cy - g1 * cx)
        if rotor:
            m0k, m1k, m2k = c[4 * STRIDE + k], c[5 * STRIDE + k], c[6 * STRIDE + k]
            b0 += m2k * hw1 - m1k * hw2
            b1 += m0k * hw2 - m2k * hw0
            b2 += m1k * hw0 - m0k * hw1
        c[4 * STRIDE + k + 1] = b0 * r
        c[5 * STRIDE + k + 1] = b1 * r
        c[6 * STRIDE + k + 1] = b2 * r


@njit(cache=True)
def evaluate(c, order, dt, out):
    """The series at dt (Horner), into out (7 components)."""
    for i in range(7):
        row = i * STRIDE
        s = c[row + order]
        for k in range(order - 1, -1, -1):
            s = s * dt + c[row + k]
        out[i] = s


@njit(cache=True)
def _scaled(c, k, tq, tm):
    """The largest coefficient k relative to its tolerance."""
    a = 0.0
    for i in range(4):
        a = max(a, abs(c[i * STRIDE + k]) / tq)
    for i in range(4, 7):
        a = max(a, abs(c[i * STRIDE + k]) / tm)
    return a


@njit(cache=True)
def expand(params, tol, y, c, w, ctrl, counters):
    """The series about y (order and step by the Jorba-Zou rule) into c and ctrl. Returns
    ST_OK, or ST_DIVERGED when the state or the step is not finite."""
    rtol = tol[TL_RTOL]
    atol = tol[TL_ATOL]
    m = math.sqrt(y[4] * y[4] + y[5] * y[5] + y[6] * y[6])
    tq = atol + rtol
    tm = atol + rtol * m
    # The local tolerance relative to the state: the order follows it.
    eps = min(tq, tm / m) if m > 0.0 else tq
    p = int(math.ceil(-0.5 * math.log(eps))) + 1
    p = min(max(p, P_MIN), P_MAX)
    for i in range(7):
        c[i * STRIDE] = y[i]
    series(params, c, w, p)
    counters[C_EVALS] += 1
    counters[C_FORCE_EVALS] += 1
    n1 = _scaled(c, p - 1, tq, tm)
    n2 = _scaled(c, p, tq, tm)
    h = math.inf
    if n1 > 0.0:
        h = (1.0 / n1) ** (1.0 / (p - 1))
    if n2 > 0.0:
        h = min(h, (1.0 / n2) ** (1.0 / p))
    h *= math.exp(-0.7 / (p - 1))
    if not (math.isfinite(h) and h > 0.0):
        return ST_DIVERGED
    ctrl[CT_H] = h
    ctrl[CT_ORDER] = p
    return ST_OK


@njit(cache=True)
def advance(params, tol, yi, c, w, ctrl, counters, t_end, y_out):
    """Take steps while the current step ends before t_end, then evaluate the series at t_end
    into y_out. yi is the state at ctrl[CT_T], c its series. Returns an ST_ code; on failure yi
    and ctrl[CT_T] are the last good step's end."""
    while (ctrl[CT_T] + ctrl[CT_H]) + ctrl[CT_T_LO] < t_end:
        h = ctrl[CT_H]
        evaluate(c, int(ctrl[CT_ORDER]), h, y_out)
        for i in range(7):
            if not math.isfinite(y_out[i]):
                return ST_DIVERGED
        # The series about the new state; on failure the old one (about yi) is gone, and the
        # stepper stops with yi at CT_T, the last good state.
        status = expand(params, tol, y_out, c, w, ctrl, counters)
        if status != ST_OK:
            return status
        for i in range(7):
            yi[i] = y_out[i]
        # CT_T + CT_T_LO is the exact sum of the steps (TwoSum, Knuth; common practice): a
        # rounded time would drift by ulp(t) per step and shift the phase of a fast spin.
        t, e = two_sum(ctrl[CT_T], h)
        ctrl[CT_T] = t
        ctrl[CT_T_LO] += e
        counters[C_STEPS] += 1
    evaluate(c, int(ctrl[CT_ORDER]), (t_end - ctrl[CT_T]) - ctrl[CT_T_LO], y_out)
    return ST_OK
