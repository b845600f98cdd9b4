"""Double-double (and a little triple-double) arithmetic, for the exact solution's long horizons.

A value is the unevaluated sum hi + lo of two doubles with |lo| <= ulp(hi) / 2: about 106 bits,
relative error 2^-105 per operation. The exact Lagrange-top solution carries its phase, the whole
nutation periods and the per-period advances of phi and psi in this form, so that 10^8 periods
or 10^12 s cost no more bits than one period; angles are then folded to (-pi, pi] with an exact
integer count of whole turns.

The error-free transformations are the usual ones (common practice): Knuth's two-sum, and
Dekker's product with Veltkamp's splitting (no fused multiply-add is assumed). The scalar
functions are numba-compiled; the error-free transformations are inlined into their callers
(lane_flows.py vectorises two_prod), while add, mul, reduce_turns and linear_remainder, which
run once per sample and never in a step loop, are called: inlined, each site was typed again
when numba compiled the exact solution's kernels (most of their cold compile; called, the
roundings are the same and the exact solution's cost per sample measured the same). The array
functions at the bottom are thin wrappers over compiled loops, for the slower paths and the
tests. Nothing here may be compiled with fastmath: every rounding is part of the algorithm.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

# Veltkamp's splitter 2^27 + 1: hi keeps the upper 26 bits of a double, lo the rest, both exact.
_SPLITTER = 134217729.0

# pi and 2 pi as double-doubles (the second word is the rounding error of the first; the same
# digits as math.pi and mpmath's pi to 40 digits).
PI = (3.141592653589793, 1.2246467991473532e-16)
TWO_PI = (6.283185307179586, 2.4492935982947064e-16)
_PI0, _PI1 = PI
_TWO_PI0, _TWO_PI1 = TWO_PI


@njit(cache=True, inline="always")
def two_sum(a, b):
    """s + e == a + b exactly, s = fl(a + b)."""
    s = a + b
    bb = s - a
    return s, (a - (s - bb)) + (b - bb)


@njit(cache=True, inline="always")
def fast_two_sum(a, b):
    """s + e == a + b exactly when |a| >= |b| (or a == 0)."""
    s = a + b
    return s, b - (s - a)


@njit(cache=True, inline="always")
def two_prod(a, b):
    """p + e == a * b exactly, p = fl(a * b) (no overflow: |a|, |b| below about 1e300)."""
    p = a * b
    c = _SPLITTER * a
    ah = c - (c - a)
    al = a - ah
    c = _SPLITTER * b
    bh = c - (c - b)
    bl = b - bh
    return p, ((ah * bh - p) + ah * bl + al * bh) + al * bl


@njit(cache=True)
def add(ah, al, bh, bl):
    """(ah + al) + (bh + bl), renormalised (the accurate double-double sum)."""
    s, e = two_sum(ah, bh)
    t, f = two_sum(al, bl)
    s, e = fast_two_sum(s, e + t)
    return fast_two_sum(s, e + f)


@njit(cache=True)
def mul(ah, al, bh, bl):
    """(ah + al) (bh + bl), renormalised."""
    p, e = two_prod(ah, bh)
    return fast_two_sum(p, e + (ah * bl + al * bh))


@njit(cache=True)
def reduce_turns(hi, lo):
    """(vh, vl, turns) with hi + lo == (vh + vl) + 2 pi turns and vh + vl in (-pi, pi], decided
    on the double-double (a value a hair above pi goes to -pi); turns an integer-valued double."""
    k = math.floor(hi / _TWO_PI0 + 0.5)
    ph, pl = mul(_TWO_PI0, _TWO_PI1, k, 0.0)
    vh, vl = add(hi, lo, -ph, -pl)
    if vh > _PI0 or (vh == _PI0 and vl > _PI1):
        vh, vl = add(vh, vl, -_TWO_PI0, -_TWO_PI1)
        k += 1.0
    elif vh < -_PI0 or (vh == -_PI0 and vl <= -_PI1):
        vh, vl = add(vh, vl, _TWO_PI0, _TWO_PI1)
        k -= 1.0
    return vh, vl, k


@njit(cache=True)
def linear_remainder(a0, a1, a2, b0, b1, c0, c1, c2, th, tl):
    """(j1, j2, rh, rl) with a t + b = c (j1 + j2) + (rh + rl), |rh + rl| <= c / 2 up to rounding,
    for t = th + tl and b double-doubles, a and c triple-doubles (three words, about 160 bits,
    so that the remainder of a t ~ 1e16 keeps its 1e-32).

    The phase a t + b itself is never formed: every product of a leading word is split exactly
    and the pieces are summed into the remainder, so its error is that of the last words alone.
    j1 and j2 are integer-valued doubles (j1 exact beyond 2^53 too, where j2 corrects it)."""
    j1 = math.floor((a0 * th + (a1 * th + a0 * tl + b0)) / c0 + 0.5)
    pa, ea = two_prod(a0, th)
    pb, eb = two_prod(c0, j1)
    h, l = two_sum(pa, -pb)
    h, l = add(h, l, ea, -eb)
    p, e = two_prod(a1, th)
    h, l = add(h, l, p, e)
    p, e = two_prod(c1, j1)
    h, l = add(h, l, -p, -e)
    p, e = two_prod(a0, tl)
    h, l = add(h, l, p, e)
    h, l = add(h, l, (a2 * th + a1 * tl) - c2 * j1, 0.0)
    h, l = add(h, l, b0, b1)
    j2 = math.floor(h / c0 + 0.5)
    p, e = two_prod(c0, j2)
    h, l = add(h, l, -p, -e)
    h, l = add(h, l, -(c1 * j2), -(c2 * j2))
    return j1, j2, h, l


# --------------------------------------------------------------------- array functions
@njit(cache=True)
def _fold_kernel(hi, lo, angle, turns):
    for i in range(hi.shape[0]):
        vh, vl, k = reduce_turns(hi[i], lo[i])
        angle[i] = vh + vl
        turns[i] = np.int64(k)


@njit(cache=True)
def _unfold_kernel(angle, turns, out):
    for i in range(angle.shape[0]):
        ph, pl = mul(_TWO_PI0, _TWO_PI1, float(turns[i]), 0.0)
        sh, sl = add(ph, pl, angle[i], 0.0)
        out[i] = sh + sl


@njit(cache=True)
def _linear_kernel(a, b, c, th, tl, j1, j2, rh, rl):
    for i in range(th.shape[0]):
        j1[i], j2[i], rh[i], rl[i] = linear_remainder(
            a[0], a[1], a[2], b[0], b[1], c[0], c[1], c[2], th[i], tl[i]
        )


def _arrays(*xs):
    n = np.broadcast_shapes(*(np.shape(x) for x in xs))
    return [np.ascontiguousarray(np.broadcast_to(np.asarray(x, np.float64), n)).ravel() for x in xs]


def fold(hi, lo):
    """(angle, turns) with hi + lo == angle + 2 pi turns: the angle rounded to double in
    [-pi, pi] (the real angle lies in (-pi, pi]), turns int64; 1-d arrays."""
    hi, lo = _arrays(hi, lo)
    angle = np.empty_like(hi)
    turns = np.empty(hi.shape[0], dtype=np.int64)
    _fold_kernel(hi, lo, angle, turns)
    return angle, turns


def unfold(angle, turns):
    """angle + 2 pi turns, rounded once to double (1-d array)."""
    angle = np.ascontiguousarray(angle, dtype=np.float64).ravel()
    turns = np.ascontiguousarray(turns, dtype=np.int64).ravel()
    out = np.empty_like(angle)
    _unfold_kernel(angle, turns, out)
    return out


def remainder(a, b, c, th, tl):
    """linear_remainder over arrays th, tl: a = (a0, a1, a2), b = (b0, b1), c = (c0, c1, c2)."""
    th, tl = _arrays(th, tl)
    out = [np.empty_like(th) for _ in range(4)]
    a, b, c = (np.asarray(x, np.float64) for x in (a, b, c))
    _linear_kernel(a, b, c, th, tl, *out)
    return tuple(out)
