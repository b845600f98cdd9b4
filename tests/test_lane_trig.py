"""The vectorisable sine and cosine (models/lane_trig.py) against mpmath at 50 digits (the
independent reference): at most 1 ulp over the range the reduction covers, next to multiples of
pi/2 included, and the loop that uses them vectorised by LLVM."""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
from numba import njit

from topdrift.models.lane_trig import (
    REDUCE_MAX,
    reduce_pio2,
    sincos,
    sincos_array,
    sincos_wide,
)

mpmath.mp.dps = 50


def worst_ulps(x: np.ndarray) -> tuple[float, float]:
    """The largest error of sin and of cos over x, in ulps of the true value (mpmath)."""
    s = np.empty_like(x)
    c = np.empty_like(x)
    sincos_array(x, s, c)
    worst = [0.0, 0.0]
    for xi, si, ci in zip(x, s, c, strict=True):
        for k, (got, f) in enumerate(((si, mpmath.sin), (ci, mpmath.cos))):
            true = f(mpmath.mpf(float(xi)))
            ulp = np.spacing(abs(float(true)))
            worst[k] = max(worst[k], float(abs(mpmath.mpf(float(got)) - true) / ulp))
    return worst[0], worst[1]


@pytest.mark.parametrize("bound", [math.pi / 4, 4.0, 100.0, 1e4, REDUCE_MAX])
def test_within_one_ulp_of_mpmath_over_the_range(bound):
    x = np.random.default_rng(7).uniform(-bound, bound, 1500)
    s_err, c_err = worst_ulps(x)
    assert s_err <= 1.0 and c_err <= 1.0, (s_err, c_err)


def test_within_one_ulp_next_to_multiples_of_half_pi():
    # The doubles nearest k pi/2 (k up to 2^20): the result is tiny and the reduction cancels
    # all but a few bits of x, the case a reduction with too few bits of pi/2 gets wrong.
    k = np.random.default_rng(8).integers(1, 2**20, 800)
    x = np.array([float(mpmath.mpf(int(n)) * mpmath.pi / 2) for n in k])
    x = np.concatenate([x, -x, np.nextafter(x, np.inf), np.nextafter(x, -np.inf)])
    s_err, c_err = worst_ulps(x)
    assert s_err <= 1.0 and c_err <= 1.0, (s_err, c_err)


def test_the_reduction_keeps_the_remainder_to_double_double_accuracy():
    # x - n pi/2 computed in mpmath (50 digits) against y0 + y1: within 2^-100 relative, far
    # below the half ulp of y0 that a remainder carried in one double could keep.
    for x in np.random.default_rng(9).uniform(-REDUCE_MAX, REDUCE_MAX, 400):
        n, y0, y1 = reduce_pio2(x)
        exact = mpmath.mpf(float(x)) - n * mpmath.pi / 2
        assert abs(exact) <= mpmath.pi / 4 * (1 + 1e-9)
        assert abs(mpmath.mpf(y0) + mpmath.mpf(y1) - exact) <= abs(exact) * 2.0**-100


def test_small_signed_and_special_arguments():
    x = np.array([0.0, -0.0, 5e-324, -5e-324, 1e-300, 1e-9, -1e-9])
    s = np.empty_like(x)
    c = np.empty_like(x)
    sincos_array(x, s, c)
    assert np.array_equal(s, x) and np.all(c == 1.0)  # sin x = x and cos x = 1 in double there
    assert math.copysign(1.0, s[1]) == -1.0  # sin(-0) is -0 (IEEE 754, common practice)


def test_beyond_the_reduced_range_falls_back_to_libm():
    for x in (REDUCE_MAX * 1.5, -1e10, 6.0e7, 1e300):
        assert sincos_wide(x) == (math.sin(x), math.cos(x))
    assert sincos_wide(1.25) != (math.nan, math.nan)


def test_the_loop_is_vectorised():
    # A libm call would keep LLVM from vectorising; these must not. The optimised IR of the
    # array loop holds vector operations on doubles (<2 x double> with SSE2, 4 with AVX2, 8 with
    # AVX-512): what the ensemble kernels rely on.
    # Compiled here without the disk cache: numba shows no IR for code it loaded from the cache.
    @njit
    def loop(x, s, c):
        for i in range(x.shape[0]):
            s[i], c[i] = sincos(x[i])

    x = np.linspace(-3.0, 3.0, 64)
    loop(x, np.empty_like(x), np.empty_like(x))
    ir = "".join(loop.inspect_llvm().values())
    assert " x double>" in ir
