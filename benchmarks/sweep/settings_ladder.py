"""Settings ladders: the steps or tolerances a sweep tries when it is told "auto".

A step ladder starts at a fraction of the case's fastest time scale and goes down in log-spaced
rungs, spanning more decades for low-order methods (error ~ h^p, so p decades of error need one
decade of step); rungs that would take more than `max_steps` steps over the horizon are dropped.
A tolerance ladder runs from rtol 1e-3 to 1e-12 whatever the method.
"""

from __future__ import annotations

import numpy as np

from topdrift.benchmarks.cases.time_scales import fastest_period

# The error span (decades) a step ladder aims to cover, from a coarse start.
ERROR_DECADES = 8.0
COARSE_FRACTION = 1.0 / 8.0  # first rung: an eighth of the fastest period
RTOL_RANGE = (1e-3, 1e-12)


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
