"""Double-double arithmetic (models/double_double.py) against exact references: Python's
fractions.Fraction (exact rational arithmetic) for the error-free transformations, and mpmath
at 60 digits for folding and for the remainder of a t + b modulo c."""

from __future__ import annotations

import math
import random
from fractions import Fraction

import mpmath as mp
import numpy as np
import pytest

from topdrift.models import double_double as dd


def random_double(rng):
    return rng.choice((-1.0, 1.0)) * rng.random() * 2.0 ** rng.randint(-60, 60)


def test_two_sum_and_two_prod_are_exact():
    rng = random.Random(7)
    for _ in range(2000):
        a, b = random_double(rng), random_double(rng)
        s, e = dd.two_sum(a, b)
        assert s == a + b and Fraction(s) + Fraction(e) == Fraction(a) + Fraction(b)
        p, e = dd.two_prod(a, b)
        assert p == a * b and Fraction(p) + Fraction(e) == Fraction(a) * Fraction(b)


def test_add_and_mul_to_106_bits():
    rng = random.Random(11)
    for _ in range(500):
        ah, bh = random_double(rng), random_double(rng)
        al, bl = ah * 2.0**-60 * rng.random(), bh * 2.0**-60 * rng.random()
        a, b = Fraction(ah) + Fraction(al), Fraction(bh) + Fraction(bl)
        for got, exact in ((dd.add(ah, al, bh, bl), a + b), (dd.mul(ah, al, bh, bl), a * b)):
            err = abs(Fraction(got[0]) + Fraction(got[1]) - exact)
            assert err <= abs(exact) * Fraction(2) ** -104 + Fraction(2) ** -1000


def test_fold_range_and_turns():
    """Folded to (-pi, pi] with the exact integer turns; a value a hair above pi (the double
    pi is below the real one) goes to -pi. Reference: mpmath at 60 digits."""
    pi0, pi1 = dd.PI
    hi = np.array([pi0, pi0, -pi0, 3 * pi0, 1e15, -7.5e12, 0.0, 1e-300])
    lo = np.array([pi1 * 0.5, pi1 * 1.5, -pi1 * 0.5, 0.0, 0.1, -1e-4, 0.0, 0.0])
    angle, turns = dd.fold(hi, lo)
    assert turns.dtype == np.int64
    with mp.workdps(60):
        for k in range(hi.shape[0]):
            v = mp.mpf(float(hi[k])) + mp.mpf(float(lo[k]))
            n = int(mp.floor(v / (2 * mp.pi) + mp.mpf(1) / 2))
            r = v - 2 * mp.pi * n
            if r <= -mp.pi:
                r, n = r + 2 * mp.pi, n - 1
            assert int(turns[k]) == n, k
            assert abs(float(mp.mpf(float(angle[k])) - r)) <= 0.5 * np.spacing(math.pi), k
    assert angle[1] < 0.0  # just above pi: -pi and one more turn
    # unfolded again: the folded angle's own rounding plus one rounding of the sum
    back = dd.unfold(angle, turns)
    with mp.workdps(60):
        for k in range(hi.shape[0]):
            v = mp.mpf(float(hi[k])) + mp.mpf(float(lo[k]))
            err = abs(float(mp.mpf(float(back[k])) - v))
            assert err <= 0.5 * np.spacing(abs(float(v))) + 0.5 * np.spacing(math.pi), k


@pytest.mark.parametrize("t", [0.0, 0.3, 1234.5678, 7.77e8, 1e12, 9.9e14])
def test_remainder_of_a_linear_phase(t):
    """a t + b = c j + r with a, c triple-doubles and b a double-double: r to 1e-30, j exact
    (reference: mpmath at 60 digits on the same words)."""
    with mp.workdps(60):
        a_mp, c_mp, b_mp = mp.sqrt(mp.mpf(1234.5)), 2 * mp.ellipk(mp.mpf("0.3")), mp.mpf(1) / 3

        def words(x, n):
            out = []
            for _ in range(n):
                out.append(float(x - sum(mp.mpf(w) for w in out)))
            return tuple(out)

        a, b, c = words(a_mp, 3), words(b_mp, 2), words(c_mp, 3)
        j1, j2, rh, rl = dd.remainder(a, b, c, np.array([t]), np.array([0.0]))
        value = sum(mp.mpf(w) for w in a) * mp.mpf(t) + sum(mp.mpf(w) for w in b)
        period = sum(mp.mpf(w) for w in c)
        j = int(mp.nint(value / period))
        assert int(j1[0]) + int(j2[0]) == j
        r = value - j * period
        assert abs(mp.mpf(float(rh[0])) + mp.mpf(float(rl[0])) - r) < mp.mpf(10) ** -30
