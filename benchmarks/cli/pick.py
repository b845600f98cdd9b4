"""`topdrift pick CASE --target ERR`: the cheapest method and setting that meets a target error
over a horizon, with the evidence (every candidate's cheapest passing setting, verified)."""

from __future__ import annotations

import json
import sys


def add_parser(sub) -> None:
    p = sub.add_parser(
        "pick",
        help="recommend the cheapest method and setting for a target error",
        description="For each candidate method, search its step or tolerance (bisection on a "
        "log scale) for the cheapest run of CASE that keeps the error below TARGET over the "
        "horizon, verify it with a fresh run, and rank the methods by wall time.",
    )
    p.add_argument("case", metavar="CASE", help="case file or library case name")
    p.add_argument(
        "--target",
        type=float,
        required=True,
        metavar="ERR",
        help="largest acceptable error (rad for axis and attitude, relative for energy)",
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
