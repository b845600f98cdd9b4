"""Measuring a sweep's grid for the regression gate, the same way for the baseline and the rerun.

Everything runs in this one process, in memory, in the order `expand` gives (cases x methods x
forms x settings), so that two measurements differ only by what changed in the code or the
machine. Two kinds of numbers come out:

- per grid run, the deterministic ones: status, steps, right-hand-side evaluations, rejected
  steps and the error metrics of the run's metrics JSON. The same code on the same machine gives
  the same bits; these are what the gate compares most strictly.
- per method and form, a timing: the quick grid's runs last well under a millisecond of kernel
  time each, so their nanoseconds per step are mostly the cost of starting and sampling, not of
  the kernel. Each (method, form) therefore gets one dedicated longer run: its grid run with the
  most steps, stretched in horizon until one pass takes about TIMING_TARGET_S of kernel time,
  advanced from start to end in one call (no samples), best of TIMING_REPEATS in CPU time of
  this thread (calibration.CLOCK says why). The repeats of all timings and of the calibration
  loop are interleaved round by round, so that a burst of load on the machine spreads over every
  entry instead of landing on one. Only these timings are gated; the grid runs' own ns_per_step
  are recorded for reading, not compared.

Timings are normalised by the calibration loop (calibration.py): `ns_per_step_norm` is the cost of
one step in iterations of that loop.
"""

from __future__ import annotations

import math
import sys
from collections.abc import Callable
from dataclasses import replace
from pathlib import Path

from topdrift.benchmarks.cases.schema import parse_case
from topdrift.benchmarks.gate.reference_workload import (
    CLOCK,
    ITERATIONS,
    KERNEL,
    clock,
    turning_unit_vector,
)
from topdrift.benchmarks.run.runner import plan_run
from topdrift.benchmarks.sweep.executor import Job, expand, run_job
from topdrift.integrators import C_STEPS, STATUS_NAMES

# The invariant and trajectory errors, all "smaller is better". Spelled out rather than taken
# from metrics.MAX_NAMES: they are keys of baseline format 1, which a new metric must not change.
ERROR_METRICS = (
    "energy_rel_max",
    "p_phi_rel_max",
    "p_psi_rel_max",
    "norm_abs_max",
    "axis_angle_max",
    "theta_abs_max",
    "phi_abs_max",
    "psi_abs_max",
)
COUNT_METRICS = ("steps", "rhs_evals", "rejected")
INFO_METRICS = ("energy_drift_exponent", "t_fail", "wall_s", "ns_per_step")
# Added to baseline format 1 as optional keys (a baseline without them is read as before and
# they are compared only where both sides have them): Kovalevskaya's integral, measured in every
# run of a Kovalevskaya top, and the force (torque) evaluations.
OPTIONAL_ERROR_METRICS = ("kovalevskaya_rel_max",)
OPTIONAL_COUNT_METRICS = ("force_evals",)
OPTIONAL_METRICS = OPTIONAL_ERROR_METRICS + OPTIONAL_COUNT_METRICS

TIMING_TARGET_S = 0.1
TIMING_REPEATS = 5
MAX_HORIZON_FACTOR = 10_000
MIN_GRID_WALL_S = 1e-5  # below this a grid run's wall time says nothing about its speed


def setting_of(job: Job) -> dict:
    if job.step is not None:
        return {"step": job.step}
    return {"rtol": job.rtol, "atol": job.atol}


def run_key(job: Job) -> str:
    """What a run is, in words: case, method, form and the requested setting (10 digits, so
    that ladder rungs stay distinct and the key stays readable)."""
    if job.step is not None:
        s = f"step={job.step:.10g}"
    else:
        s = f"rtol={job.rtol:.10g}"
        if job.atol is not None:
            s += f" atol={job.atol:.10g}"
    return f"{job.case_name} {job.method} {job.form} {s}"


def timing_key(method: str, form: str) -> str:
    return f"{method} {form}"


