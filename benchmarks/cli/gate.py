"""`topdrift gate [--baseline FILE] [--error-factor F] [--error-floor A] [--steps-tolerance R]
[--time-band B] [--json]`: rerun a baseline's grid and fail (exit 1) on a regression."""

from __future__ import annotations

import json
from pathlib import Path

from topdrift.benchmarks.gate.compare import (
    DEFAULT_ERROR_FACTOR,
    DEFAULT_ERROR_FLOOR,
    DEFAULT_STEPS_TOLERANCE,
    DEFAULT_TIME_BAND,
)


def add_parser(sub) -> None:
    p = sub.add_parser(
        "gate",
        help="rerun the baseline's grid and fail on a regression",
        description="Rerun the grid a baseline was recorded from and compare: statuses must "
        "match, errors may not grow past a factor (above a round-off floor), step counts must "
        "match within a tolerance, normalised timings must stay in a band. Exit 1 on a "
        "regression, 0 otherwise, 2 on bad input.",
    )
    p.add_argument(
        "--baseline", metavar="FILE", help="baseline file (default results/baseline.json)"
    )
    p.add_argument(
        "--error-factor",
        type=float,
        default=DEFAULT_ERROR_FACTOR,
        metavar="F",
        help=f"an error may grow by this factor (default {DEFAULT_ERROR_FACTOR:g})",
    )
    p.add_argument(
        "--error-floor",
        type=float,
        default=DEFAULT_ERROR_FLOOR,
        metavar="A",
        help=f"errors below this are round-off, all alike (default {DEFAULT_ERROR_FLOOR:g})",
    )
    p.add_argument(
        "--steps-tolerance",
        type=float,
        default=DEFAULT_STEPS_TOLERANCE,
        metavar="R",
        help=f"relative tolerance on step and evaluation counts (default "
        f"{DEFAULT_STEPS_TOLERANCE:g})",
    )
    p.add_argument(
        "--time-band",
        type=float,
        default=DEFAULT_TIME_BAND,
        metavar="B",
        help=f"normalised timings may be this fraction slower (default {DEFAULT_TIME_BAND:g})",
    )
    p.add_argument("--json", action="store_true", help="print the comparison as JSON")
    p.set_defaults(func=run)


def run(args) -> int:
    import sys

    from topdrift.benchmarks.gate.baseline_file import DEFAULT_FILE, encode_nonfinite, read_baseline
    from topdrift.benchmarks.gate.compare import Thresholds, compare, format_report
    from topdrift.benchmarks.gate.record import record
    from topdrift.benchmarks.sweep.spec import read_sweep

    thresholds = Thresholds(
        args.error_factor, args.error_floor, args.steps_tolerance, args.time_band
    )
    thresholds.check()
    path = Path(args.baseline) if args.baseline else DEFAULT_FILE
    baseline = read_baseline(path)
    spec = read_sweep(baseline["sweep"]["source"])
    now = record(spec, baseline["sweep"]["source"], timing_from=baseline["timings"])
    result = compare(baseline, now, thresholds)
    if args.json:
        doc = encode_nonfinite({"baseline": str(path), **result.as_json()})  # inf/nan as strings
        print(json.dumps(doc, indent=2, allow_nan=False))
    else:
        t = thresholds
        ca, cb = baseline["calibration"], now["calibration"]
        header = (
            f"gate: {path} (recorded {baseline['created']}, sweep "
            f"{baseline['sweep']['name']!r}) against a rerun now\n"
            f"limits: errors x{t.error_factor:g} above {t.error_floor:g}, counts "
            f"{t.steps_tolerance:.0%}, timings +{t.time_band:.0%}; calibration "
            f"{ca['ns_per_iteration']:.1f} ns per iteration then, {cb['ns_per_iteration']:.1f} now"
        )
        print(format_report(result, header), file=sys.stdout)
    return 1 if result.failed else 0
