"""Measuring a sweep's grid for the regression gate, the same way for the baseline and the rerun.

Everything runs in this one process, in memory, in the order `expand` gives (cases x methods x
forms x settings), so that two measurements differ only by what changed in the code or the
machine. Two kinds of numbers come out:

- per grid cell, the deterministic ones: status, steps, right-hand-side evaluations, rejected
  steps and the error metrics of the run's metrics JSON. The same code on the same machine gives
  the same bits; these are what the gate compares most strictly. A cell the method refuses (or
  fails to start, or raises on) is kept too, with its reason, so that the gate can say that a
  cell which ran in the baseline does not any more.
- per method and form, a timing: the quick grid's runs last well under a millisecond of kernel
  time each, so their nanoseconds per step are mostly the cost of starting and sampling, not of
  the kernel. Each (method, form) therefore gets one dedicated longer run: its grid run with the
  most steps, stretched in horizon until one pass takes about TIMING_TARGET_S of kernel time,
  advanced from start to end in one call (no samples). Over TIMING_ROUNDS rounds every timing
  run makes one pass, and each pass sits between two passes of the reference workload
  (reference_workload.py), so the sequence of a round is R m1 R m2 R ... mk R. A pass's ratio is
  its time per step over the reference's time per step, the two references beside it averaged:
  what drifts between seconds, days or hosts of one kind drifts in both and cancels. The median
  ratio is `ns_per_step_norm`; the ratio of every round over that median (`per_round`) is the
  spread the gate judges a change by. Only these timings are gated; the grid runs' own
  ns_per_step are recorded for reading.
"""

from __future__ import annotations

import math
import sys
import time
from collections.abc import Callable
from pathlib import Path
from statistics import median

from topdrift.benchmarks.cases.schema import parse_case
from topdrift.benchmarks.gate.baseline_file import (
    COUNT_METRICS,
    ERROR_METRICS,
    INFO_METRICS,
    OPTIONAL_METRICS,
)
from topdrift.benchmarks.gate.reference_workload import (
    CLOCK,
    SCALAR_STEPS,
    STAGES_STEPS,
    WORKLOAD,
    WORKLOAD_VERSION,
    ReferenceWorkload,
    clock,
    reference_kind,
    unit_ns,
)
from topdrift.benchmarks.gate.timing_settings import (
    TIMING_ROUNDS,
    TIMING_TARGET_S,
    WAIT_DRIFT,
    WAIT_PAUSE_S,
)
from topdrift.benchmarks.run.runner import plan_run, samples_at_interval
from topdrift.benchmarks.sweep.executor import Job, Skip, expand_grid, run_job
from topdrift.integrators import C_STEPS, STATUS_NAMES
from topdrift.integrators import get as get_method

# TIMING_ROUNDS and TIMING_TARGET_S (timing_settings.py, apart so the help needs no numba) are
# read from this module's names at call time, so a test may shrink them here
MAX_HORIZON_FACTOR = 10_000
MIN_GRID_WALL_S = 1e-5  # below this a grid run's wall time says nothing about its speed
# A timing still too loose for a verdict after its rounds gets blocks of EXTRA_BLOCK more, up to
# EXTRA_FACTOR times the rounds in all (41 -> at most 161): a few seconds of a gate's time
EXTRA_BLOCK = 20
EXTRA_FACTOR = 4


def setting_of(job: Job) -> dict:
    if job.step is not None:
        return {"step": job.step}
    return {"rtol": job.rtol, "atol": job.atol}


def run_key(job: Job | Skip) -> str:
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


# What a skipped grid point is to the gate: a cell with a status, or nothing (the sweep's own
# choices are the same in the baseline and the rerun and name no cell of the contract).
_SKIP_STATUS = {"refused": "refused", "failed": "failed", "error": "error"}


def grid_jobs(spec) -> tuple[dict[str, Job], list[str]]:
    """The grid's jobs by run key, in run order, and the grid points refused up front."""
    jobs, skipped, _ = grid_cells(spec)
    return jobs, skipped


