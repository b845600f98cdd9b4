"""`topdrift pick CASE --target ERR`: the cheapest method and setting that meets a target error
over a horizon, with the evidence (every candidate's cheapest passing setting, verified).
`topdrift pick CASE --step H --steps N [--target ERR]`: at a fixed loop rate, every fixed-step
method at exactly that step, ranked by error and cost (choose/loop_rate.py)."""

from __future__ import annotations

import json
import sys


def add_parser(sub) -> None:
    p = sub.add_parser(
        "pick",
        help="recommend the cheapest method and setting for a target error",
        description="For each candidate method, search its step or tolerance (bisection on a "
        "log scale) for the cheapest run of CASE that keeps the error below TARGET over the "
        "horizon, verify it with a fresh run, and rank the methods by wall time. With --step "
        "and --steps (a fixed loop rate), run every fixed-step method at exactly that step "
        "instead, rank them by error, then wall time, and mark those that meet TARGET.",
    )
    p.add_argument("case", metavar="CASE", help="case file or library case name")
    p.add_argument(
        "--target",
        type=float,
        metavar="ERR",
        help="largest acceptable error (rad for axis and attitude, relative for energy); "
        "required unless --step is given",
    )
    p.add_argument(
        "--step",
        type=float,
        metavar="H",
        help="a fixed loop rate: run the fixed-step methods at exactly this step (s); needs "
        "--steps",
    )
    p.add_argument(
        "--steps",
        type=float,
        metavar="N",
        help="with --step: the number of steps (the horizon is H x N)",
    )
    p.add_argument(
        "--metric",
        choices=("axis", "attitude", "energy"),
        default="axis",
        help="figure-axis angle error (default: a pointing requirement), attitude error (the "
        "rotation angle of the whole attitude, spin phase included: a three-axis requirement) "
        "or relative energy error",
    )
    p.add_argument("--horizon", type=float, help="end time T (s); default from the case")
    p.add_argument(
        "--samples",
        type=int,
        help="samples the error is measured at (default: the case's sample interval over the "
        "horizon); a fixed step is at most the sample interval",
    )
    p.add_argument("--methods", nargs="+", metavar="NAME", help="candidate methods")
    p.add_argument("--form", choices=("euler", "body"), help="state form for every candidate")
    p.add_argument("--json", action="store_true", help="print the ranking as JSON")
    p.set_defaults(func=run)


def _setting(s: dict) -> str:
    return f"h={s['step']:.6g}" if "step" in s else f"rtol={s['rtol']:.3g}"


def run(args) -> int:
    from topdrift.benchmarks.cases.library import load_case
    from topdrift.benchmarks.cases.numbers import positive, whole
    from topdrift.benchmarks.cases.schema import MAX_SAMPLES
    from topdrift.benchmarks.choose.recommend import pick
    from topdrift.benchmarks.errors import UserError

    if (args.step is None) != (args.steps is None):
        raise UserError("--step and --steps go together: a fixed loop rate is a step and a count")
    if args.step is not None:
        return _run_at_step(args)
    if args.target is None:
        raise UserError("--target: required (or --step H --steps N for a fixed loop rate)")
    # Range-checked as `run` checks them, before the case is read.
    positive("--target", args.target)
    if args.samples is not None:
        whole("--samples", args.samples, 2, MAX_SAMPLES, "a whole number of samples")
    if args.horizon is not None:
        positive("--horizon", args.horizon)
    case = load_case(args.case)

    def report(line: str) -> None:
        if not args.json:
            print(f"  {line}", file=sys.stderr)

    result = pick(
        case,
        args.target,
        metric=args.metric,
        horizon=args.horizon,
        samples=args.samples,
        methods=args.methods,
        form=args.form,
        report=report,
        quiet=args.json,
    )
    if args.json:
        print(json.dumps(result, indent=2))
        return 0 if result["ranking"] else 1
    unit = "(relative)" if args.metric == "energy" else "rad"
    print(
        f"{case.name}: {args.metric} error <= {args.target:g} {unit} over {result['horizon']:g} s"
    )
    if result["reference"]:
        print(f"note: {result['reference']}")
    head = ("rank", "method", "form", "setting", "wall s", "forces", "evals", "achieved", "margin")
    rows = [head]
    for i, r in enumerate(result["ranking"], 1):
        margin = "-" if r["margin"] is None else f"{r['margin']:.2f}x"
        rows.append(
            (
                str(i),
                r["method"],
                r["form"],
                _setting(r["settings"]),
                f"{r['wall_s']:.3g}",
                str(r["force_evals"]),
                str(r["rhs_evals"]),
                f"{r['achieved']:.3g}" + ("*" if r.get("unresolved") else ""),
                margin,
            )
        )
    widths = [max(len(row[k]) for row in rows) for k in range(len(rows[0]))]
    for row in rows if len(rows) > 1 else []:  # no header over an empty ranking
        print("  ".join(c.ljust(w) for c, w in zip(row, widths, strict=True)).rstrip())
    if any(r.get("unresolved") for r in result["ranking"]):
        acc = result["reference_accuracy"]["axis"]
        print(
            f"note: * below this case's verified reference accuracy of {acc:.2g} rad: that "
            "error is not resolved, only bounded by about the reference's accuracy"
        )
    capped = [r["method"] for r in result["ranking"] if r.get("capped")]
    if capped:
        interval = result["horizon"] / (result["samples"] - 1)
        print(
            f"note: {', '.join(capped)} stopped at the sample interval ({interval:g} s), not at "
            "the target; fewer --samples let a fixed step grow further"
        )
    for u in result["unreached"]:
        print(f"not ranked: {u['method']} ({u['form']}): {u['reason']}")
    if result["ranking"]:
        best = result["ranking"][0]
        print(f"recommended: {best['method']} ({best['form']}) at {_setting(best['settings'])}")
        return 0
    print("no candidate met the target")
    return 1