def grid_jobs(spec) -> tuple[dict[str, Job], list[str]]:
    """The grid's jobs by run key, in run order, and the grid points refused up front."""
    jobs, skipped = expand(spec)
    by_key: dict[str, Job] = {}
    for job in jobs:
        key = run_key(job)
        if key in by_key:  # two settings equal to 10 digits: keep the keys honest, not unique-ish
            raise RuntimeError(f"two runs of the grid share the key {key!r}")
        by_key[key] = job
    return by_key, skipped


def measure_run(job: Job) -> dict:
    """One grid run, in memory. An exception is a finding (status "error"), not the end of the
    gate: a broken method must show up as a regression of its runs."""
    record = {
        "run_id": job.run_id,
        "case": job.case_name,
        "method": job.method,
        "form": job.form,
        "setting": setting_of(job),
    }
    try:
        result = run_job(job)
    except Exception as exc:  # noqa: BLE001 - reported per run, see above
        record.update({"status": "error", "detail": f"{type(exc).__name__}: {exc}"})
        for name in COUNT_METRICS + ERROR_METRICS + INFO_METRICS + OPTIONAL_METRICS:
            record[name] = None
        return record
    m = result.metrics
    record["status"] = result.status
    record["detail"] = result.detail
    for name in COUNT_METRICS + ERROR_METRICS + INFO_METRICS + OPTIONAL_METRICS:
        record[name] = m.get(name)
    return record


def measure_grid(
    jobs: dict[str, Job], report: Callable[[str], None] | None = None
) -> dict[str, dict]:
    report = report or _stderr
    runs = {}
    for k, (key, job) in enumerate(jobs.items(), 1):
        runs[key] = measure_run(job)
        report(f"[{k}/{len(jobs)}] {key}: {runs[key]['status']}")
    return runs


def timing_plans(runs: dict[str, dict], jobs: dict[str, Job]) -> dict[str, dict]:
    """Per (method, form): the grid run with the most steps among those that finished ok, and a
    horizon long enough for about TIMING_TARGET_S of kernel time per pass."""
    best: dict[str, str] = {}
    for key, r in runs.items():
        if r["status"] != "ok" or not r.get("steps"):
            continue
        tk = timing_key(r["method"], r["form"])
        if tk not in best or r["steps"] > runs[best[tk]]["steps"]:
            best[tk] = key
    plans = {}
    for tk, key in best.items():
        wall = max(float(runs[key].get("wall_s") or 0.0), MIN_GRID_WALL_S)
        factor = min(MAX_HORIZON_FACTOR, max(1, math.ceil(TIMING_TARGET_S / wall)))
        plans[tk] = {"run": key, "horizon": jobs[key].horizon * factor}
    return plans


def _timing_plan(job: Job, horizon: float):
    tjob = replace(job, horizon=float(horizon), samples=2)
    case = parse_case(
        tjob.case_toml, tjob.case_label, Path(tjob.case_path) if tjob.case_path else None
    )
    setting = {"step": tjob.step} if tjob.step is not None else {"rtol": tjob.rtol}
    if tjob.atol is not None:
        setting["atol"] = tjob.atol
    return plan_run(case, tjob.method, form=tjob.form, horizon=tjob.horizon, samples=2, **setting)


def _one_pass(plan) -> tuple[float, int, int]:
    s = plan.method.start(
        plan.form_code, plan.params.copy(), 0.0, plan.y0.copy(), dict(plan.stepper_settings)
    )
    t0 = clock()
    status = s.advance_to(plan.horizon)
    elapsed = clock() - t0
    return elapsed, int(s.counters[C_STEPS]), int(status)


def _settled(job: Job, plan):
    """The first horizon is a guess from the grid run's wall time, which includes the cost of
    sampling; one probe pass of the stretched run corrects it once, so that a pass lasts about
    TIMING_TARGET_S. The horizon is recorded, and the gate reruns it as it is."""
    elapsed, _, status = _one_pass(plan)
    if status != 0 or elapsed >= 0.5 * TIMING_TARGET_S:
        return plan
    factor = min(MAX_HORIZON_FACTOR, math.ceil(TIMING_TARGET_S / max(elapsed, 1e-6)))
    return _timing_plan(job, plan.horizon * factor)


