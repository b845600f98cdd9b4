"""A Taylor-series integrator of the body-form equations in double-double arithmetic.

The Euler-Poisson equations with a quaternion are polynomial of degree 2 in (q, m) (common
practice):

    q' = q (0, w) / 2,   m1' = (1/I3 - 1/I2) m2 m3 + (Gamma x M g chi)_1 (and cyclically),
    Gamma(q) = (2 (q1 q3 - q0 q2), 2 (q2 q3 + q0 q1), q0^2 - q1^2 - q2^2 + q3^2),  w = I^-1 m,

so the Taylor coefficients of the solution follow from Cauchy products of the series already
known (the recurrences of automatic differentiation, common practice): (k + 1) y_(k+1) =
[f(y)]_k. Every coefficient is a double-double (hi + lo, about 32 digits); each Cauchy product
is a compensated dot product (the products split exactly by TwoProd, the sums by TwoSum, the
errors gathered in a second word), so one step rounds at about 1e-32 relative.

The step follows the usual rule for high-order Taylor methods (A. Jorba and M. Zou, "A software
package for the numerical integration of ODEs by means of high-order Taylor methods", Exp. Math.
14 (2005) 99-117, sec. 3.2, from memory): h = safety min((tol / |y_N|)^(1/N), (tol / |y_(N-1)|)
^(1/(N-1))) with the norms of the last two coefficients, the quaternion relative to 1 and the
momentum relative to |m|. Sample times inside a step are evaluated from the step's polynomial
(dense output at the full order), so the step sequence does not depend on the samples.

The kernel advances over a block of sample times and returns, so that the caller can print
progress between blocks; it allocates nothing (the coefficient arrays are the caller's) and is
compiled without fastmath (it would undo the error-free transformations).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from topdrift.integrators.eft import two_prod, two_sum

# Parameter slots of the double-double parameter array `par` (hi at 2 i, lo at 2 i + 1).
D_INV1, D_INV2, D_INV3 = 0, 1, 2  # 1/I
D_E1, D_E2, D_E3 = 3, 4, 5  # 1/I3 - 1/I2, 1/I1 - 1/I3, 1/I2 - 1/I1 (the free Euler terms)
D_CX, D_CY, D_CZ = 6, 7, 8  # M g chi
N_DPAR = 9

# Kernel status codes.
TS_OK = 0
TS_MAX_STEPS = 1  # the block needed more steps than allowed
TS_NOT_FINITE = 2  # a coefficient or the step is not finite


@njit(cache=True, inline="always")
def _fast_two_sum(a, b):
    s = a + b
    return s, b - (s - a)


@njit(cache=True, inline="always")
def dd_add(ah, al, bh, bl):
    s, e = two_sum(ah, bh)
    t, f = two_sum(al, bl)
    s, e = _fast_two_sum(s, e + t)
    return _fast_two_sum(s, e + f)


@njit(cache=True, inline="always")
def dd_mul(ah, al, bh, bl):
    p, e = two_prod(ah, bh)
    return _fast_two_sum(p, e + (ah * bl + al * bh))


@njit(cache=True, inline="always")
def dd_div_double(ah, al, b):
    """(ah + al) / b for a double b."""
    q1 = ah / b
    p, e = two_prod(q1, b)
    s, f = two_sum(ah, -p)
    f = (f - e) + al
    q2 = (s + f) / b
    return _fast_two_sum(q1, q2)


@njit(cache=True, inline="always")
def _conv(xh, xl, a, yh, yl, b, k):
    """sum_(i=0..k) x[a, i] y[b, k - i] as a double-double (a compensated dot product)."""
    s = 0.0
    c = 0.0
    for i in range(k + 1):
        u_h = xh[a, i]
        u_l = xl[a, i]
        v_h = yh[b, k - i]
        v_l = yl[b, k - i]
        p, e = two_prod(u_h, v_h)
        e += u_h * v_l + u_l * v_h
        s, f = two_sum(s, p)
        c += f + e
    return _fast_two_sum(s, c)


@njit(cache=True)
def series(ch, cl, wh, wl, gh, gl, par, order):
    """Fill the Taylor coefficients 1..order of (q0..q3, m1..m3) in ch, cl (7 x order+1; row i
    holds component i, column 0 the current state) from column 0."""
    for k in range(order):
        # w = I^-1 m and Gamma(q), coefficient k (both known once column k of q, m is).
        for i in range(3):
            wh[i, k], wl[i, k] = dd_mul(ch[4 + i, k], cl[4 + i, k], par[2 * i], par[2 * i + 1])
        ah, al = _conv(ch, cl, 1, ch, cl, 3, k)
        bh, bl = _conv(ch, cl, 0, ch, cl, 2, k)
        ah, al = dd_add(ah, al, -bh, -bl)
        gh[0, k], gl[0, k] = 2.0 * ah, 2.0 * al
        ah, al = _conv(ch, cl, 2, ch, cl, 3, k)
        bh, bl = _conv(ch, cl, 0, ch, cl, 1, k)
        ah, al = dd_add(ah, al, bh, bl)
        gh[1, k], gl[1, k] = 2.0 * ah, 2.0 * al
        ah, al = _conv(ch, cl, 0, ch, cl, 0, k)
        bh, bl = _conv(ch, cl, 1, ch, cl, 1, k)
        ah, al = dd_add(ah, al, -bh, -bl)
        bh, bl = _conv(ch, cl, 2, ch, cl, 2, k)
        ah, al = dd_add(ah, al, -bh, -bl)
        bh, bl = _conv(ch, cl, 3, ch, cl, 3, k)
        gh[2, k], gl[2, k] = dd_add(ah, al, bh, bl)

        # q' = q (0, w) / 2: each component a signed sum of three products q_i w_j.
        # (qi, wj, sign) for q0' .. q3': the Hamilton product with (0, w1, w2, w3).
        s1h, s1l = _conv(ch, cl, 1, wh, wl, 0, k)
        s2h, s2l = _conv(ch, cl, 2, wh, wl, 1, k)
        s3h, s3l = _conv(ch, cl, 3, wh, wl, 2, k)
        dh, dl = dd_add(-s1h, -s1l, -s2h, -s2l)
        dh, dl = dd_add(dh, dl, -s3h, -s3l)
        ch[0, k + 1], cl[0, k + 1] = dd_div_double(dh, dl, 2.0 * (k + 1))
        s1h, s1l = _conv(ch, cl, 0, wh, wl, 0, k)
        s2h, s2l = _conv(ch, cl, 2, wh, wl, 2, k)
        s3h, s3l = _conv(ch, cl, 3, wh, wl, 1, k)
        dh, dl = dd_add(s1h, s1l, s2h, s2l)
        dh, dl = dd_add(dh, dl, -s3h, -s3l)
        ch[1, k + 1], cl[1, k + 1] = dd_div_double(dh, dl, 2.0 * (k + 1))
        s1h, s1l = _conv(ch, cl, 0, wh, wl, 1, k)
        s2h, s2l = _conv(ch, cl, 1, wh, wl, 2, k)
        s3h, s3l = _conv(ch, cl, 3, wh, wl, 0, k)
        dh, dl = dd_add(s1h, s1l, -s2h, -s2l)
        dh, dl = dd_add(dh, dl, s3h, s3l)
        ch[2, k + 1], cl[2, k + 1] = dd_div_double(dh, dl, 2.0 * (k + 1))
        s1h, s1l = _conv(ch, cl, 0, wh, wl, 2, k)
        s2h, s2l = _conv(ch, cl, 1, wh, wl, 1, k)
        s3h, s3l = _conv(ch, cl, 2, wh, wl, 0, k)
        dh, dl = dd_add(s1h, s1l, s2h, s2l)
        dh, dl = dd_add(dh, dl, -s3h, -s3l)
        ch[3, k + 1], cl[3, k + 1] = dd_div_double(dh, dl, 2.0 * (k + 1))

        # m' = m x w + Gamma x (M g chi); m x w = ((1/I3 - 1/I2) m2 m3, ...), one product each.
        for i in range(3):
            j = (i + 1) % 3
            n = (i + 2) % 3
            ph, pl = _conv(ch, cl, 4 + j, ch, cl, 4 + n, k)
            dh, dl = dd_mul(ph, pl, par[2 * (3 + i)], par[2 * (3 + i) + 1])
            # (Gamma x c)_i = Gamma_j c_n - Gamma_n c_j
            ah, al = dd_mul(gh[j, k], gl[j, k], par[2 * (6 + n)], par[2 * (6 + n) + 1])
            bh, bl = dd_mul(gh[n, k], gl[n, k], par[2 * (6 + j)], par[2 * (6 + j) + 1])
            ah, al = dd_add(ah, al, -bh, -bl)
            dh, dl = dd_add(dh, dl, ah, al)
            ch[4 + i, k + 1], cl[4 + i, k + 1] = dd_div_double(dh, dl, float(k + 1))


@njit(cache=True)
def horner(ch, cl, order, dth, dtl, outh, outl, row):
    """The step's polynomial at dt = dth + dtl, into outh[row], outl[row] (7 components)."""
    for i in range(7):
        ah = ch[i, order]
        al = cl[i, order]
        for k in range(order - 1, -1, -1):
            ah, al = dd_mul(ah, al, dth, dtl)
            ah, al = dd_add(ah, al, ch[i, k], cl[i, k])
        outh[row, i] = ah
        outl[row, i] = al