def grid_cells(spec) -> tuple[dict[str, Job], list[str], list[dict]]:
    """(jobs by run key, the skipped lines, the cells that did not start): each of the last is
    {"key": run key or None, "case", "method", "form", "status", "detail"}; the key is None
    when the method refused the case before any form was chosen."""
    jobs, skips = expand_grid(spec, keep_errors=True)
    by_key: dict[str, Job] = {}
    for job in jobs:
        key = run_key(job)
        if key in by_key:  # two settings equal to 10 digits: keep the keys honest, not unique-ish
            raise RuntimeError(f"two runs of the grid share the key {key!r}")
        by_key[key] = job
    unstarted = [
        {
            "key": run_key(sk) if sk.form is not None else None,
            "case": sk.case_name,
            "method": sk.method,
            "form": sk.form,
            "status": _SKIP_STATUS[sk.kind],
            "detail": sk.reason,
        }
        for sk in skips
        if sk.kind in _SKIP_STATUS
    ]
    return by_key, [sk.line for sk in skips], unstarted


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
    for name in COUNT_METRICS + ERROR_METRICS + OPTIONAL_METRICS:
        record[name] = m.get(name)
    for name in INFO_METRICS:  # for reading only: a NaN there (a fit of nothing) is no value
        v = m.get(name)
        record[name] = None if isinstance(v, float) and math.isnan(v) else v
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
    """Per (method, form): among the grid runs that finished ok, the one with the most steps that
    took no longer than TIMING_TARGET_S (if every one took longer, the shortest), and a horizon
    long enough for about TIMING_TARGET_S of kernel time per pass: a whole number of the grid
    run's horizons, so that its sample interval, and with it every fixed step, is the grid
    run's (the horizon rule, runner.samples_at_interval)."""
    best: dict[str, str] = {}

    def better(key: str, than: str) -> bool:
        a, b = runs[key], runs[than]
        fits_a = (a.get("wall_s") or 0.0) <= TIMING_TARGET_S
        fits_b = (b.get("wall_s") or 0.0) <= TIMING_TARGET_S
        if fits_a != fits_b:
            return fits_a
        return a["steps"] > b["steps"] if fits_a else a["steps"] < b["steps"]

    for key, r in runs.items():
        if r["status"] != "ok" or not r.get("steps"):
            continue
        tk = timing_key(r["method"], r["form"])
        if tk not in best or better(key, best[tk]):
            best[tk] = key
    plans = {}
    for tk, key in best.items():
        wall = max(float(runs[key].get("wall_s") or 0.0), MIN_GRID_WALL_S)
        factor = min(MAX_HORIZON_FACTOR, max(1, math.ceil(TIMING_TARGET_S / wall)))
        plans[tk] = {"run": key, "horizon": jobs[key].horizon * factor}
    return plans


def timing_plan(job: Job, horizon: float):
    case = parse_case(job.case_toml, job.case_label, Path(job.case_path) if job.case_path else None)
    setting = {"step": job.step} if job.step is not None else {"rtol": job.rtol}
    if job.atol is not None:
        setting["atol"] = job.atol
    samples = samples_at_interval(float(horizon), job.horizon / (job.samples - 1))
    return plan_run(
        case, job.method, form=job.form, horizon=float(horizon), samples=samples, **setting
    )


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
    return timing_plan(job, plan.horizon * factor)


def reference_unit(reference: dict | None) -> tuple[int, int]:
    """The reference pass sizes: a baseline's (the gate must time in the same unit), or ours."""
    if reference is None:
        return SCALAR_STEPS, STAGES_STEPS
    return int(reference["scalar_steps"]), int(reference["stages_steps"])


