"""The Euler form's cyclic angles folded to (-pi, pi] with whole turns counted beside the state
(models/turns.py): exact folding, p_phi and p_psi still bit-exact, and the same trajectory as
the unfolded variant to within that variant's own rounding."""

from __future__ import annotations

import math
from fractions import Fraction

import mpmath
import numpy as np
import pytest
from demo_bodies import FAST_START, FAST_TOP

from topdrift.integrators import get
from topdrift.models import FORM_EULER, euler_state
from topdrift.models.turns import HALF_TURN, TURN, fold_euler, true_angle

P = FAST_TOP.params()
# A fast top of tests/demo_bodies.py: psi turns about 24 times a second, phi about 0.3 times.
Y0 = euler_state(FAST_TOP, *FAST_START)
H = 1e-4
# One method of each family that folds, and a compensated and an order-8 one.
FOLDING = [
    "leapfrog",
    "leapfrog-kahan",
    "leapfrog-kl8",
    "rk4",
    "rk4-kahan",
    "gauss4",
    "gauss6-kahan",
]


def _run(name: str, steps: int, unfolded: bool):
    st = get(name).start(FORM_EULER, P, 0.0, Y0, {"step": H})
    if unfolded:
        st.keep_angles_unfolded()
    st.advance_to(steps * H)
    return st


def test_a_fold_is_exact():
    # Sterbenz's lemma (common practice): a - T is exact for T/2 <= a <= 2T, so the folded angle
    # plus the counted turns is the angle itself, in exact rational arithmetic.
    rng = np.random.default_rng(7)
    for a in [*rng.uniform(HALF_TURN, HALF_TURN + 0.5, 200), *-rng.uniform(HALF_TURN, 4.0, 200)]:
        y = np.array([a, 0.0, -a, 0.0, 0.0, 0.0])
        turns = np.zeros(2, dtype=np.int64)
        fold_euler(y, turns)
        assert -HALF_TURN < y[0] <= HALF_TURN and -HALF_TURN < y[2] <= HALF_TURN
        assert Fraction(y[0]) + Fraction(TURN) * int(turns[0]) == Fraction(float(a))
        assert Fraction(y[2]) + Fraction(TURN) * int(turns[1]) == Fraction(float(-a))


@pytest.mark.parametrize("a, k", [(3.0, 10**9), (-2.5, -(10**7)), (1e-3, 123456), (6.0e7, 0)])
def test_true_angle_against_mpmath(a, k):
    # The angle a + fl(2 pi) k folded by 2 pi itself, against mpmath at 40 digits (the reference
    # library): within one rounding of the folded angle, turns exact.
    angle, turns = true_angle(a, float(k))
    with mpmath.workdps(40):
        v = mpmath.mpf(a) + mpmath.mpf(TURN) * k
        n = mpmath.floor(v / (2 * mpmath.pi) + mpmath.mpf("0.5"))
        ref = v - 2 * mpmath.pi * n
        assert turns == int(n)
        assert abs(float(ref - angle)) <= 1.0 * np.spacing(math.pi)


@pytest.mark.parametrize("name", FOLDING)
def test_folded_angles_and_bit_exact_momenta(name):
    st = _run(name, 20_000, unfolded=False)  # 2 s: psi passes about 48 turns
    assert abs(st.y[0]) <= math.pi and abs(st.y[2]) <= math.pi
    assert st.turns[1] >= 40
    # p_phi and p_psi are never written by the kick or the stage updates: the same bits
    # (common practice for cyclic coordinates; the methods' `keeps` claims, integrators/base.py).
    assert st.y[3] == Y0[3] and st.y[5] == Y0[5]


@pytest.mark.parametrize("name", FOLDING)
def test_same_trajectory_as_unfolded_within_its_rounding(name):
    # At a short horizon the two variants differ only by rounding: the unfolded one rounds psi
    # to ulp(psi) at every step, the folded one to ulp(pi). So the states agree to a few ulps of
    # the unfolded run's largest angle per step taken, the bound of its own rounding.
    steps = 2_000
    a = _run(name, steps, unfolded=False)
    b = _run(name, steps, unfolded=True)
    assert b.turns.shape == (0,) and abs(b.y[2]) > 4 * math.pi  # really unfolded
    bound = 4.0 * steps * np.spacing(np.abs(b.y).max())
    diff = np.abs(a.unfolded_y() - b.y)
    assert diff.max() <= bound, (diff, bound)
