"""A verified reference: the body-form solution at given times from two Taylor integrations in
double-double arithmetic of different order and step sequence, the difference of the two being
its error estimate.

The two integrations share only the equations; their truncation errors and their roundings
differ, so where either has lost accuracy (a step rule too bold, round-off amplified by an
unstable motion) they part, and the largest parting over the samples is what the reference
claims. The reference returned is the first (the more accurate one: higher order, smaller
local tolerance); the estimate is the distance to the second, so it is an upper estimate of
the first's error as long as the second is no better than the first (the usual argument for
comparing two discretisations, common practice). Below DOUBLE_FLOOR the estimate says nothing:
the states are handed out rounded to double.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from topdrift.integrators.extended.taylor_dd import (
    TS_MAX_STEPS,
    TS_OK,
    advance_block,
    dd_parameters,
)
from topdrift.models.quaternion import figure_axis

# A state rounded to double carries half an ulp of each unit-quaternion component; the angle of
# an axis or an attitude built from it is good to a few of them (common practice).
DOUBLE_FLOOR = 2.2e-16
BLOCKS = 40  # progress is reported between blocks of sample times
MAX_STEPS_PER_BLOCK = 50_000_000


@dataclass(frozen=True)
class TaylorSettings:
    order: int  # terms of the series per step
    tol: float  # local truncation target per step (relative: |q| ~ 1, momentum over |m|)
    safety: float  # factor on the step of the Jorba-Zou rule

    def as_dict(self) -> dict:
        return {"order": self.order, "tol": repr(self.tol), "safety": repr(self.safety)}


# The reference and its check. The check has a lower order and a bolder step, so its error is
# no smaller than the reference's; the difference is the estimate.
MAIN = TaylorSettings(order=32, tol=1e-32, safety=0.5)
CHECK = TaylorSettings(order=26, tol=1e-31, safety=0.7)


class ReferenceFailed(RuntimeError):
    """The integration could not be carried over the times (a step that is not finite, or more
    steps than any case needs)."""


@dataclass
class Integration:
    hi: np.ndarray  # (n, 7) body-form states, leading words
    lo: np.ndarray  # (n, 7) trailing words
    steps: int
    wall_s: float
    settings: TaylorSettings


def integrate(
    body,
    y0: np.ndarray,
    times: np.ndarray,
    settings: TaylorSettings,
    progress: Callable[[float, int, float], None] | None = None,
) -> Integration:
    """The body-form states of `body` from the double start y0 at `times` (ascending, from 0),
    by the double-double Taylor series. progress(fraction, steps, seconds) between blocks."""
    times = np.ascontiguousarray(times, dtype=np.float64)
    if times.ndim != 1 or times.shape[0] == 0 or times[0] < 0.0 or np.any(np.diff(times) < 0):
        raise ValueError("times must be a non-empty ascending array from t >= 0")
    y0 = np.ascontiguousarray(y0, dtype=np.float64)
    if y0.shape != (7,):
        raise ValueError(f"a body-form state has 7 components, got shape {y0.shape}")
    n = settings.order
    par = dd_parameters(body)
    yh, yl = y0.copy(), np.zeros(7)
    tt = np.zeros(2)
    ch, cl = np.zeros((7, n + 1)), np.zeros((7, n + 1))
    wh, wl = np.zeros((3, n + 1)), np.zeros((3, n + 1))
    gh, gl = np.zeros((3, n + 1)), np.zeros((3, n + 1))
    sh, sl = np.zeros((1, 7)), np.zeros((1, 7))
    outh, outl = np.empty((times.shape[0], 7)), np.empty((times.shape[0], 7))
    counters = np.zeros(1, dtype=np.int64)
    edges = np.unique(np.linspace(0, times.shape[0], BLOCKS + 1).astype(np.int64))
    t0 = time.perf_counter()
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        code = advance_block(
            yh, yl, tt, par, times, int(a), int(b), n, float(settings.tol),
            float(settings.safety), MAX_STEPS_PER_BLOCK, ch, cl, wh, wl, gh, gl, sh, sl,
            outh, outl, counters,
        )  # fmt: skip
        if code != TS_OK:
            why = "too many steps" if code == TS_MAX_STEPS else "a step that is not finite"
            raise ReferenceFailed(
                f"the Taylor reference stopped at t = {tt[0]:.6g} s: {why} (order {n})"
            )
        if progress is not None:
            progress(b / times.shape[0], int(counters[0]), time.perf_counter() - t0)
    return Integration(outh, outl, int(counters[0]), time.perf_counter() - t0, settings)


def axes_of(q: np.ndarray) -> np.ndarray:
    """Figure axes (n, 3) of quaternion rows (n, >= 4)."""
    return np.array([figure_axis(*row[:4]) for row in q])


def axis_angles(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Angles between rows of unit vectors, atan2(|a x b|, a . b) (no cancellation near 0)."""
    return np.arctan2(np.linalg.norm(np.cross(a, b), axis=1), np.einsum("ij,ij->i", a, b))


