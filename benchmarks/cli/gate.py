"""`topdrift gate [--baseline FILE] [--error-factor F] [--error-floor A] [--steps-tolerance R]
[--time-band B] [--accept-missing NAME ...] [--timings-anyway] [--wait-out N] [--json]`: rerun
a baseline's grid and fail (exit 1) on a regression."""

from __future__ import annotations

import json
from pathlib import Path

from topdrift.benchmarks.gate.compare import (
    DEFAULT_ERROR_FACTOR,
    DEFAULT_ERROR_FLOOR,
    DEFAULT_STEPS_TOLERANCE,
    DEFAULT_TIME_BAND,
)
from topdrift.benchmarks.gate.timing_settings import WAIT_DRIFT, WAIT_PAUSE_S


def add_parser(sub) -> None:
    p = sub.add_parser(
        "gate",
        help="rerun the baseline's grid and fail on a regression",
        description="Rerun the grid a baseline was recorded from and compare: every cell must "
        "keep its status, errors may not grow past a factor (above a round-off floor), step "
        "counts must match within a tolerance, and on a machine with the same fingerprint "
        "each timing's ratio to the reference workload must stay in a band where the rounds "
        "are tight enough to tell. Exit 0 pass, 1 regression, 2 bad input, 3 internal error.",
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
        help=f"a timing may change by this fraction either way (default {DEFAULT_TIME_BAND:g})",
    )
    p.add_argument(
        "--accept-missing",
        action="append",
        default=[],
        metavar="NAME",
        help="accept the baseline's cells of this method, case or run key that the rerun lacks "
        "(a method removed on purpose); repeatable; the report lists what it accepted",
    )
    p.add_argument(
        "--timings-anyway",
        action="store_true",
        help="time and compare the timings even when the machine's fingerprint differs from "
        "the baseline's",
    )
    p.add_argument(
        "--wait-out",
        type=int,
        default=0,
        metavar="N",
        help=f"when the machine's state has moved more than {WAIT_DRIFT * 100:.0f} %% since the "
        f"baseline (its reference workload's two kernels against each other), pause "
        f"{WAIT_PAUSE_S:g} s and time again, up to N times, keeping the timing nearest the "
        "baseline's state (default 0: no waiting)",
    )
    p.add_argument("--json", action="store_true", help="print the comparison as JSON")
    p.set_defaults(func=run)


def run(args) -> int:
    import sys

    from topdrift.benchmarks.errors import UserError
    from topdrift.benchmarks.gate.baseline_file import DEFAULT_FILE, encode_nonfinite, read_baseline
    from topdrift.benchmarks.gate.compare import (
        Thresholds,
        compare,
        format_report,
        machine_drift,
        undecided_timings,
    )
    from topdrift.benchmarks.gate.machine import differences, fingerprint
    from topdrift.benchmarks.gate.record import record, sweep_of
    from topdrift.benchmarks.gate.reference_workload import CLOCK, WORKLOAD, WORKLOAD_VERSION

    thresholds = Thresholds(
        args.error_factor, args.error_floor, args.steps_tolerance, args.time_band
    )
    thresholds.check()
    if args.wait_out < 0:
        raise UserError(f"gate: --wait-out must be 0 or more, not {args.wait_out}")
    path = Path(args.baseline) if args.baseline else DEFAULT_FILE
    baseline = read_baseline(path)
    spec, source = sweep_of(baseline, path)
    ref = baseline["reference"]
    unit = (ref["kernel"], ref["version"], ref["clock"])
    same_unit = unit == (WORKLOAD, WORKLOAD_VERSION, CLOCK)
    same_machine = not differences(baseline["machine"], fingerprint())
    # Timings that cannot be compared are not measured: on another machine the gate costs the
    # deterministic half only.
    timed = same_unit and (same_machine or args.timings_anyway)
    rounds = max((t["rounds"] for t in baseline["timings"].values()), default=0) or None
    now = record(
        spec,
        source,
        path,
        timing_from=baseline["timings"],
        reference_from=ref,
        timings=timed,
        rounds=rounds,
        undecided=undecided_timings(baseline["timings"], ref, thresholds),
        moved=lambda now_ref: machine_drift(ref, now_ref),
        waits=args.wait_out,
    )
    # None: compare decides by the fingerprints, and says why when it does not compare them.
    mode = False if not same_unit else (True if args.timings_anyway else None)
    result = compare(
        baseline,
        now.data,
        thresholds,
        unstarted=now.unstarted,
        accept=tuple(args.accept_missing),
        timings=mode,
    )
    if not same_unit:
        result.notes.append(
            f"timings not compared: the baseline's reference workload is {unit[0]} version "
            f"{unit[1]} ({unit[2]}), this topdrift's is {WORKLOAD} version {WORKLOAD_VERSION} "
            f"({CLOCK}); record the baseline again"
        )
    elif args.timings_anyway and not same_machine:
        result.notes.append(
            "--timings-anyway: timings compared across machines with different fingerprints"
        )
    if args.json:
        doc = encode_nonfinite({"baseline": str(path), **result.as_json()})  # inf/nan as strings
        print(json.dumps(doc, indent=2, allow_nan=False))
    else:
        t = thresholds
        m = baseline["machine"]
        header = (
            f"gate: {path} (recorded {baseline['created']}, sweep "
            f"{baseline['sweep']['name']!r}, on {m['cpu']} family {m['family']} model "
            f"{m['model']}) against a rerun now\n"
            f"limits: errors x{t.error_factor:g} above {t.error_floor:g}, counts "
            f"{t.steps_tolerance:.0%}, timings +-{t.time_band:.0%} where measurable"
        )
        if timed:
            r2 = now.data["reference"]
            header += (
                f"; reference workload {ref['scalar_ns']:.1f} and {ref['stages_ns']:.1f} ns per "
                f"step then, {r2['scalar_ns']:.1f} and {r2['stages_ns']:.1f} now"
            )
        print(format_report(result, header, thresholds), file=sys.stdout)
    return 1 if result.failed else 0
