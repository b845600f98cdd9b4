"""The period of a free rigid body's motion seen from the body (no torque: centre of mass at the
pivot, or no gravity).

With no torque, L is fixed in space and the body angular momentum m(t) runs round a closed curve,
the intersection of the sphere |m| = |L| with the energy ellipsoid sum m_i^2 / I_i = 2 E. For
principal moments I1 < I2 < I3 (sorted here) and L^2 > 2 E I2 (the curve circles axis 3) the
motion is periodic with (Landau and Lifshitz, Mechanics, sec. 37, from memory)

    T = 4 K(k) sqrt(I1 I2 I3 / ((I3 - I2) (L^2 - 2 E I1))),
    k^2 = (I2 - I1) (2 E I3 - L^2) / ((I3 - I2) (L^2 - 2 E I1)),

and for L^2 < 2 E I2 (round axis 1) the same with the indices 1 and 3 exchanged. On the separatrix
(L^2 = 2 E I2) the period is infinite. A symmetric body (two equal moments) turns m uniformly
about its odd axis: T = 2 pi / |(1/I_odd - 1/I_pair) m_odd|. Differences such as L^2 - 2 E I2 are
formed from the components directly (sums of terms m_i^2 (1 - I2 / I_i)), never as a difference
of two large numbers, so that a motion close to the separatrix keeps its period to full precision.
"""

from __future__ import annotations

import math

from .body import SYMMETRY_RTOL


def _weighted(m2: tuple[float, ...], inertia: tuple[float, ...], ref: float) -> float:
    """sum_i m_i^2 (1 - ref / I_i) = L^2 - 2 E ref, without cancellation between L^2 and 2 E."""
    return sum(mi2 * (1.0 - ref / ii) for mi2, ii in zip(m2, inertia, strict=True))


def free_body_period(inertia, m) -> float:
    """Period (s) of the body angular momentum m(t) of a torque-free body with principal moments
    `inertia` and body angular momentum `m` (same axes). math.inf on the separatrix or for a body
    at rest about an axis of symmetry that does not move it; 0.0 is never returned."""
    pairs = sorted(zip((float(v) for v in inertia), (float(v) for v in m), strict=True))
    (i1, m1), (i2, m2), (i3, m3) = pairs
    inertia_s = (i1, i2, i3)
    sq = (m1 * m1, m2 * m2, m3 * m3)
    if not any(sq):
        return math.inf
    sym12 = abs(i2 - i1) <= SYMMETRY_RTOL * i2
    sym23 = abs(i3 - i2) <= SYMMETRY_RTOL * i3
    if sym12 and sym23:
        return math.inf  # a spherical body: m never moves
    if sym12 or sym23:
        odd, pair, m_odd = (i3, i1, m3) if sym12 else (i1, i3, m1)
        rate = abs((1.0 / odd - 1.0 / pair) * m_odd)
        return 2.0 * math.pi / rate if rate > 0.0 else math.inf
    d2 = _weighted(sq, inertia_s, i2)  # L^2 - 2 E I2: its sign says which axis m circles
    if d2 == 0.0:
        return math.inf
    if d2 < 0.0:  # circles axis 1: exchange the roles of axes 1 and 3
        i1, i3 = i3, i1
        inertia_s = (i1, i2, i3)
        sq = (sq[2], sq[1], sq[0])
    lo = _weighted(sq, inertia_s, i1)  # L^2 - 2 E I1
    # 1 - k^2 = (I3 - I1) (L^2 - 2 E I2) / ((I3 - I2) (L^2 - 2 E I1)), exactly: formed this way
    # it keeps its digits next to the separatrix, where k^2 itself rounds towards 1.
    km1 = (i3 - i1) * d2 / ((i3 - i2) * lo)
    if not 0.0 < km1 <= 1.0:
        return math.inf
    # imported here: scipy.special costs 0.3 s to import, and every command line plans with this
    from scipy.special import ellipkm1

    return 4.0 * float(ellipkm1(km1)) * math.sqrt(i1 * i2 * i3 / ((i3 - i2) * lo))
