"""A recommendation for a fixed loop rate: the user's step is given (the rate of a control loop
or a real-time frame), and so is the number of steps; every fixed-step candidate runs at exactly
that step, and the candidates are ranked by error, then by cost, with those that meet a target
marked. Adaptive methods choose their own steps and are no candidates here.

The runs are the runner's own (in memory, nothing written), over the horizon step x steps with
sample times on the step grid; the error is the one `pick` measures (recommend.Picker), against
the exact solution or, for a case without one, against the same reference run.
"""

from __future__ import annotations

import math
from collections.abc import Callable

from topdrift.benchmarks.cases.numbers import positive, whole
from topdrift.benchmarks.cases.schema import MAX_SAMPLES
from topdrift.benchmarks.choose.recommend import (
    MAX_STEPS,
    METRICS,
    VERIFY_BUDGET_S,
    VERIFY_RUNS,
    Picker,
)
from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.runner import steps_per_interval
from topdrift.benchmarks.stopping import Interrupted
from topdrift.integrators import MethodRefused, all_methods, origin
from topdrift.integrators import get as get_method

# How far (in ulps of step x steps) the horizon may be moved so that the runner's step, the
# sample interval over a whole number of steps, comes out as the very double the user gave.
HORIZON_NUDGES = 16


def fixed_step_candidates() -> list[str]:
    """Every built-in fixed-step method, in the registry's order (plug-ins by --methods)."""
    return [m.name for m in all_methods() if m.info.control == "step" and origin(m.name) is None]


def adaptive_names() -> list[str]:
    return [m.name for m in all_methods() if m.info.control != "step"]


def _divisors(n: int) -> list[int]:
    small, large = [], []
    d = 1
    while d * d <= n:
        if n % d == 0:
            small.append(d)
            if d * d != n:
                large.append(n // d)
        d += 1
    return small + large[::-1]


def loop_intervals(case, step: float, steps: int, samples: int | None) -> int:
    """Sample intervals over the run: a divisor of `steps` (every sample on the step grid); with
    `samples` given it must be one (else UserError), otherwise the divisor nearest (on a log
    scale) to the count at the case's own sample interval."""
    if samples is not None:
        intervals = samples - 1
        if steps % intervals:
            raise UserError(
                f"--samples {samples}: {steps} steps do not split into {intervals} equal sample "
                f"intervals; give a count for which samples - 1 divides --steps"
            )
        return intervals
    case_interval = case.horizon / (case.samples - 1)
    wanted = max(1.0, step * steps / case_interval)
    fits = [d for d in _divisors(steps) if d + 1 <= MAX_SAMPLES]
    return min(fits, key=lambda d: (abs(math.log(d / wanted)), d))


def exact_horizon(step: float, steps: int, intervals: int) -> tuple[float, bool]:
    """(T, exact): a horizon near step x steps for which the runner's step (T / intervals, over
    steps / intervals steps) is `step` to the bit, when one lies within HORIZON_NUDGES ulps;
    otherwise step x steps and False."""
    per = steps // intervals
    t0 = step * steps
    for k in range(HORIZON_NUDGES + 1):
        for direction in (math.inf, -math.inf):
            t = t0
            for _ in range(k):
                t = math.nextafter(t, direction)
            interval = t / intervals
            if steps_per_interval(interval, step) == per and interval / per == step:
                return t, True
    return t0, False


def pick_at_step(
    case,
    step: float,
    steps: int,
    *,
    target: float | None = None,
    metric: str = "axis",
    samples: int | None = None,
    methods=None,
    form: str | None = None,
    report: Callable[[str], None] = lambda s: None,
) -> dict:
    """Run every candidate at `step` for `steps` steps; rank by error, then wall time."""
    step = positive("--step", step)
    steps = whole("--steps", steps, 1, MAX_STEPS, "a whole number of steps")
    if metric not in METRICS:
        raise UserError(f"--metric: expected axis, attitude or energy, got {metric!r}")
    if target is not None:
        target = positive("--target", target)
    names = list(methods) if methods else fixed_step_candidates()
    for name in names:
        m = get_method(name)  # unknown names fail before any work
        if m.info.control != "step":
            raise UserError(
                f"--methods: {name} is an adaptive method (it chooses its own steps by "
                f"tolerance); --step ranks fixed-step methods at the given step only"
            )
    intervals = loop_intervals(case, step, steps, samples)
    horizon, exact_step = exact_horizon(step, steps, intervals)
    picker = Picker(case, target, metric, horizon, intervals + 1, report)
    rows, failed, unreached = [], [], []
    try:
        for name in names:
            m = get_method(name)
            try:
                f = form or m.default_form(case.body)
                m.check(case.body, f, {"step": step})
                trial = picker.fresh(name, f, step)
            except MethodRefused as exc:
                unreached.append({"method": name, "form": form or "?", "reason": str(exc)})
                report(f"{name}: {exc}")
                continue
            spent = trial.wall_s
            for _ in range(VERIFY_RUNS - 1):  # a short run is timed again, the quickest counts
                if trial.status != "ok" or not spent < VERIFY_BUDGET_S:
                    break
                again = picker.fresh(name, f, step)
                spent += again.wall_s
                if again.achieved != trial.achieved:
                    raise RuntimeError(f"{name}: two runs of one setting differ")
                if again.wall_s < trial.wall_s:
                    trial = again
            row = {
                "method": name,
                "form": f,
                "status": trial.status,
                "step": trial.settings["step"],
                "achieved": trial.achieved if trial.status == "ok" else None,
                "wall_s": trial.wall_s,
                "ns_per_step": trial.wall_s / steps * 1e9,
                "rhs_evals": trial.rhs_evals,
                "force_evals": trial.force_evals,
                "kept": metric == "energy" and "energy" in m.info.kept_in(f),
                "meets": None
                if target is None
                else (trial.status == "ok" and trial.achieved <= target),
            }
            (rows if trial.status == "ok" else failed).append(row)
            report(
                f"{name} ({f}): {trial.status}"
                + (f", error {trial.achieved:.3g}" if trial.status == "ok" else "")
                + f", {trial.wall_s:.3g} s"
            )
    except Interrupted as exc:
        done = len(rows) + len(failed) + len(unreached)
        raise exc.saying(
            f"{done} of {len(names)} candidate methods run, {len(names) - done} left; "
            "nothing written"
        ) from None
    rows.sort(key=lambda r: (r["achieved"], r["wall_s"]))
    return {
        "case": case.name,
        "step": step,
        "steps": steps,
        "horizon": horizon,
        "samples": intervals + 1,
        "step_exact": exact_step,
        "metric": metric,
        "target": target,
        "reference": picker.reference_note,
        "ranking": rows,
        "failed": failed,
        "unreached": unreached,
        "not_candidates": adaptive_names(),
        "meeting": [r["method"] for r in rows if r["meets"]],
    }
