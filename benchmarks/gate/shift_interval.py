"""How far apart two sets of timing rounds are, with a confidence interval that assumes nothing
about the shape of the noise.

Timing noise on a shared machine is not normal: most rounds cluster, a few are slow (another
process took the core, a cache was cold). The interval used here is the distribution-free one
for a shift between two samples: the Hodges-Lehmann estimate (the median of all pairwise
differences) with the interval between two order statistics of those differences whose ranks
come from the exact null distribution of the Mann-Whitney statistic (Hodges and Lehmann, Ann.
Math. Statist. 34 (1963) 598; Bauer, JASA 67 (1972) 687; Hollander and Wolfe, Nonparametric
Statistical Methods, 2nd ed., sec. 4.3, from memory). Applied to the logarithms of per-round
ratios, the shift is a log factor.
"""

from __future__ import annotations

import functools
import math


@functools.cache
def mann_whitney_counts(n: int, m: int) -> tuple[int, ...]:
    """counts[u] = the number of the C(n+m, n) orderings of n x's and m y's in which exactly u
    of the n*m pairs have x > y (no ties): the exact null distribution of U. These are the
    coefficients of the Gaussian binomial coefficient [n+m, n]_q (common practice; e.g.
    Andrews, The Theory of Partitions, ch. 3, from memory), built here as the product
    prod_{i=1..n} (1 - q^(m+i)) / (1 - q^i), one exact polynomial multiplication and division
    at a time, in integers: O(n * n m) operations."""
    size = n * m + 1
    c = [0] * size
    c[0] = 1
    for i in range(1, n + 1):
        for u in range(size - 1, m + i - 1, -1):  # times (1 - q^(m+i))
            c[u] -= c[u - m - i]
        for u in range(i, size):  # divided by (1 - q^i): exact, the quotient is a polynomial
            c[u] += c[u - i]
    return tuple(c)


def lower_rank(n: int, m: int, confidence: float) -> int | None:
    """The largest k with P(U < k) <= (1 - confidence) / 2 under the null: the interval is
    [d_(k), d_(nm + 1 - k)] of the sorted pairwise differences (ranks from 1). None when even
    the extreme differences give less confidence than asked (too few rounds)."""
    counts = mann_whitney_counts(n, m)
    total = math.comb(n + m, n)
    tail = (1.0 - confidence) / 2.0
    below = 0  # the number of orderings with U < k
    k = 0
    while k < len(counts) and (below + counts[k]) / total <= tail:
        below += counts[k]
        k += 1
    return k if k >= 1 else None


def shift_interval(
    x: list[float], y: list[float], confidence: float = 0.95
) -> tuple[float, float, float] | None:
    """(estimate, low, high) of the shift of x over y (x - y), or None when there are too few
    values for an interval at this confidence (4 and 4 at 95 %)."""
    n, m = len(x), len(y)
    if n == 0 or m == 0:
        return None
    k = lower_rank(n, m, confidence)
    if k is None:
        return None
    d = sorted(a - b for a in x for b in y)
    mid = len(d) // 2
    est = d[mid] if len(d) % 2 else 0.5 * (d[mid - 1] + d[mid])
    return est, d[k - 1], d[len(d) - k]
