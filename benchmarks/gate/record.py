"""Recording a baseline (or the gate's rerun of one): the grid, the timings, the calibration,
the versions, assembled into the format of baseline_file.py."""

from __future__ import annotations

import hashlib
from collections.abc import Callable
from importlib import resources
from pathlib import Path

from topdrift.benchmarks.gate.baseline_file import FORMAT, FORMAT_VERSION, VERSION_KEYS
from topdrift.benchmarks.gate.measure import (
    grid_jobs,
    measure_grid,
    measure_timings,
    normalise_grid,
    timing_plans,
)
from topdrift.benchmarks.run.runner import versions
from topdrift.benchmarks.store.writer import utc_now


def sweep_identity(spec, source: str) -> dict:
    """Where the grid came from. The hash is of the sweep file's text when there is one (a
    changed file explains new and missing runs); the gate reruns `source`."""
    # The same lookup as read_sweep: a file by path, else a shipped sweep by name.
    p = Path(source)
    if not p.is_file():
        p = Path(str(resources.files("topdrift.benchmarks.sweep") / "shipped")) / f"{source}.toml"
    raw = p.read_bytes() if p.is_file() else b""
    return {"source": source, "name": spec.name, "sha256": hashlib.sha256(raw).hexdigest()}


def record(
    spec,
    source: str,
    *,
    timing_from: dict[str, dict] | None = None,
    report: Callable[[str], None] | None = None,
) -> dict:
    """Measure the sweep's grid and timings. `timing_from`: timing plans to reuse (the gate
    passes the baseline's, so that both time the same runs over the same horizons); methods and
    forms without one get a plan of their own, as when recording."""
    jobs, skipped = grid_jobs(spec)
    runs = measure_grid(jobs, report)
    plans = timing_plans(runs, jobs)
    if timing_from is not None:
        reused = {tk: {"run": t["run"], "horizon": t["horizon"]} for tk, t in timing_from.items()}
        plans = {**reused, **{tk: p for tk, p in plans.items() if tk not in reused}}
    own = frozenset(tk for tk in plans if timing_from is None or tk not in timing_from)
    timings, calibration = measure_timings(plans, jobs, report=report, settle=own)
    normalise_grid(runs, calibration)
    return {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "created": utc_now(),
        "sweep": sweep_identity(spec, source),
        "versions": {k: v for k, v in versions().items() if k in VERSION_KEYS},
        "calibration": calibration,
        "runs": runs,
        "timings": timings,
        "skipped": skipped,
    }
