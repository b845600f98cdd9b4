"""How fast a case's start turns: the rates that size a step ladder, the first step a
recommendation tries, and the step budget of an adaptive run.

Two rates are at play: the body's angular velocity w = I^-1 m (rad/s) and the pendulum rate
sqrt(M g |chi| / I_min) of the gravity torque. An explicit method following a rotation or
oscillation at rate w needs h w below a small constant (its stability interval on the imaginary
axis, below 2 pi for every method here: common practice), and any method needs about one step
per turn to resolve it. The ladder takes the largest body axis component of w (the documented
rule of "auto" ladders, README), the budget the whole |w|: the two differ by at most sqrt(3),
and each fixes numbers that users already have (the steps of auto ladders, hence run ids).
"""

from __future__ import annotations

import math

import numpy as np

from topdrift.models.body import P_INV1, P_INV2, P_INV3, P_MGX, P_MGY, P_MGZ


def body_rates(case) -> np.ndarray:
    """|w_i| about each body axis at the start, rad/s."""
    p = case.body.params()
    y = case.body_state()
    return np.abs(y[4:7] * p[[P_INV1, P_INV2, P_INV3]])


def gravity_rate(case) -> float:
    """The small-oscillation rate of the gravity torque, sqrt(M g |chi| / I_min), rad/s."""
    p = case.body.params()
    mg_chi = math.sqrt(p[P_MGX] ** 2 + p[P_MGY] ** 2 + p[P_MGZ] ** 2)
    return math.sqrt(mg_chi * max(p[P_INV1], p[P_INV2], p[P_INV3]))


def fastest_rate(case) -> float:
    """The fastest rate of the start for a step budget: |w| or the pendulum rate, rad/s."""
    return max(float(np.sqrt(np.sum(body_rates(case) ** 2))), gravity_rate(case))


def fastest_period(case) -> float:
    """2 pi over the fastest rate of the start for a step ladder: the largest body axis rate or
    the pendulum rate; the horizon for a body at rest (any step will do)."""
    rate = max(float(np.max(body_rates(case))), gravity_rate(case))
    if not rate > 0.0:
        return case.horizon
    return 2.0 * math.pi / rate