def _run_at_step(args) -> int:
    from topdrift.benchmarks.cases.library import load_case
    from topdrift.benchmarks.cases.numbers import positive, whole
    from topdrift.benchmarks.cases.schema import MAX_SAMPLES
    from topdrift.benchmarks.choose.loop_rate import pick_at_step
    from topdrift.benchmarks.choose.recommend import MAX_STEPS
    from topdrift.benchmarks.errors import UserError

    # Every number is checked before the case is read.
    positive("--step", args.step)
    steps = whole("--steps", args.steps, 1, MAX_STEPS, "a whole number of steps")
    if args.horizon is not None:
        raise UserError("--horizon: at a fixed loop rate the horizon is --step x --steps; drop it")
    if args.target is not None:
        positive("--target", args.target)
    if args.samples is not None:
        whole("--samples", args.samples, 2, MAX_SAMPLES, "a whole number of samples")
    case = load_case(args.case)

    def report(line: str) -> None:
        if not args.json:
            print(f"  {line}", file=sys.stderr)

    result = pick_at_step(
        case,
        args.step,
        steps,
        target=args.target,
        metric=args.metric,
        samples=args.samples,
        methods=args.methods,
        form=args.form,
        report=report,
    )
    meets = bool(result["meeting"]) if args.target is not None else bool(result["ranking"])
    if args.json:
        print(json.dumps(result, indent=2))
        return 0 if meets else 1
    unit = "rad" if args.metric == "axis" else "(relative)"
    print(
        f"{case.name}: fixed step h = {args.step:g} s, {steps} steps ({result['horizon']:g} s), "
        f"{args.metric} error {unit} over {result['samples']} samples"
    )
    if result["reference"]:
        print(f"note: {result['reference']}")
    if not result["step_exact"]:
        used = result["ranking"][0]["step"] if result["ranking"] else args.step
        print(f"note: the runs' step is {used!r}, the double nearest H x N / N on the sample grid")
    head = ["rank", "method", "form", "error", "wall s", "ns/step", "forces", "evals"]
    if args.target is not None:
        head.append(f"<= {args.target:g}")
    rows = [tuple(head)]
    for i, r in enumerate(result["ranking"], 1):
        row = [
            str(i),
            r["method"],
            r["form"],
            f"{r['achieved']:.3g}" + (" (kept)" if r["kept"] else ""),
            f"{r['wall_s']:.3g}",
            f"{r['ns_per_step']:.3g}",
            str(r["force_evals"]),
            str(r["rhs_evals"]),
        ]
        if args.target is not None:
            row.append("yes" if r["meets"] else "no")
        rows.append(tuple(row))
    widths = [max(len(row[k]) for row in rows) for k in range(len(rows[0]))]
    for row in rows if len(rows) > 1 else []:
        print("  ".join(c.ljust(w) for c, w in zip(row, widths, strict=True)).rstrip())
    for r in result["failed"]:
        print(f"not ranked: {r['method']} ({r['form']}): ended {r['status']} at this step")
    for u in result["unreached"]:
        print(f"not ranked: {u['method']} ({u['form']}): {u['reason']}")
    if result["not_candidates"] and not args.methods:
        print(
            "note: adaptive methods choose their own steps and are no candidates at a fixed "
            f"loop rate ({', '.join(result['not_candidates'])})"
        )
    if any(r["kept"] for r in result["ranking"]):
        print("note: (kept): the method keeps the energy by construction; its error is round-off")
    if args.target is not None:
        if result["meeting"]:
            meeting = [r for r in result["ranking"] if r["meets"]]
            cheapest = min(meeting, key=lambda r: (r["wall_s"], r["force_evals"]))
            print(f"meet the target: {len(meeting)} of {len(result['ranking'])} ranked")
            print(
                f"recommended: {cheapest['method']} ({cheapest['form']}), the quickest that meets "
                f"the target at this step ({cheapest['ns_per_step']:.3g} ns a step); the most "
                f"accurate: {meeting[0]['method']} ({meeting[0]['form']})"
            )
            return 0
        print("no candidate met the target at this step")
        return 1
    if result["ranking"]:
        best = result["ranking"][0]
        print(f"most accurate at this step: {best['method']} ({best['form']})")
        return 0
    print("no candidate ran to the end at this step")
    return 1
