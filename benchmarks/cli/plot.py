"""`topdrift plot FILE --kind KIND [--case C] [--run ID ...] [--out PNG]`: one figure of stored
runs. Reads the results file only."""

from __future__ import annotations

KINDS = ("work-precision", "drift", "theta", "axis-path")


def add_parser(sub) -> None:
    p = sub.add_parser(
        "plot",
        help="draw one figure (PNG) of the runs in a results file",
        description="Draw one figure of stored runs. work-precision: error against cost per "
        "method, for a case. drift, theta, axis-path: the runs given with --run, or every run "
        "of the case.",
    )
    p.add_argument("file", metavar="FILE", help="HDF5 run store (e.g. results/runs.h5)")
    p.add_argument("--kind", required=True, choices=KINDS, help="which figure")
    p.add_argument("--case", help="case name (needed when the file holds several cases)")
    p.add_argument(
        "--run",
        action="append",
        metavar="RUN_ID",
        help="a run id or unique prefix; repeat for several (not for work-precision)",
    )
    p.add_argument(
        "--error",
        choices=("axis", "attitude", "energy"),
        help="work-precision error: figure-axis angle from the exact solution, attitude "
        "(rotation) angle from it, or relative energy error (default: axis where the case has "
        "an exact solution)",
    )
    p.add_argument(
        "--cost",
        choices=("wall", "cpu", "evals", "force", "both"),
        default="both",
        help="work-precision cost: wall time, CPU time, evaluations (right-hand sides or "
        "sub-flows), force (torque) evaluations, or both wall time and force evaluations side "
        "by side (default)",
    )
    p.add_argument(
        "--out",
        metavar="PNG",
        help="figure file, .png (default: CASE-KIND.png in the current directory); never written "
        "over a file topdrift did not write",
    )
    p.set_defaults(func=run)


def _guarded(out: str, results: str) -> str:
    from topdrift.benchmarks.choose.figure_files import check_figure_path

    check_figure_path(out, "--out", keep=(results,))
    return out


def run(args) -> int:
    from topdrift.benchmarks.stopping import Interrupted

    saved: list[str] = []
    try:
        return _plot(args, saved)
    except Interrupted as exc:
        # A figure is renamed into place only when complete (choose/figure_files.py).
        raise exc.saying(f"{saved[0]} written" if saved else "no figure written") from None


def _plot(args, saved: list[str]) -> int:
    from topdrift.benchmarks.choose import analysis, plots
    from topdrift.benchmarks.choose.selection import (
        load_labelled,
        pick_case,
        pick_error,
        pick_runs,
        slug,
    )
    from topdrift.benchmarks.errors import UserError
    from topdrift.benchmarks.store.format import STATUS_INCOMPLETE
    from topdrift.benchmarks.store.reader import load_records

    if args.out:  # refused before the results file is read
        _guarded(args.out, args.file)
    everything = load_records(args.file)
    records = [r for r in everything if r["status"] != STATUS_INCOMPLETE]
    if args.kind == "work-precision":
        if args.run:
            raise UserError("--run: a work-precision diagram shows every run of a case; use --case")
        case = pick_case(records, args.case, args.file)
        error = pick_error(records, case, args.error)
        costs = ("wall", "force") if args.cost == "both" else (args.cost,)
        if not any(analysis.work_points(records, case, error, c) for c in costs):
            what = " or ".join(analysis.COSTS[c][1] for c in costs)
            raise UserError(f"case '{case}' has no ok run with both an {error} error and a {what}")
        out = _guarded(args.out or f"{slug(case)}-{args.kind}.png", args.file)
        plots.work_precision(records, case, out, error=error, costs=costs)
    else:
        if args.error is not None or args.cost != "both":
            raise UserError(f"--error and --cost belong to work-precision, not {args.kind}")
        case, chosen = pick_runs(everything, args.run, args.case, args.file)
        runs = load_labelled(args.file, records, chosen, strict=bool(args.run))
        if not runs:
            raise UserError(f"none of the chosen runs of '{case}' has samples yet")
        name = slug(case) if not args.run or len(runs) > 1 else slug(runs[0]["record"]["run_id"])
        out = _guarded(args.out or f"{name}-{args.kind}.png", args.file)
        draw = {"drift": plots.drift, "theta": plots.theta, "axis-path": plots.axis_path}
        draw[args.kind](runs, case, out)
    saved.append(out)
    print(out)
    return 0
