"""A verified reference for a body in a field other than uniform gravity (the gravity gradient),
whose double-double Taylor series (taylor_dd.py) is of the uniform-gravity torque only: scipy's
DOP853 on the body-form equations of models/dynamics.py at two tolerances far apart, the
difference of the two being its error estimate, as the Taylor reference's is (reference.py).

Double precision bounds it: the estimate cannot go below the round-off of some thousand steps,
about 1e-13 over the library's gravity-gradient cases; the reference says what it reaches. Its
family is that of the scipy reference methods, so that no candidate of that family is judged
against it.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable

import numpy as np
from scipy.integrate import solve_ivp

from topdrift.integrators.extended.reference import (
    DOUBLE_FLOOR,
    ESTIMATE_FACTOR,
    Integration,
    Reference,
    ReferenceFailed,
    parting,
)
from topdrift.models.dynamics import rhs
from topdrift.models.forms import FORM_BODY

MAIN_RTOL = 1e-13
CHECK_RTOL = 1e-11
FAMILY = "reference"


def _integrate(body, y0, times, rtol: float, progress) -> Integration:
    p = body.params()
    scale = max(float(np.linalg.norm(y0[4:7])), 1e-300)
    atol = np.concatenate((np.full(4, rtol), np.full(3, rtol * scale)))
    dy = np.empty(7)
    evals = [0]

    def f(_t, y):
        evals[0] += 1
        rhs(FORM_BODY, np.ascontiguousarray(y), p, dy)
        return dy.copy()

    t0 = time.perf_counter()
    sol = solve_ivp(f, (0.0, float(times[-1])), y0, method="DOP853", t_eval=times, rtol=rtol,
                    atol=atol)  # fmt: skip
    if not sol.success or sol.y.shape[1] != times.shape[0]:
        raise ReferenceFailed(f"scipy DOP853 at rtol {rtol:g} stopped: {sol.message}")
    states = np.ascontiguousarray(sol.y.T)
    states[:, :4] /= np.linalg.norm(states[:, :4], axis=1)[:, None]
    if progress is not None:
        progress(1.0, int(sol.nfev), time.perf_counter() - t0)
    return Integration(states, np.zeros_like(states), int(sol.nfev), time.perf_counter() - t0,
                       None)  # fmt: skip


def refuses(body) -> str | None:
    if body.uniform_gravity:
        return "uniform gravity takes the extended-precision references"
    return None


def verified_reference(
    body,
    y0: np.ndarray,
    times: np.ndarray,
    progress: Callable[[str, float, int, float], None] | None = None,
) -> Reference:
    def report(which):
        if progress is None:
            return None
        return lambda f, s, w: progress(which, f, s, w)

    y0 = np.ascontiguousarray(y0, dtype=np.float64)
    times = np.ascontiguousarray(times, dtype=np.float64)
    a = _integrate(body, y0, times, MAIN_RTOL, report("reference"))
    b = _integrate(body, y0, times, CHECK_RTOL, report("check"))
    apart = parting(a, b)
    if not all(math.isfinite(v) for v in apart.values()):
        raise ReferenceFailed("the two DOP853 integrations give states that are not finite")
    return Reference(
        times=times.copy(),
        states=a.hi.copy(),
        accuracy={k: max(ESTIMATE_FACTOR * v, DOUBLE_FLOOR) for k, v in apart.items()},
        parting=apart,
        cost={
            "steps": a.steps,
            "check_steps": b.steps,
            "wall_s": a.wall_s,
            "check_wall_s": b.wall_s,
        },  # fmt: skip
        method=(
            f"scipy DOP853 at rtol {MAIN_RTOL:g}, checked against rtol "
            f"{CHECK_RTOL:g}; its steps are counted as right-hand-side evaluations"
        ),
    )
