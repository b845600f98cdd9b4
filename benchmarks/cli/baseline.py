"""`topdrift baseline [--out FILE] [--sweep SWEEP] [--rounds N] [--force]`: record the regression
baseline that `topdrift gate` compares against (format in gate/baseline_file.py and
docs/gate.md)."""

from __future__ import annotations

import math
import time
from pathlib import Path

MIN_ROUNDS = 4  # the fewest rounds on each side for a 95 % interval (shift_interval.py)


def add_parser(sub) -> None:
    from topdrift.benchmarks.gate.timing_settings import TIMING_ROUNDS

    p = sub.add_parser(
        "baseline",
        help="record the regression baseline the gate compares against",
        description="Run a sweep's grid in this one process, in memory and in a fixed order, "
        "time one longer run per method and form round by round beside a fixed reference "
        "workload, and write the deterministic metrics, the timing ratios, the versions and "
        "the machine's fingerprint to a JSON file. Exit 0 written, 1 not written (a run "
        "raised or gave NaN), 2 bad input, 3 internal error.",
    )
    p.add_argument("--out", metavar="FILE", help="baseline file (default results/baseline.json)")
    p.add_argument(
        "--sweep",
        default="quick",
        metavar="SWEEP",
        help="sweep file, or a shipped sweep name (default quick)",
    )
    p.add_argument(
        "--rounds",
        type=int,
        default=None,
        metavar="N",
        help=f"timing rounds (default {TIMING_ROUNDS}, at least {MIN_ROUNDS}); the gate times "
        "as many",
    )
    p.add_argument("--force", action="store_true", help="replace an existing baseline file")
    p.set_defaults(func=run)


def run(args) -> int:
    import sys

    from topdrift.benchmarks.errors import UserError
    from topdrift.benchmarks.gate.baseline_file import DEFAULT_FILE, write_baseline
    from topdrift.benchmarks.gate.measure import ERROR_METRICS
    from topdrift.benchmarks.gate.record import record
    from topdrift.benchmarks.stopping import Interrupted
    from topdrift.benchmarks.sweep.spec import read_sweep

    if args.rounds is not None and args.rounds < MIN_ROUNDS:
        raise UserError(
            f"--rounds: at least {MIN_ROUNDS} (a 95 % interval of a timing change needs "
            f"{MIN_ROUNDS} rounds on each side), got {args.rounds}"
        )
    out = Path(args.out) if args.out else DEFAULT_FILE
    if out.exists() and not args.force:  # refuse before a minute of work, not after
        raise UserError(f"{out}: exists; pass --force to record a new baseline over it")
    if out.is_dir():
        raise UserError(f"{out}: is a folder; give a file name")
    spec = read_sweep(args.sweep)
    t0 = time.perf_counter()
    try:
        data = record(spec, args.sweep, out, rounds=args.rounds).data
    except Interrupted as exc:
        raise exc.saying(
            f"nothing written ({out} is written only once every run and timing is measured)"
        ) from None
    broken = [
        f"{section} {key}: {r['detail']}"
        for section in ("runs", "timings")
        for key, r in data[section].items()
        if r["status"] == "error"
    ]
    broken += [  # a NaN in the baseline would make the gate blind to that metric
        f"runs {key}: {name} is NaN"
        for key, r in data["runs"].items()
        for name in ERROR_METRICS
        if isinstance(r[name], float) and math.isnan(r[name])
    ]
    if broken:  # a run that raised is a bug to fix, not a number to gate against
        print(f"baseline: not written: {len(broken)} could not be computed", file=sys.stderr)
        for line in broken:
            print(f"  {line}", file=sys.stderr)
        return 1
    write_baseline(data, out, force=args.force)
    took = time.perf_counter() - t0
    ref = data["reference"]
    print(
        f"baseline: {len(data['runs'])} runs and {len(data['timings'])} timings of sweep "
        f"{spec.name!r} written to {out} in {took:.1f} s (reference workload "
        f"{ref['scalar_ns']:.1f} and {ref['stages_ns']:.1f} ns per step; machine "
        f"{data['machine']['cpu']}, family {data['machine']['family']}, model "
        f"{data['machine']['model']})",
        file=sys.stdout,
    )
    for line in data["skipped"]:
        print(f"skipped {line}", file=sys.stderr)
    return 0
