"""Perturbed starts of a case: the members of an ensemble run and of the round-off study.

Member 0 is the case's own start; the others add independent N(0, spread^2) rad to each of its
three angles, drawn from a seeded generator, so that the same seed gives the same bits.
"""

from __future__ import annotations

import numpy as np

from topdrift.models import body_state, euler_state


def perturbed_starts(case, form: str, starts: int, spread: float, seed: int) -> np.ndarray:
    """Member 0 is the case's own start; the others add N(0, spread^2) rad to each angle."""
    rng = np.random.default_rng(seed)
    s = case.start
    make = euler_state if form == "euler" else body_state
    rows = []
    for j in range(starts):
        d = np.zeros(3) if j == 0 else spread * rng.standard_normal(3)
        rows.append(
            make(
                case.body,
                s.phi + d[0],
                s.theta + d[1],
                s.psi + d[2],
                s.phi_rate,
                s.theta_rate,
                s.psi_rate,
            )
        )
    return np.array(rows)
