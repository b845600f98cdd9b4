"""Sine and cosine that a compiler can vectorise: branch-free, no library call, for the ensemble
kernels that advance many members in SIMD lanes.

A call to libm's sin or cos is opaque to LLVM, so a loop that holds one is never vectorised; these
are plain arithmetic with selects in place of branches, inlined into the caller.

The method (common practice; the constants are those of the freely distributed fdlibm library,
Sun Microsystems 1993, files e_rem_pio2.c, k_sin.c and k_cos.c):

1. Argument reduction (Cody and Waite, "Software Manual for the Elementary Functions", 1980):
   n = round(x 2/pi), and x - n pi/2 is formed from pi/2 in three 33-bit pieces and a 53-bit
   tail, each product n * piece exact while |n| < 2^20. The pieces are taken off with their
   rounding errors kept (two-sum), and the remainder is carried as a double-double (y0 + y1):
   152 bits of pi/2, more than the nearest a double below 2^20 pi/2 comes to a multiple of pi/2
   needs. fdlibm's own "medium" path decides by a branch how many pieces to take; here every
   lane takes all of them, so no branch stops the vectoriser.
2. Minimax polynomials on [-pi/4, pi/4]: degree 13 for sin and 14 for cos, fdlibm's coefficients
   (|error| < 2^-58 relative), evaluated with the tail y1 folded in as fdlibm does, and cos in the
   form 1 - z/2 with its rounding error recovered (as revised in FreeBSD's k_cos.c).
3. The quadrant n mod 4 picks sin or cos and the sign.

Range: |x| <= REDUCE_MAX = 2^19 pi (about 1.6e6 rad), where the products n * piece stay exact.
Angles a run stores are folded to (-pi, pi] and the arguments a kernel forms from them stay far
below this; `sincos_wide` falls back to math.sin/math.cos beyond it, for callers that cannot rule
it out (a select, so a vectorised loop stays vectorised only where no lane needs it).

Accuracy, checked against mpmath at 50 digits (tests/test_lane_trig.py): at most 1 ulp over
|x| <= REDUCE_MAX, arguments next to multiples of pi/2 included. Not bit-identical to libm: a
kernel that switches to these changes its bits, by at most about an ulp per call.

Compiled without fastmath: the reduction and the recovered roundings depend on each operation
being rounded as written.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

# fdlibm e_rem_pio2.c: 2/pi to 53 bits; pi/2 = PIO2_1 + PIO2_2 + PIO2_3 + PIO2_3T, the first
# three with 33 significant bits (their low 20 bits zero), so n * PIO2_k is exact for |n| < 2^20.
INVPIO2 = 6.36619772367581382433e-01  # 0x3FE45F30 6DC9C883
PIO2_1 = 1.57079632673412561417e00  # 0x3FF921FB 54400000
PIO2_2 = 6.07710050630396597660e-11  # 0x3DD0B461 1A600000
PIO2_3 = 2.02226624871116645580e-21  # 0x3BA3198A 2E000000
PIO2_3T = 8.47842766036889956997e-32  # 0x397B839A 252049C1: pi/2 - (PIO2_1 + PIO2_2 + PIO2_3)

# fdlibm k_sin.c: sin(x) ~ x + S1 x^3 + ... + S6 x^13 on [-pi/4, pi/4]
S1 = -1.66666666666666324348e-01  # 0xBFC55555 55555549
S2 = 8.33333333332248946124e-03  # 0x3F811111 1110F8A6
S3 = -1.98412698298579493134e-04  # 0xBF2A01A0 19C161D5
S4 = 2.75573137070700676789e-06  # 0x3EC71DE3 57B1FE7D
S5 = -2.50507602534068634195e-08  # 0xBE5AE5E6 8A2B9CEB
S6 = 1.58969099521155010221e-10  # 0x3DE5D93A 5ACFD57C
# fdlibm k_cos.c: cos(x) ~ 1 - x^2/2 + C1 x^4 + ... + C6 x^14 on [-pi/4, pi/4]
C1 = 4.16666666666666019037e-02  # 0x3FA55555 5555554C
C2 = -1.38888888888741095749e-03  # 0xBF56C16C 16C15177
C3 = 2.48015872894767294178e-05  # 0x3EFA01A0 19CB1590
C4 = -2.75573143513906633035e-07  # 0xBE927E4F 809C52AD
C5 = 2.08757232129817482790e-09  # 0x3E21EE9E BDB4B1C4
C6 = -1.13596475577881948265e-11  # 0xBDA8FAE9 BE8838D4

# Adding and subtracting 1.5 * 2^52 rounds a double of magnitude below 2^51 to the nearest
# integer (ties to even) in the current rounding mode, with no branch and no library call.
_ROUNDER = 6755399441055744.0
REDUCE_MAX = 2.0**19 * math.pi


@njit(cache=True, inline="always")
def two_sum(a, b):
    """(s, e) with s = fl(a + b) and a + b = s + e exactly (Knuth; common practice)."""
    s = a + b
    bb = s - a
    return s, (a - (s - bb)) + (b - bb)


@njit(cache=True, inline="always")
def reduce_pio2(x):
    """(n, y0, y1): x = n pi/2 + y0 + y1 with |y0 + y1| <= pi/4 (about), for |x| <= REDUCE_MAX.
    n is a double holding a whole number: a conversion to int64 has no vector instruction
    before AVX-512 and would be done lane by lane on AVX2."""
    fn = (x * INVPIO2 + _ROUNDER) - _ROUNDER
    # x - fn PIO2_1 is exact (the product has at most 53 bits, and the two are within a factor
    # of two of each other unless fn is 0); the next two pieces are taken off with their
    # rounding errors kept (two-sum), the tail rounded once. Branch-free, so every lane does the
    # same work whether the cancellation is mild or massive.
    r0 = x - fn * PIO2_1
    a, ea = two_sum(r0, -fn * PIO2_2)
    b, eb = two_sum(a, -fn * PIO2_3)
    tail = (ea + eb) - fn * PIO2_3T
    y0 = b + tail
    y1 = (b - y0) + tail
    return fn, y0, y1


@njit(cache=True, inline="always")
def kernel_sin(x, y):
    """sin(x + y) for |x| <= pi/4 and |y| <= ulp(x) / 2 (fdlibm's __kernel_sin with y given)."""
    z = x * x
    w = z * z
    r = S2 + z * (S3 + z * S4) + z * w * (S5 + z * S6)
    v = z * x
    return x - ((z * (0.5 * y - v * r) - y) - v * S1)


@njit(cache=True, inline="always")
def kernel_cos(x, y):
    """cos(x + y) for |x| <= pi/4 and |y| <= ulp(x) / 2: 1 - z/2 rounded, its error recovered."""
    z = x * x
    w = z * z
    r = z * (C1 + z * (C2 + z * C3)) + w * w * (C4 + z * (C5 + z * C6))
    hz = 0.5 * z
    w = 1.0 - hz
    return w + (((1.0 - w) - hz) + (z * r - x * y))


@njit(cache=True, inline="always")
def sincos(x):
    """(sin x, cos x) for |x| <= REDUCE_MAX, within 1 ulp each; branch-free (selects only)."""
    n, y0, y1 = reduce_pio2(x)
    s = kernel_sin(y0, y1)
    c = kernel_cos(y0, y1)
    # The quadrant n mod 4 in doubles (exact: n is a whole number below 2^20), compared rather
    # than masked as integers, so that the whole function stays in vector registers on AVX2.
    q = n - 4.0 * np.floor(n * 0.25)  # np.floor: numba's math.floor returns an int
    odd = (q == 1.0) | (q == 3.0)
    # quadrant q: (sin, cos) = (s, c), (c, -s), (-s, -c), (-c, s)
    sn = c if odd else s
    cs = s if odd else c
    sn = -sn if q >= 2.0 else sn
    cs = -cs if ((q == 1.0) | (q == 2.0)) else cs
    sn = x if x == 0.0 else sn  # sin(-0) = -0: the reduction's sums would give +0
    return sn, cs


@njit(cache=True, inline="always")
def sincos_wide(x):
    """sincos for any finite x: the lane version where |x| <= REDUCE_MAX, libm beyond."""
    s, c = sincos(x)
    if abs(x) > REDUCE_MAX:
        s = math.sin(x)
        c = math.cos(x)
    return s, c


@njit(cache=True)
def sincos_array(x, s, c):
    """s[i], c[i] = sincos(x[i]): the loop the tests check and the benchmark times."""
    for i in range(x.shape[0]):
        s[i], c[i] = sincos(x[i])


@njit(cache=True)
def libm_sincos_array(x, s, c):
    """The same loop through libm (math.sin, math.cos): the scalar yardstick."""
    for i in range(x.shape[0]):
        s[i] = math.sin(x[i])
        c[i] = math.cos(x[i])