@njit(cache=True)
def _scaled_norm(ch, k, mscale):
    a = 0.0
    for i in range(4):
        a = max(a, abs(ch[i, k]))
    b = 0.0
    for i in range(4, 7):
        b = max(b, abs(ch[i, k]))
    return max(a, b / mscale)


@njit(cache=True)
def advance_block(
    yh, yl, tt, par, times, first, last, order, tol, safety, max_steps,
    ch, cl, wh, wl, gh, gl, sh, sl, outh, outl, counters,
):  # fmt: skip
    """Advance the state (yh + yl at time tt[0] + tt[1]) to cover times[first:last], writing the
    state at each of those times into outh, outl (rows first..last-1); sh, sl (1 x 7) hold the
    end of a step. Returns a TS_ code; counters[0] counts steps. The state and time are left at
    the last full step taken."""
    j = first
    steps = 0
    while j < last:
        for i in range(7):
            ch[i, 0] = yh[i]
            cl[i, 0] = yl[i]
        series(ch, cl, wh, wl, gh, gl, par, order)
        m = math.sqrt(yh[4] * yh[4] + yh[5] * yh[5] + yh[6] * yh[6])
        mscale = max(m, 1e-300)
        last_n = max(_scaled_norm(ch, order, mscale), 1e-300)
        prev_n = max(_scaled_norm(ch, order - 1, mscale), 1e-300)
        h = safety * min((tol / last_n) ** (1.0 / order), (tol / prev_n) ** (1.0 / (order - 1)))
        if not (math.isfinite(h) and h > 0.0):
            return TS_NOT_FINITE
        # Samples inside [t, t + h]: from the polynomial, at dt = t_j - t in double-double.
        eh, el = dd_add(tt[0], tt[1], h, 0.0)
        while j < last and (times[j] < eh or (times[j] == eh and el >= 0.0)):
            dth, dtl = dd_add(times[j], 0.0, -tt[0], -tt[1])
            horner(ch, cl, order, dth, dtl, outh, outl, j)
            j += 1
        if j >= last:
            return TS_OK  # the state stays at t: the next block starts its step there again
        horner(ch, cl, order, h, 0.0, sh, sl, 0)
        for i in range(7):
            v = sh[0, i]
            if not math.isfinite(v):
                return TS_NOT_FINITE
            yh[i] = v
            yl[i] = sl[0, i]
        tt[0], tt[1] = eh, el
        counters[0] += 1
        steps += 1
        if steps >= max_steps:
            return TS_MAX_STEPS
    return TS_OK


def dd_parameters(body) -> np.ndarray:
    """The double-double parameter array of a body: 1/I, the free Euler differences and M g chi,
    each computed from the body's double values in 50-digit arithmetic (mpmath) and split into
    two doubles, so the reference integrates the case's body without the parameter rounding
    that the double-precision kernels carry."""
    import mpmath as mp

    with mp.workdps(50):
        inertia = [mp.mpf(float(v)) for v in body.inertia]
        inv = [1 / v for v in inertia]
        mg = mp.mpf(float(body.mass)) * mp.mpf(float(body.gravity))
        values = inv + [inv[2] - inv[1], inv[0] - inv[2], inv[1] - inv[0]]
        values += [mg * mp.mpf(float(c)) for c in body.com]
        out = np.empty(2 * N_DPAR)
        for i, v in enumerate(values):
            hi = float(v)
            out[2 * i] = hi
            out[2 * i + 1] = float(v - mp.mpf(hi))
    return out
