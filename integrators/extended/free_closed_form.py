"""A verified reference for a torque-free body: its exact closed-form motion
(models/free_exact_mp.py) evaluated directly at every sample time, at two working precisions,
the difference of the two being its error estimate.

No stepping: each time is evaluated from t = 0, so nothing accumulates from sample to sample;
what can still cost digits is the conditioning of the formulas (near the separatrix, a long
time times the rate of the phase). Evaluated at MAIN_DPS and again at CHECK_DPS, the largest
parting over the samples bounds the error of the less precise one, and so of the more precise
one handed out (an estimate by raising the precision, common practice); it is taken twice over
as for the Taylor reference (reference.ESTIMATE_FACTOR), and never below DOUBLE_FLOOR, since the
states are handed out rounded to double.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable

import mpmath as mp
import numpy as np

from topdrift.integrators.extended.reference import (
    BLOCKS,
    DOUBLE_FLOOR,
    ESTIMATE_FACTOR,
    Integration,
    Reference,
    ReferenceFailed,
    parting,
)
from topdrift.models.free_exact_mp import FreeMotion, torque_free

MAIN_DPS = 45
CHECK_DPS = 32


def refuses(body) -> str | None:
    """Why the closed form is not this body's motion (None when it is)."""
    if not body.uniform_gravity:
        return f"the {body.field.kind} field exerts a torque, so the free flow is not its motion"
    if body.has_rotor:
        return "a rotor turns the free flow (a gyrostat), which this closed form is not"
    if torque_free(body):
        return None
    return (
        "a gravity torque acts (centre of mass off the pivot), so the free flow is not its motion"
    )


def evaluate(
    body,
    y0: np.ndarray,
    times: np.ndarray,
    dps: int,
    progress: Callable[[float, int, float], None] | None = None,
) -> Integration:
    """The closed-form states at the times at `dps` digits, split into double words (hi, lo):
    hi the correctly rounded double, lo the rounded remainder. progress(fraction, times done,
    seconds) between blocks of times."""
    times = np.ascontiguousarray(times, dtype=np.float64)
    if times.ndim != 1 or times.shape[0] == 0 or times[0] < 0.0:
        raise ValueError("times must be a non-empty array of times t >= 0")
    n = times.shape[0]
    hi, lo = np.empty((n, 7)), np.empty((n, 7))
    edges = set(np.linspace(0, n, BLOCKS + 1).astype(np.int64)[1:].tolist())
    t0 = time.perf_counter()
    try:
        motion = FreeMotion(body, y0, dps)
        with mp.workdps(dps):
            for i in range(n):
                row = motion.state(float(times[i]))
                for j, v in enumerate(row):
                    h = float(v)
                    hi[i, j] = h
                    lo[i, j] = float(v - h)
                if progress is not None and i + 1 in edges:
                    progress((i + 1) / n, i + 1, time.perf_counter() - t0)
    except (ValueError, ZeroDivisionError, OverflowError) as exc:
        raise ReferenceFailed(f"the closed form could not be evaluated: {exc}") from None
    if not (np.all(np.isfinite(hi)) and np.all(np.isfinite(lo))):
        raise ReferenceFailed(f"the closed form gave states that are not finite at {dps} digits")
    return Integration(hi, lo, 0, time.perf_counter() - t0, None)


def verified_reference(
    body,
    y0: np.ndarray,
    times: np.ndarray,
    progress: Callable[[str, float, int, float], None] | None = None,
    main_dps: int = MAIN_DPS,
    check_dps: int = CHECK_DPS,
) -> Reference:
    """The closed form at `main_dps` digits at the times, and its error estimate from
    `check_dps`. progress(which, fraction, times done, seconds), which = "reference" or
    "check"."""

    def report(which):
        if progress is None:
            return None
        return lambda f, k, w: progress(which, f, k, w)

    a = evaluate(body, y0, times, main_dps, report("reference"))
    b = evaluate(body, y0, times, check_dps, report("check"))
    apart = parting(a, b)
    if not all(math.isfinite(v) for v in apart.values()):
        raise ReferenceFailed(
            "the two evaluations of the closed form give states that are not finite"
        )
    return Reference(
        times=np.asarray(times, dtype=np.float64).copy(),
        states=a.hi.copy(),  # correctly rounded from main_dps digits
        accuracy={k: max(ESTIMATE_FACTOR * v, DOUBLE_FLOOR) for k, v in apart.items()},
        parting=apart,
        cost={"steps": 0, "check_steps": 0, "wall_s": a.wall_s, "check_wall_s": b.wall_s},
        method=(
            f"exact free flow in closed form (Jacobi elliptic functions and a third-kind "
            f"integral) at {main_dps} digits, checked against {check_dps} digits"
        ),
    )
