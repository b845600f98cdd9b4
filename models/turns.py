"""Whole turns of the Euler form's cyclic angles, kept as integers beside the state.

phi and psi grow without bound (a fast top's psi passes 6e7 rad after 10^6 s, where one ulp is
7e-9 rad), yet the equations of motion depend on neither. So a kernel may take 2 pi off either
at any step without changing the motion, and keep the count of what it took off. Done every
time an angle leaves (-pi, pi], the state rounds to ulp(pi) per step instead of ulp(psi).

The turn a kernel takes off is T = fl(2 pi), a double, not 2 pi itself: an angle just past
fl(pi) minus T is exact (Sterbenz's lemma, common practice: a - b is exact for b/2 <= a <= 2b),
so folding adds no rounding at all. The angle a kernel carries is then y + T k for its count k.
`true_angle` turns that into the angle folded by 2 pi itself with its count of whole 2 pi turns,
in double-double (2 pi = T + T_lo, so y + T k = (y - T_lo k) + 2 pi k), which is what samples,
run files and errors use.

A kernel folds when its `turns` array has two entries (phi's count, psi's); an empty array keeps
the angles unfolded, the variant that shows what folding buys (Stepper.keep_angles_unfolded).
"""

from __future__ import annotations

import math

from numba import njit

from .double_double import TWO_PI, add, reduce_turns, two_prod

TURN = TWO_PI[0]  # fl(2 pi), what a kernel takes off; exactly twice fl(pi)
TURN_LO = TWO_PI[1]  # 2 pi - fl(2 pi), to the next 53 bits
HALF_TURN = 0.5 * TURN  # fl(pi)
N_TURNS = 2  # phi, psi
T_PHI = 0
T_PSI = 1
# Where the counted angles sit in an Euler-form state (models/forms.py: E_PHI, E_PSI).
_ANGLE_AT = (0, 2)


@njit(cache=True, inline="always")
def fold_one(y, i, turns, t):
    """y[i] back into (-fl(pi), fl(pi)] by whole turns T, counted in turns[t]. Exact when the
    angle moved less than a turn since it was last folded (the kernels fold every step); a
    state that arrives unfolded (a start or a resumed version-1 state far from zero) is folded
    once with one rounding of ulp(pi)."""
    a = y[i]
    if a > HALF_TURN or a <= -HALF_TURN:
        k = math.floor(a / TURN + 0.5)
        ph, pl = two_prod(k, TURN)
        r = (a - ph) - pl
        if r > HALF_TURN:
            r -= TURN
            k += 1.0
        elif r <= -HALF_TURN:
            r += TURN
            k -= 1.0
        y[i] = r
        turns[t] += int(k)


@njit(cache=True, inline="always")
def fold_euler(y, turns):
    """Fold phi (y[0]) and psi (y[2]) of an Euler-form state; nothing when turns is empty."""
    if turns.shape[0] == N_TURNS:
        fold_one(y, 0, turns, T_PHI)
        fold_one(y, 2, turns, T_PSI)


# Called, not inlined: it runs once per angle and sample, never in a step loop, and each inlined
# copy of its double-double arithmetic is typed and optimised again (record_euler has two).
@njit(cache=True)
def true_angle(a, k):
    """(angle, turns): a + T k as an angle folded by 2 pi into [-pi, pi] (rounded once) and its
    whole 2 pi turns, an integer-valued double; a may be any size (an unfolded angle, k = 0)."""
    ph, pl = two_prod(-k, TURN_LO)
    hi, lo = add(a, 0.0, ph, pl)
    vh, vl, j = reduce_turns(hi, lo)
    return vh + vl, k + j
