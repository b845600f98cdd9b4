"""Angle errors without cancellation (benchmarks/run/metrics.py): from folded angles plus the turn
difference, never from differences of large unfolded angles or d + pi."""

from __future__ import annotations

import math
from fractions import Fraction

import mpmath
import numpy as np

from topdrift.benchmarks.cases.library import load_case
from topdrift.benchmarks.run.metrics import angle_difference, axis_angle, wrapped
from topdrift.models.exact import LagrangeTop


def _two_pi() -> Fraction:
    # 2 pi to 40 digits from mpmath (the reference library), as an exact rational.
    with mpmath.workdps(40):
        return Fraction(str(mpmath.nstr(2 * mpmath.pi, 40)))


def _exact(a, ka, b, kb) -> float:
    """(a + 2 pi ka) - (b + 2 pi kb) in exact rational arithmetic, rounded once."""
    return float(Fraction(a) - Fraction(b) + (ka - kb) * _two_pi())


def test_long_horizon_psi_error_is_kept_to_its_last_bits():
    # The demo wheel's exact psi after 10^6 s (6.3e7 rad, where one ulp is 7.5e-9 rad), and a
    # computed psi 3e-15 rad off it, given as folded angles with their turns.
    top = LagrangeTop.from_state(
        load_case("demo-wheel").body, "euler", load_case("demo-wheel").state(0)
    )
    ang = top.folded(np.array([1.0e6]))
    b, kb = float(ang.psi[0]), int(ang.psi_turns[0])
    assert abs(kb) > 10**6
    a, ka = b + 3e-15, kb
    if a > math.pi:  # keep the computed angle folded; it then has one turn more
        a, ka = a - 2 * math.pi, ka + 1
    truth = _exact(a, ka, b, kb)
    new = float(angle_difference(a, b, ka - kb))
    assert abs(new - truth) <= 2 * np.spacing(truth), (new, truth)
    # The old way, the difference of the unfolded angles, keeps not one digit of it: both
    # round to ulp(6.3e7) = 7.5e-9 first.
    unfolded = (a + 2 * math.pi * ka) - (b + 2 * math.pi * kb)
    assert abs(unfolded - truth) > 1e-15


def test_a_difference_across_the_fold_is_exact():
    # a just above -pi with one turn more, b just below pi: the true difference is a few ulps
    # of pi; the turn comes off in two parts (fl(2 pi) and its rounding error).
    rng = np.random.default_rng(3)
    worst_wrapped = 0.0
    for _ in range(200):
        da, db = rng.integers(1, 1000, size=2) * 2.0**-51
        a = -math.pi + da
        b = math.pi - db
        truth = _exact(a, 5, b, 4)
        new = float(angle_difference(a, b, 1))
        assert abs(new - truth) <= 2 * np.spacing(abs(truth)), (new, truth)
        # Without turns the nearest whole turns are taken: the same answer.
        assert float(angle_difference(a, b)) == new
        worst_wrapped = max(worst_wrapped, abs(float(wrapped(np.array([a - b]))[0]) - truth))
    # The old way, wrapping through d + pi, rounds the error to a multiple of ulp(pi) / 2.
    assert worst_wrapped >= 1e-16


def test_axis_angle_is_accurate_for_tiny_angles():
    # Two unit vectors 1e-12 rad apart: arccos of their dot product (1 - 5e-25, which rounds to
    # 1) says 0 or 1.5e-8; atan2 of the cross and dot products (common practice) says 1e-12.
    t = 1e-12
    a = np.array([[1.0, 0.0, 0.0]])
    b = np.array([[math.cos(t), math.sin(t), 0.0]])
    assert abs(axis_angle(a, b)[0] - t) <= 1e-27
    assert abs(np.arccos(np.clip(np.sum(a * b), -1, 1)) - t) > 1e-13
