"""The lean multiprecision elliptic integrals of models/carlson.py against mpmath's own
(mpmath.elliprf, elliprj, elliprc, ellipk, ellippi, evaluated with 30 more digits), on arguments
spread over 30 decades and on the cases where a naive form loses digits: a tiny p in R_J (the
axis near a pole) and n close to 1 in Pi(n | m)."""

from __future__ import annotations

import random

import mpmath as mp
import pytest

from topdrift.models import carlson

DIGITS = 40


def spread(rng):
    """A positive argument: uniform in (0, 1) or log-uniform over 1e-30 .. 1e3."""
    return mp.mpf(rng.random() if rng.random() < 0.5 else 10 ** rng.uniform(-30, 3))


def rel_err(got, ref):
    return abs(got / ref - 1)


@pytest.fixture(scope="module")
def samples():
    rng = random.Random(20261)
    with mp.workdps(DIGITS):
        rows = []
        for k in range(120):
            x, y, z, p = (spread(rng) for _ in range(4))
            if k % 7 == 0:
                x = mp.mpf(0)
            rows.append((x, y, z, p))
        return rows


def test_rf_rj_rc_to_the_working_precision(samples):
    tol = 10 * mp.mpf(10) ** -DIGITS
    with mp.workdps(DIGITS):
        for x, y, z, p in samples:
            with mp.workdps(DIGITS + 30):
                ref = mp.elliprf(x, y, z), mp.elliprj(x, y, z, p), mp.elliprc(x, p)
            assert rel_err(carlson.rf(x, y, z), ref[0]) < tol, (x, y, z)
            assert rel_err(carlson.rj(x, y, z, p), ref[1]) < tol, (x, y, z, p)
            assert rel_err(carlson.rc(x, p), ref[2]) < tol, (x, p)


@pytest.mark.parametrize("p", ["1e-30", "1e-12", "3e-5"])
def test_rj_keeps_its_digits_for_a_small_p(p):
    """R_J(x, y, z, p) ~ p^(-1/2) as p -> 0; the 1995 form R_C(1, 1 + e_m) lost ~15 digits at
    p = 1e-30 (1 + e_m cancels), the alpha/beta form used here loses none."""
    with mp.workdps(DIGITS):
        args = (mp.mpf("0.86"), mp.mpf("0.36"), mp.mpf("0.26"), mp.mpf(p))
        with mp.workdps(DIGITS + 30):
            ref = mp.elliprj(*args)
        assert rel_err(carlson.rj(*args), ref) < 10 * mp.mpf(10) ** -DIGITS


@pytest.mark.parametrize("one_minus_n", ["0.7", "1e-6", "1e-14", "1e-22"])
@pytest.mark.parametrize("mc", ["1e-20", "0.5", "0.99999999"])
def test_complete_integrals_by_the_agm(one_minus_n, mc):
    with mp.workdps(DIGITS):
        omn, mc = mp.mpf(one_minus_n), mp.mpf(mc)
        n = 1 - omn
        with mp.workdps(DIGITS + 30):
            ref_k, ref_pi = mp.ellipk(1 - mc), mp.ellippi(1 - mp.mpf(one_minus_n), 1 - mc)
        tol = 10 * mp.mpf(10) ** -DIGITS
        assert rel_err(carlson.complete_first(mc), ref_k) < tol
        assert rel_err(carlson.complete_third(n, omn, mc), ref_pi) < tol
        # n below 0, down to the axis passing near the lower pole (n -> -inf)
        for neg in ("-0.5", "-50", "-1e6"):
            with mp.workdps(DIGITS + 30):
                ref = mp.ellippi(mp.mpf(neg), 1 - mc)
            got = carlson.complete_third(mp.mpf(neg), 1 - mp.mpf(neg), mc)
            assert rel_err(got, ref) < tol, neg
