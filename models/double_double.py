"""Double-double arithmetic on numpy arrays and floats, for the exact solution's long horizons.

A value is the unevaluated sum hi + lo of two doubles with |lo| <= ulp(hi) / 2: about 106 bits,
relative error 2^-105 per operation. The exact Lagrange-top solution carries its phase
lambda t + tau0, the whole nutation periods and the per-period advances of phi and psi in this
form, so that 10^8 periods or 10^12 s cost no more bits than one period; angles are then folded
to (-pi, pi] with an exact integer count of whole turns.

The error-free transformations are the usual ones (common practice): Knuth's two-sum, and
Dekker's product with Veltkamp's splitting (numpy has no fused multiply-add). Everything here is
elementwise and allocates only numpy temporaries: no Python loop over samples.
"""

from __future__ import annotations

import numpy as np

# Veltkamp's splitter 2^27 + 1: hi keeps the upper 26 bits of a double, lo the rest, both exact.
_SPLITTER = 134217729.0

# pi and 2 pi as double-doubles (the second word is the rounding error of the first; the same
# digits as math.pi and mpmath's pi to 40 digits).
PI = (3.141592653589793, 1.2246467991473532e-16)
TWO_PI = (6.283185307179586, 2.4492935982947064e-16)


def two_sum(a, b):
    """s + e == a + b exactly, s = fl(a + b)."""
    s = a + b
    bb = s - a
    return s, (a - (s - bb)) + (b - bb)


def fast_two_sum(a, b):
    """s + e == a + b exactly when |a| >= |b| (or a == 0)."""
    s = a + b
    return s, b - (s - a)


def _split(a):
    c = _SPLITTER * a
    hi = c - (c - a)
    return hi, a - hi


def two_prod(a, b):
    """p + e == a * b exactly, p = fl(a * b) (no overflow: |a|, |b| below about 1e300)."""
    p = a * b
    ah, al = _split(a)
    bh, bl = _split(b)
    return p, ((ah * bh - p) + ah * bl + al * bh) + al * bl


def add(ah, al, bh, bl):
    """(ah + al) + (bh + bl), renormalised (the accurate double-double sum)."""
    s, e = two_sum(ah, bh)
    t, f = two_sum(al, bl)
    s, e = fast_two_sum(s, e + t)
    return fast_two_sum(s, e + f)


def mul(ah, al, bh, bl):
    """(ah + al) (bh + bl), renormalised."""
    p, e = two_prod(ah, bh)
    return fast_two_sum(p, e + (ah * bl + al * bh))


def reduce(hi, lo):
    """(vh, vl, turns) with hi + lo == (vh + vl) + 2 pi turns, vh + vl in (-pi, pi] (decided on
    the double-double, so that a value a hair above pi goes to -pi) and turns an int64 array."""
    hi = np.asarray(hi, dtype=np.float64)
    lo = np.asarray(lo, dtype=np.float64)
    k = np.rint(hi / TWO_PI[0])
    ph, pl = mul(TWO_PI[0], TWO_PI[1], k, 0.0)
    vh, vl = add(hi, lo, -ph, -pl)
    over = (vh > PI[0]) | ((vh == PI[0]) & (vl > PI[1]))
    under = (vh < -PI[0]) | ((vh == -PI[0]) & (vl <= -PI[1]))
    shift = over.astype(np.float64) - under.astype(np.float64)
    vh, vl = add(vh, vl, -shift * TWO_PI[0], -shift * TWO_PI[1])
    return vh, vl, (k + shift).astype(np.int64)


def fold(hi, lo):
    """(angle, turns) with hi + lo == angle + 2 pi turns: the angle rounded to double, in
    [-pi, pi] (the real angle lies in (-pi, pi]), turns an int64 array."""
    vh, vl, k = reduce(hi, lo)
    return vh + vl, k


def unfold(angle, turns):
    """angle + 2 pi turns, rounded once to double."""
    turns = np.asarray(turns, dtype=np.float64)
    ph, pl = mul(TWO_PI[0], TWO_PI[1], turns, 0.0)
    sh, sl = add(ph, pl, np.asarray(angle, dtype=np.float64), 0.0)
    return sh + sl
