"""A sweep's grid: sized first (sizing.py), then expanded into planned jobs, point by point.

Every (case, method, form, setting) point is planned on the client, which checks it; points a
method cannot run (an Euler-form method on an asymmetric body) and points that round to a run
already in the grid are skipped with the reason, and anything else wrong is a UserError naming
the sweep file. Planning is stopped by SIGINT or SIGTERM like any other stage (it writes
nothing), and says how far it got.
"""

from __future__ import annotations

import json
import math
import time
from collections.abc import Callable, Iterator

from topdrift.benchmarks.cases.library import load_case
from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.runner import StartFailed
from topdrift.benchmarks.stopping import Interrupted
from topdrift.benchmarks.sweep.jobs import Job, Skip, plan_job, skip_of
from topdrift.benchmarks.sweep.settings_ladder import rtol_ladder, step_ladder
from topdrift.benchmarks.sweep.sizing import (
    MethodPoints,
    case_extent,
    check_count,
    check_work,
    method_points,
)
from topdrift.benchmarks.sweep.spec import SweepSpec
from topdrift.integrators import MethodRefused
from topdrift.integrators import get as get_method

# A line on the progress stream this often while a large grid is planned.
PLANNING_REPORT_S = 2.0

Setting = tuple[float | None, float | None, float | None]  # step, rtol, atol


def _forms(case, m: MethodPoints, skipped: list[Skip]) -> list[str]:
    """The forms a method runs in on a case: the sweep's, or the method's own first fit. A
    method that is not registered (kept for the gate only) has none, and is said."""
    if m.control is None:
        why = f"unknown method {m.name!r}: not registered (a plug-in that did not load?)"
        line = f"{case.name} {m.name}: {why}"
        skipped.append(Skip(case.name, m.name, None, None, None, None, "error", why, line))
        return []
    if m.forms is not None:
        return list(m.forms)
    try:
        return [get_method(m.name).default_form(case.body)]
    except MethodRefused as exc:
        line = f"{case.name} {m.name}: {exc}"
        skipped.append(Skip(case.name, m.name, None, None, None, None, "refused", str(exc), line))
        return []


def _settings(spec: SweepSpec, case, m: MethodPoints, form: str, horizon, skipped) -> list:
    """The (step, rtol, atol) settings of one method and form on a case. An "auto" step ladder's
    rungs over max_steps are skipped, and said."""
    if m.control != "step":
        ladder = rtol_ladder(spec.rungs) if m.ladder == "auto" else m.ladder
        ratio = spec.atol_ratio
        return [(None, r, None if ratio is None else r * ratio) for r in ladder]
    ladder = m.ladder
    if ladder == "auto":
        every = step_ladder(case, get_method(m.name).info.order, spec.rungs, horizon, math.inf)
        ladder = [h for h in every if horizon / h <= spec.max_steps]
        for h in (h for h in every if h not in ladder):  # said, not silent
            why = (
                f"{horizon / h:.3g} steps over the horizon, more than "
                f"max_steps = {spec.max_steps:g}"
            )
            line = f"{case.name} {m.name} ({form}) step={h:.4g}: {why}"
            skipped.append(Skip(case.name, m.name, form, h, None, None, "over-budget", why, line))
    return [(h, None, None) for h in ladder]


