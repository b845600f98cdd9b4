"""The coefficient tables satisfy their order conditions.

Two independent checks: the closed-form conditions of symmetric compositions of a symmetric
second-order method (sum gamma = 1 and sum gamma^(2k+1) = 0 for every odd power below the
order: the coefficients of the generators h^3 X3, h^5 X5, ... of the composed method; Hairer,
Lubich and Wanner, Geometric Numerical Integration, Sec. V.3.2) [from memory], and a direct test of
all order conditions at once: the table run on exp(tA), exp(tB) of random matrices in 40-digit
arithmetic (mpmath) has local error C h^(p+1) against exp(h(A + B)). Random matrices satisfy no Lie
identities of low degree, so a wrong digit in any coefficient leaves a lower power of h.
"""

import mpmath
import numpy as np
import pytest

from topdrift.integrators.splitting.compositions import TABLES, triple_jump

mpmath.mp.dps = 40


@pytest.mark.parametrize("table", TABLES, ids=lambda t: t.key or "strang")
def test_weights_sum_to_one_and_are_symmetric(table):
    kick, drift = table.sequence()
    assert abs(kick.sum() - 1.0) < 2e-15
    assert abs(drift.sum() - 1.0) < 2e-15
    # Symmetric tables give a symmetric (time-reversible) step of even order.
    assert np.array_equal(kick, kick[::-1])
    assert np.array_equal(drift, drift[::-1])
    assert len(kick) == len(drift) + 1


@pytest.mark.parametrize(
    "table", [t for t in TABLES if t.kind == "composition"], ids=lambda t: t.key or "strang"
)
def test_odd_power_sums_vanish(table):
    g = [mpmath.mpf(x) for x in table.coefficients]
    for k in range(3, table.order, 2):
        # exact in the published digits; the doubles carry ~1e-16 relative error
        scale = sum(abs(x) ** k for x in g)
        assert abs(sum(x**k for x in g)) < 1e-14 * scale, k
    if table.order < 8:
        # the next odd power is not zero: the order is not higher than claimed
        k = table.order + 1
        assert abs(sum(x**k for x in g)) > 1e-6


def test_triple_jump_closed_form():
    # gamma_1 = 1/(2 - 2^(1/3)) = 1.3512071919596578..., gamma_0 = 1 - 2 gamma_1 (from memory,
    # Yoshida 1990 eq. (5.7) [from memory]); checked here against the closed form in 40 digits.
    g = triple_jump(4)
    c = mpmath.cbrt(2)
    assert abs(g[0] - float(1 / (2 - c))) < 1e-16
    assert abs(g[1] - float(-c / (2 - c))) < 1e-15
    assert len(triple_jump(6)) == 9 and len(triple_jump(8)) == 27


def _random_symmetric(n, seed):
    rng = np.random.default_rng(seed)
    a = rng.standard_normal((n, n))
    a = (a + a.T) / 2.0
    a /= np.linalg.norm(a, 2)
    return mpmath.matrix(a.tolist())


class _Exp:
    """exp(tA) for a real symmetric A via its eigendecomposition, in mpmath."""

    def __init__(self, a):
        self.e, self.q = mpmath.eigsy(a)

    def __call__(self, t):
        n = self.q.rows
        d = mpmath.diag([mpmath.exp(t * self.e[i]) for i in range(n)])
        return self.q * d * self.q.T


A = _random_symmetric(5, 1)
B = _random_symmetric(5, 2)
# A x B: nothing commutes, and the pair generates a free enough algebra for these degrees.
EXP_A, EXP_B = _Exp(A), _Exp(B)


def _local_error(kick, drift, h):
    m = EXP_B(kick[0] * h)
    for a, b in zip(drift, kick[1:], strict=True):
        m = EXP_B(b * h) * EXP_A(a * h) * m
    # against the flow of the consistent field with the table's own sums (the sums are checked
    # above; here the higher conditions are tested without the round-off of the sums)
    sa = mpmath.fsum(drift)
    sb = mpmath.fsum(kick)
    exact = _Exp(sa * A + sb * B)(h)
    return mpmath.mnorm(m - exact, 1)


@pytest.mark.parametrize("table", TABLES, ids=lambda t: t.key or "strang")
def test_local_error_order_on_random_matrices(table):
    kick_f, drift_f = table.sequence()
    kick = [mpmath.mpf(float(x)) for x in kick_f]
    drift = [mpmath.mpf(float(x)) for x in drift_f]
    hs = [mpmath.mpf(1) / 10 / 2**k for k in range(4)]  # 0.1 .. 0.0125
    errs = [_local_error(kick, drift, h) for h in hs]
    x = np.log([float(h) for h in hs])
    y = np.log([float(e) for e in errs])
    slope = np.polyfit(x, y, 1)[0]
    # local error O(h^(p+1)) for a method of order p
    assert abs(slope - (table.order + 1)) < 0.3, (slope, [float(e) for e in errs])