def measure_timings(
    plans: dict[str, dict],
    jobs: dict[str, Job],
    rounds: int | None = None,
    report: Callable[[str], None] | None = None,
    settle: frozenset[str] = frozenset(),
    reference: dict | None = None,
    undecided: Callable[[dict[str, dict], dict], set[str]] | None = None,
    moved: Callable[[dict], float] | None = None,
    waits: int = 0,
    pause_s: float = WAIT_PAUSE_S,
    sleep: Callable[[float], None] = time.sleep,
) -> tuple[dict[str, dict], dict]:
    """(timings by timing key, the reference record). Plans whose grid run is not in `jobs` are
    left out (the caller reports them missing). Plans named in `settle` get their horizon settled
    first (see _settled); the others (a baseline's, rerun by the gate) keep theirs. `reference`:
    a baseline's reference record, whose pass sizes are used.

    `undecided` (the gate's): given the records and the reference record after the rounds, the
    timing keys whose rounds are still too loose for a verdict. Those get EXTRA_BLOCK more rounds
    each (still between passes of the reference workload), up to EXTRA_FACTOR times `rounds` in
    all, and are judged again: the machine's noise comes in bursts, and a timing caught in one
    is measured until it can be told, instead of being "not measurable" after a fixed count.

    `moved` (the gate's, with `waits` > 0): given the reference record after the rounds, how far
    the machine's state has moved since the baseline (compare.machine_drift). Past WAIT_DRIFT
    the rounds are all done again after a pause of `pause_s`, up to `waits` times, and the
    measurement whose state is nearest the baseline's is kept: the machine passes through states
    that last minutes, and a timing taken in one is compared with a baseline taken in another
    only at a widened band (compare.judge_timing)."""
    report = report or _stderr
    rounds = TIMING_ROUNDS if rounds is None else rounds
    planned = {}
    kinds: dict[str, str] = {}
    out: dict[str, dict] = {}
    plans = {tk: dict(tp) for tk, tp in plans.items()}
    for tk, tp in plans.items():
        job = jobs.get(tp["run"])
        if job is None:
            continue
        try:
            kinds[tk] = reference_kind(get_method(job.method).info.family)
            plan = timing_plan(job, tp["horizon"])
            if tk in settle:
                plan = _settled(job, plan)
                tp["horizon"] = plan.horizon
        except Exception as exc:  # noqa: BLE001 - a timing that cannot start is a finding
            out[tk] = _failed_timing(tp, f"{type(exc).__name__}: {exc}", kinds.get(tk, "mix"))
            continue
        planned[tk] = plan
    work = ReferenceWorkload(*reference_unit(reference))  # compiled before any clock runs
    # One untimed pass of everything first: the first pass of a kernel in a process pays for
    # cold instruction caches and branch predictors, which no later pass (and no baseline
    # recorded after a probe pass) sees.
    work.time_pass()
    for tk, plan in planned.items():
        if tk not in settle:  # a settled plan had its probe pass already
            _one_pass(plan)
    got = _Rounds(planned)
    got.run(planned, kinds, work, rounds, report)
    reference_record = got.reference_record(work)
    if moved is not None:
        got, reference_record = _wait_out(
            got, reference_record, moved, waits, pause_s, sleep, planned, kinds, work, rounds,
            report,
        )  # fmt: skip
    out.update(got.records(planned, plans, kinds))
    total = rounds
    while undecided is not None and total + EXTRA_BLOCK <= EXTRA_FACTOR * rounds:
        again = {tk: planned[tk] for tk in undecided(out, reference_record) if tk in planned}
        again = {tk: plan for tk, plan in again.items() if got.status.get(tk, 0) == 0}
        if not again:
            break
        report(f"timing: {len(again)} timing(s) not yet measurable, {EXTRA_BLOCK} more rounds")
        got.run(again, kinds, work, EXTRA_BLOCK, report)
        total += EXTRA_BLOCK
        out.update(got.records(again, plans, kinds))
        reference_record = got.reference_record(work)
    return dict(sorted(out.items(), key=lambda kv: list(plans).index(kv[0]))), reference_record


def _wait_out(got, reference_record, moved, waits, pause_s, sleep, planned, kinds, work, rounds,
              report):  # fmt: skip
    """(rounds, reference record): the first measurement, or, while the machine's state is
    moved past WAIT_DRIFT, up to `waits` more after a pause each; the one nearest the baseline's
    state is kept (the witness does not depend on the code under test, so choosing by it does
    not choose the timings)."""
    drift = moved(reference_record)
    for attempt in range(1, waits + 1):
        if drift <= WAIT_DRIFT:
            break
        report(
            f"timing: the machine's state moved {math.exp(drift) - 1.0:.1%} since the baseline "
            f"(the reference workload's two kernels); waiting {pause_s:g} s to time again "
            f"({attempt} of {waits})"
        )
        sleep(pause_s)
        again = _Rounds(planned)
        again.run(planned, kinds, work, rounds, report)
        record = again.reference_record(work)
        d = moved(record)
        if d < drift:
            got, reference_record, drift = again, record, d
    return got, reference_record