class _Planner:
    """The grid's jobs as they are planned: each point checked by planning it, skipped when a
    method refuses it or when it is the same computation as a point already planned."""

    def __init__(self, label: str, keep_errors: bool):
        self.label = label
        self.keep_errors = keep_errors
        self.jobs: list[Job] = []
        self.skipped: list[Skip] = []
        self.same: dict[tuple, Job] = {}
        self.planned = 0

    def add(self, case, method: str, form: str, setting: Setting, horizon, samples) -> None:
        step, rtol, atol = setting
        job = Job(
            case.name,
            str(case.path.name if case.path else case.name),
            case.toml_text,
            str(case.path) if case.path else None,
            method,
            form,
            step,
            rtol,
            atol,
            horizon,
            samples,
        )
        self.planned += 1
        try:
            plan = plan_job(job)
        except MethodRefused as exc:
            kind = "failed" if isinstance(exc, StartFailed) else "refused"
            self.skipped.append(skip_of(job, kind, str(exc)))
            return
        except UserError as exc:  # named by the sweep file and the point, not by an option
            raise UserError(f"{self.label}: {job.describe()}: {exc}") from None
        except Exception as exc:  # noqa: BLE001 - kept as a cell only when asked (the gate)
            if not self.keep_errors:
                raise
            self.skipped.append(skip_of(job, "error", f"{type(exc).__name__}: {exc}"))
            return
        # Two requested steps that round to the same step (one whole number of steps per sample
        # interval) are the same computation: run it once.
        used = {k: v for k, v in plan.settings.items() if k != "step_requested"}
        key = (job.case_toml, method, form, json.dumps(used, sort_keys=True), horizon, samples)
        if key in self.same:
            why = (
                f"runs as step={plan.settings['step']:.4g}, "
                f"the same run as {self.same[key].describe()}"
            )
            self.skipped.append(skip_of(job, "same-run", why))
            return
        self.same[key] = job
        self.jobs.append(Job(**{**job.__dict__, "run_id": plan.run_id}))

    def unique(self) -> list[Job]:
        """The jobs once each (a case or method listed twice gives the same run ids)."""
        seen: set[str] = set()
        out = []
        for j in self.jobs:
            if j.run_id not in seen:
                seen.add(j.run_id)
                out.append(j)
        return out


def _points(spec: SweepSpec, cases, methods, skipped, label) -> Iterator[tuple]:
    """Every (case, method, form, setting, horizon, samples) of the grid, in the grid's order."""
    for case in cases:
        horizon, samples = case_extent(spec, case, label)
        for m in methods:
            for form in _forms(case, m, skipped):
                for setting in _settings(spec, case, m, form, horizon, skipped):
                    yield case, m.name, form, setting, horizon, samples


def expand(
    spec: SweepSpec, report: Callable[[str], None] | None = None
) -> tuple[list[Job], list[str]]:
    """The grid's jobs (planned, so checked) and the points skipped up front, each as the line a
    sweep prints. Grid points a method cannot run (an Euler-form method on an asymmetric body)
    are skipped with the reason; anything else wrong is a UserError."""
    jobs, skips = expand_grid(spec, report=report)
    return jobs, [s.line for s in skips]


def expand_grid(
    spec: SweepSpec,
    *,
    keep_errors: bool = False,
    report: Callable[[str], None] | None = None,
) -> tuple[list[Job], list[Skip]]:
    """As `expand`, with each skipped grid point as a Skip. `keep_errors`: a method that is not
    registered, or a grid point whose planning raises anything but a refusal or a UserError,
    becomes a Skip of kind "error" instead of ending the expansion (the regression gate wants
    every cell's fate, a sweep a traceback). The grid is sized before any case is read or point
    planned (sizing.py)."""
    label = spec.label or spec.name
    methods = method_points(spec, label, keep_unknown=keep_errors)
    total = check_count(spec, label, methods)
    cases = [load_case(c) for c in spec.cases]
    check_work(spec, label, methods, cases)
    planner = _Planner(label, keep_errors)
    last = time.perf_counter()
    try:
        for point in _points(spec, cases, methods, planner.skipped, label):
            planner.add(*point)
            if report is not None and time.perf_counter() - last >= PLANNING_REPORT_S:
                report(f"planning the grid: {planner.planned} of at most {total} points")
                last = time.perf_counter()
    except Interrupted as exc:
        raise exc.saying(
            f"{planner.planned} of at most {total} grid points planned, no run started; "
            "nothing written"
        ) from None
    return planner.unique(), planner.skipped