def _calibration_pass() -> float:
    t0 = clock()
    turning_unit_vector(ITERATIONS, 0.0)
    return clock() - t0


def measure_timings(
    plans: dict[str, dict],
    jobs: dict[str, Job],
    repeats: int | None = None,
    report: Callable[[str], None] | None = None,
    settle: frozenset[str] = frozenset(),
) -> tuple[dict[str, dict], dict]:
    """(timings by timing key, calibration). Plans whose grid run is not in `jobs` are left out
    (the caller reports them missing). Plans named in `settle` get their horizon settled first
    (see _settled); the others (a baseline's, rerun by the gate) keep theirs."""
    report = report or _stderr
    repeats = TIMING_REPEATS if repeats is None else repeats
    planned = {}
    out: dict[str, dict] = {}
    plans = {tk: dict(tp) for tk, tp in plans.items()}
    for tk, tp in plans.items():
        job = jobs.get(tp["run"])
        if job is None:
            continue
        try:
            plan = _timing_plan(job, tp["horizon"])
            if tk in settle and plan.y0 is not None:
                plan = _settled(job, plan)
                tp["horizon"] = plan.horizon
        except Exception as exc:  # noqa: BLE001 - a timing that cannot start is a finding
            out[tk] = _failed_timing(tp, f"{type(exc).__name__}: {exc}")
            continue
        if plan.y0 is None:
            out[tk] = _failed_timing(tp, plan.start_singular)
            continue
        planned[tk] = plan
    turning_unit_vector(10, 0.0)  # compile or load before any clock runs
    calib: list[float] = []
    times: dict[str, list[float]] = {tk: [] for tk in planned}
    steps: dict[str, int] = {}
    status: dict[str, int] = {}
    for k in range(repeats):
        calib.append(_calibration_pass())
        for tk, plan in planned.items():
            if status.get(tk, 0) != 0:
                continue  # a failed pass is not timed again
            el, n, st = _one_pass(plan)
            times[tk].append(el)
            steps[tk], status[tk] = n, st
        report(f"timing round {k + 1}/{repeats}")
    calib.append(_calibration_pass())
    c_best = min(calib)
    calibration = {
        "kernel": KERNEL,
        "clock": CLOCK,
        "iterations": ITERATIONS,
        "repeats": len(calib),
        "ns_per_iteration": c_best * 1e9 / ITERATIONS,
        "spread": max(calib) / c_best - 1.0,
    }
    for tk in planned:
        tp = plans[tk]
        best = min(times[tk])
        n = steps[tk]
        ok = status[tk] == 0 and n > 0
        ns = best * 1e9 / n if ok else None
        out[tk] = {
            "run": tp["run"],
            "horizon": float(tp["horizon"]),
            "status": STATUS_NAMES[status[tk]] if status[tk] < len(STATUS_NAMES) else "failed",
            "detail": "",
            "steps": n,
            "repeats": len(times[tk]),
            "seconds": best,
            "ns_per_step": ns,
            "ns_per_step_norm": ns / calibration["ns_per_iteration"] if ok else None,
            "spread": max(times[tk]) / best - 1.0,
        }
    return dict(sorted(out.items(), key=lambda kv: list(plans).index(kv[0]))), calibration


def _failed_timing(tp: dict, detail: str) -> dict:
    return {
        "run": tp["run"],
        "horizon": float(tp["horizon"]),
        "status": "error",
        "detail": detail,
        "steps": None,
        "repeats": 0,
        "seconds": None,
        "ns_per_step": None,
        "ns_per_step_norm": None,
        "spread": None,
    }


def normalise_grid(runs: dict[str, dict], calibration: dict) -> None:
    """Add ns_per_step_norm to each grid run (for reading; see the module note)."""
    c = calibration["ns_per_iteration"]
    for r in runs.values():
        ns = r.get("ns_per_step")
        r["ns_per_step_norm"] = ns / c if isinstance(ns, float) and c > 0 else None


def _stderr(line: str) -> None:
    print(line, file=sys.stderr)
