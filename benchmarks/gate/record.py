"""Recording a baseline (or the gate's rerun of one): the grid, the timings, the reference
workload, the versions, the machine and the plug-ins, assembled into the format of
baseline_file.py."""

from __future__ import annotations

import hashlib
import os
from collections.abc import Callable
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.gate.baseline_file import FORMAT, FORMAT_VERSION, VERSION_KEYS
from topdrift.benchmarks.gate.machine import fingerprint
from topdrift.benchmarks.gate.measure import (
    grid_cells,
    measure_grid,
    measure_timings,
    normalise_grid,
    timing_plans,
)
from topdrift.benchmarks.run.runner import versions
from topdrift.benchmarks.store.writer import utc_now
from topdrift.benchmarks.sweep.spec import SweepSpec, parse_sweep, read_sweep
from topdrift.integrators import origin


def _shipped(name: str) -> Path:
    return Path(str(resources.files("topdrift.benchmarks.sweep") / "shipped")) / f"{name}.toml"


def sweep_identity(source: str, baseline_path: Path) -> dict:
    """Where the grid came from, so that the gate finds it from any working directory: a
    shipped sweep by name, a sweep file by its path relative to the baseline file's folder (with
    '/' between parts). The hash is of the sweep file's text (a changed file explains new and
    missing runs)."""
    p = Path(source)
    if p.is_file():  # the same lookup as read_sweep: a file by path, else a shipped sweep
        rel = os.path.relpath(p.resolve(), Path(baseline_path).resolve().parent)
        ident = {"kind": "file", "source": Path(rel).as_posix()}
    else:
        p = _shipped(source)
        ident = {"kind": "shipped", "source": source}
    raw = p.read_bytes() if p.is_file() else b""
    return {**ident, "sha256": hashlib.sha256(raw).hexdigest()}


def sweep_of(baseline: dict, baseline_path: Path) -> tuple[SweepSpec, str]:
    """The baseline's sweep, read the way it was named: (spec, the source to record again)."""
    ident = baseline["sweep"]
    if ident["kind"] == "shipped":
        p = _shipped(ident["source"])
        if not p.is_file():
            raise UserError(
                f"{baseline_path}: sweep: no shipped sweep named {ident['source']!r} in this "
                "topdrift"
            )
        text = p.read_text(encoding="utf-8")
        return parse_sweep(text, ident["source"], p.parent), ident["source"]
    p = Path(baseline_path).parent / ident["source"]
    if not p.is_file():
        raise UserError(
            f"{baseline_path}: sweep: {ident['source']!r} (relative to the baseline's folder) "
            f"is not a file: looked for {p}"
        )
    return read_sweep(str(p)), str(p)


def plugins_of(methods) -> dict:
    """The package and version of every plug-in method among `methods` (built-ins are left
    out: their version is topdrift's)."""
    out = {}
    for name in sorted(set(methods)):
        try:
            o = origin(name)
        except KeyError:  # no longer registered: nothing to record
            continue
        if o is not None:
            out[name] = o
    return out


@dataclass
class Recording:
    data: dict  # in the format of baseline_file.py
    unstarted: list[dict] = field(default_factory=list)  # cells that did not start, see measure


def record(
    spec: SweepSpec,
    source: str,
    baseline_path: Path,
    *,
    timing_from: dict[str, dict] | None = None,
    reference_from: dict | None = None,
    timings: bool = True,
    rounds: int | None = None,
    report: Callable[[str], None] | None = None,
    undecided: Callable[[dict, dict], set[str]] | None = None,
    moved: Callable[[dict], float] | None = None,
    waits: int = 0,
) -> Recording:
    """Measure the sweep's grid and (unless `timings` is false) its timings. `timing_from`: timing
    plans to reuse, `reference_from`: the reference record whose pass sizes to reuse (the gate
    passes the baseline's, so that both time the same runs over the same horizons in the same
    unit); methods and forms without a plan get one of their own, as when recording.
    `undecided`: the gate's test of which timings need more rounds, `moved` and `waits` how it
    waits out a machine state (both measure.measure_timings)."""
    jobs, skipped, unstarted = grid_cells(spec)
    runs = measure_grid(jobs, report)
    timing_records: dict[str, dict] = {}
    reference = reference_from
    if timings:
        plans = timing_plans(runs, jobs)
        if timing_from is not None:
            reused = {
                tk: {"run": t["run"], "horizon": t["horizon"]} for tk, t in timing_from.items()
            }
            plans = {**reused, **{tk: p for tk, p in plans.items() if tk not in reused}}
        own = frozenset(tk for tk in plans if timing_from is None or tk not in timing_from)
        timing_records, reference = measure_timings(
            plans,
            jobs,
            rounds=rounds,
            report=report,
            settle=own,
            reference=reference_from,
            undecided=undecided,
            moved=moved,
            waits=waits,
        )
    if reference is not None:
        normalise_grid(runs, reference)
    else:
        for r in runs.values():
            r["ns_per_step_norm"] = None
    data = {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "created": utc_now(),
        "sweep": {**sweep_identity(source, baseline_path), "name": spec.name},
        "versions": {k: v for k, v in versions().items() if k in VERSION_KEYS},
        "machine": fingerprint(),
        "plugins": plugins_of(spec.methods),
        "reference": reference,
        "runs": runs,
        "timings": timing_records,
        "skipped": skipped,
    }
    return Recording(data, unstarted)