def attitude_angles(qa: np.ndarray, qb: np.ndarray) -> np.ndarray:
    """Rotation angles of conj(qa) qb for rows of unit quaternions, 2 atan2(|vector|, |scalar|)."""
    a0, av = qa[:, 0], qa[:, 1:4]
    b0, bv = qb[:, 0], qb[:, 1:4]
    w = a0 * b0 + np.einsum("ij,ij->i", av, bv)
    v = a0[:, None] * bv - b0[:, None] * av - np.cross(av, bv)
    return 2.0 * np.arctan2(np.linalg.norm(v, axis=1), np.abs(w))


@dataclass
class Reference:
    """States at the times (rounded to double), with the estimated accuracy of each measure."""

    times: np.ndarray
    states: np.ndarray  # (n, 7)
    accuracy: dict  # axis, attitude (rad), momentum (relative to |m|), all >= DOUBLE_FLOOR
    parting: dict  # the largest differences between the two integrations, same keys
    cost: dict = field(default_factory=dict)  # steps and seconds of each integration
    method: str = ""

    def axes(self) -> np.ndarray:
        return axes_of(self.states)


def parting(a: Integration, b: Integration) -> dict:
    """The largest axis angle, attitude angle and relative momentum difference of two
    integrations, resolved below one ulp: the state differences are taken word by word
    ((hi_a - hi_b) + (lo_a - lo_b), the first exact for states this close) and carried to the
    axis and the attitude to first order, which is exact to the square of angles of 1e-12."""
    d = (a.hi - b.hi) + (a.lo - b.lo)
    q, dq = a.hi[:, :4], d[:, :4]
    q0, q1, q2, q3 = q.T
    d0, d1, d2, d3 = dq.T
    # the figure axis R e3 = (2 (q1 q3 + q0 q2), 2 (q2 q3 - q0 q1), q0^2 - q1^2 - q2^2 + q3^2)
    da = np.column_stack(
        (
            2.0 * (d1 * q3 + q1 * d3 + d0 * q2 + q0 * d2),
            2.0 * (d2 * q3 + q2 * d3 - d0 * q1 - q0 * d1),
            2.0 * (q0 * d0 - q1 * d1 - q2 * d2 + q3 * d3),
        )
    )
    # the rotation angle of conj(qa) qb is twice the norm of its vector part, to first order
    v = np.column_stack(
        (
            q0 * d1 - q1 * d0 - (q2 * d3 - q3 * d2),
            q0 * d2 - q2 * d0 - (q3 * d1 - q1 * d3),
            q0 * d3 - q3 * d0 - (q1 * d2 - q2 * d1),
        )
    )
    m = np.linalg.norm(a.hi[:, 4:7], axis=1)
    mom = np.linalg.norm(d[:, 4:7], axis=1) / np.maximum(m, 1e-300)
    out = {
        "axis": float(np.max(np.linalg.norm(da, axis=1))),
        "attitude": float(np.max(2.0 * np.linalg.norm(v, axis=1))),
        "momentum": float(np.max(mom)),
    }
    big = max(out["axis"], out["attitude"])
    if big > 1e-6:  # far from first order: the angles themselves
        da_full = a.hi + a.lo
        db_full = b.hi + b.lo
        out["axis"] = float(np.max(axis_angles(axes_of(da_full), axes_of(db_full))))
        out["attitude"] = float(np.max(attitude_angles(da_full[:, :4], db_full[:, :4])))
    return out


# Twice the largest parting: two errors of like size can partly cancel in their difference.
ESTIMATE_FACTOR = 2.0


def verified_reference(
    body,
    y0: np.ndarray,
    times: np.ndarray,
    progress: Callable[[str, float, int, float], None] | None = None,
    main: TaylorSettings = MAIN,
    check: TaylorSettings = CHECK,
) -> Reference:
    """The reference of `main` at the times and its error estimate from `check`.
    progress(which, fraction, steps, seconds), which = "reference" or "check"."""

    def report(which):
        if progress is None:
            return None
        return lambda f, s, w: progress(which, f, s, w)

    a = integrate(body, y0, times, main, report("reference"))
    b = integrate(body, y0, times, check, report("check"))
    apart = parting(a, b)
    if not all(math.isfinite(v) for v in apart.values()):
        raise ReferenceFailed("the two Taylor integrations give states that are not finite")
    # Handed out rounded to double (hi + lo): below DOUBLE_FLOOR the estimate is that rounding.
    accuracy = {k: max(ESTIMATE_FACTOR * v, DOUBLE_FLOOR) for k, v in apart.items()}
    return Reference(
        times=np.asarray(times, dtype=np.float64).copy(),
        states=a.hi + a.lo,
        accuracy=accuracy,
        parting=apart,
        cost={
            "steps": a.steps,
            "check_steps": b.steps,
            "wall_s": a.wall_s,
            "check_wall_s": b.wall_s,
        },
        method=(
            f"Taylor series of order {main.order} in double-double arithmetic, checked "
            f"against order {check.order}"
        ),
    )