class _Rounds:
    """What the timing rounds measured so far: the reference passes, and per timing key its
    ratios, ns per step, seconds, steps and end status."""

    def __init__(self, planned):
        self.refs: list[tuple[float, float]] = []
        self.ratios: dict[str, list[float]] = {tk: [] for tk in planned}
        self.ns: dict[str, list[float]] = {tk: [] for tk in planned}
        self.secs: dict[str, list[float]] = {tk: [] for tk in planned}
        self.steps: dict[str, int] = {}
        self.status: dict[str, int] = {}

    def run(self, planned, kinds, work, rounds, report) -> None:
        """`rounds` rounds R m1 R m2 R ... mk R over the plans given."""
        for k in range(rounds):
            prev = work.time_pass()
            self.refs.append(prev)
            for tk, plan in planned.items():
                if self.status.get(tk, 0) != 0:
                    continue  # a failed pass is not timed again
                el, n, st = _one_pass(plan)
                nxt = work.time_pass()
                self.refs.append(nxt)
                self.steps[tk], self.status[tk] = n, st
                if st == 0 and n > 0:
                    scalar = 0.5 * (prev[0] + nxt[0]) * 1e9 / work.scalar
                    stages = 0.5 * (prev[1] + nxt[1]) * 1e9 / work.stages
                    self.ns[tk].append(el * 1e9 / n)
                    self.secs[tk].append(el)
                    self.ratios[tk].append(self.ns[tk][-1] / unit_ns(kinds[tk], scalar, stages))
                prev = nxt
            report(f"timing round {k + 1}/{rounds}")

    def reference_record(self, work) -> dict:
        refs = self.refs
        return {
            "kernel": WORKLOAD,
            "version": WORKLOAD_VERSION,
            "clock": CLOCK,
            "scalar_steps": work.scalar,
            "stages_steps": work.stages,
            "scalar_ns": median(r[0] for r in refs) * 1e9 / work.scalar,
            "stages_ns": median(r[1] for r in refs) * 1e9 / work.stages,
            "passes": len(refs),
        }

    def records(self, planned, plans, kinds) -> dict[str, dict]:
        out = {}
        for tk in planned:
            tp = plans[tk]
            st = self.status.get(tk, 0)
            ratios = self.ratios[tk]
            ok = st == 0 and bool(ratios)
            mid = median(ratios) if ok else None
            out[tk] = {
                "run": tp["run"],
                "horizon": float(tp["horizon"]),
                "status": STATUS_NAMES[st] if st < len(STATUS_NAMES) else "failed",
                "detail": "" if st == 0 else f"the timing pass ended {STATUS_NAMES[st]}",
                "steps": self.steps.get(tk),
                "reference": kinds[tk],
                "rounds": len(ratios),
                "per_round": [round(r / mid, 6) for r in ratios] if ok else [],
                "ns_per_step_norm": mid,
                "ns_per_step": median(self.ns[tk]) if ok else None,
                "seconds": median(self.secs[tk]) if ok else None,
                "spread": (max(ratios) - min(ratios)) / mid if ok else None,
            }
        return out


def _failed_timing(tp: dict, detail: str, kind: str) -> dict:
    return {
        "run": tp["run"],
        "horizon": float(tp["horizon"]),
        "status": "error",
        "detail": detail,
        "steps": None,
        "reference": kind,
        "rounds": 0,
        "per_round": [],
        "ns_per_step_norm": None,
        "ns_per_step": None,
        "seconds": None,
        "spread": None,
    }


def normalise_grid(runs: dict[str, dict], reference: dict) -> None:
    """Add ns_per_step_norm to each grid run (for reading; see the module note)."""
    for r in runs.values():
        ns = r.get("ns_per_step")
        try:
            kind = reference_kind(get_method(r["method"]).info.family)
        except KeyError:
            kind = "mix"
        unit = unit_ns(kind, reference["scalar_ns"], reference["stages_ns"])
        r["ns_per_step_norm"] = ns / unit if isinstance(ns, float) and unit > 0 else None


def _stderr(line: str) -> None:
    print(line, file=sys.stderr)
