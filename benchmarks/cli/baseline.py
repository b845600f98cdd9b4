"""`topdrift baseline [--out FILE] [--sweep SWEEP] [--force]`: record the regression baseline
that `topdrift gate` compares against (format in gate/baseline_file.py and docs/gate.md)."""

from __future__ import annotations

import time
from pathlib import Path


def add_parser(sub) -> None:
    p = sub.add_parser(
        "baseline",
        help="record the regression baseline the gate compares against",
        description="Run a sweep's grid in this one process, in memory and in a fixed order, "
        "time one longer run per method and form against a calibration loop, and write the "
        "deterministic metrics, the normalised timings and the versions to a JSON file.",
    )
    p.add_argument("--out", metavar="FILE", help="baseline file (default results/baseline.json)")
    p.add_argument(
        "--sweep",
        default="quick",
        metavar="SWEEP",
        help="sweep file, or a shipped sweep name (default quick)",
    )
    p.add_argument("--force", action="store_true", help="replace an existing baseline file")
    p.set_defaults(func=run)


def run(args) -> int:
    import sys

    from topdrift.benchmarks.errors import UserError
    from topdrift.benchmarks.gate.baseline_file import DEFAULT_FILE, write_baseline
    from topdrift.benchmarks.gate.record import record
    from topdrift.benchmarks.sweep.spec import read_sweep

    out = Path(args.out) if args.out else DEFAULT_FILE
    if out.exists() and not args.force:  # refuse before a minute of work, not after
        raise UserError(f"{out}: exists; pass --force to record a new baseline over it")
    spec = read_sweep(args.sweep)
    t0 = time.perf_counter()
    data = record(spec, args.sweep)
    broken = [
        f"{section} {key}: {r['detail']}"
        for section in ("runs", "timings")
        for key, r in data[section].items()
        if r["status"] == "error"
    ]
    if broken:  # a run that raised is a bug to fix, not a number to gate against
        print(f"baseline: not written: {len(broken)} could not be computed", file=sys.stderr)
        for line in broken:
            print(f"  {line}", file=sys.stderr)
        return 1
    write_baseline(data, out, force=args.force)
    took = time.perf_counter() - t0
    cal = data["calibration"]
    print(
        f"baseline: {len(data['runs'])} runs and {len(data['timings'])} timings of sweep "
        f"{spec.name!r} written to {out} in {took:.1f} s (calibration "
        f"{cal['ns_per_iteration']:.1f} ns per iteration)",
        file=sys.stdout,
    )
    for line in data["skipped"]:
        print(f"skipped {line}", file=sys.stderr)
    return 0
