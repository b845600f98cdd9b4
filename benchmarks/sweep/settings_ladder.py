"""Settings ladders: the steps or tolerances a sweep tries when it is told "auto".

A step ladder starts at a fraction of the case's fastest time scale and goes down in log-spaced
rungs, spanning more decades for low-order methods (error ~ h^p, so p decades of error need one
decade of step); rungs that would take more than `max_steps` steps over the horizon are dropped.
A tolerance ladder runs from rtol 1e-3 to 1e-12 whatever the method.
"""

from __future__ import annotations

import math

import numpy as np

from topdrift.models.body import P_INV1, P_INV2, P_INV3, P_MGX, P_MGY, P_MGZ

# The error span (decades) a step ladder aims to cover, from a coarse start.
ERROR_DECADES = 8.0
COARSE_FRACTION = 1.0 / 8.0  # first rung: an eighth of the fastest period
RTOL_RANGE = (1e-3, 1e-12)


def fastest_period(case) -> float:
    """2 pi over the fastest rate of the start: the largest body angular velocity, or the small-
    oscillation rate of gravity sqrt(M g |chi| / I_min)."""
    p = case.body.params()
    y = case.body_state()
    w = np.abs(y[4:7] * p[[P_INV1, P_INV2, P_INV3]])
    mg_chi = math.sqrt(p[P_MGX] ** 2 + p[P_MGY] ** 2 + p[P_MGZ] ** 2)
    w_grav = math.sqrt(mg_chi * max(p[P_INV1], p[P_INV2], p[P_INV3]))
    rate = max(float(np.max(w)), w_grav)
    if not rate > 0.0:
        return case.horizon  # a body at rest: any step will do
    return 2.0 * math.pi / rate


def step_ladder(case, order: int, rungs: int, horizon: float, max_steps: float) -> list[float]:
    h0 = COARSE_FRACTION * fastest_period(case)
    span = ERROR_DECADES / max(order, 1)  # decades of step
    if rungs == 1:
        hs = [h0]
    else:
        hs = [h0 * 10.0 ** (-span * k / (rungs - 1)) for k in range(rungs)]
    return [float(f"{h:.3g}") for h in hs if horizon / h <= max_steps]


def rtol_ladder(rungs: int) -> list[float]:
    hi, lo = RTOL_RANGE
    if rungs == 1:
        return [hi]
    return [float(f"{r:.3g}") for r in np.geomspace(hi, lo, rungs)]
