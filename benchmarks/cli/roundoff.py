"""`topdrift roundoff CASE --method M --step H`: how the energy error grows with the number of
steps at a step small enough for round-off to dominate; the exponent of the fit (Brouwer's law:
1/2), over an ensemble of perturbed starts, with a plot."""

from __future__ import annotations

import json


def add_parser(sub) -> None:
    p = sub.add_parser(
        "roundoff",
        help="fit the growth exponent of round-off in the energy over an ensemble of starts",
        description="Advance an ensemble of perturbed starts of CASE with one method and step, "
        "take the RMS relative energy error at log-spaced step counts (evaluated in 40-digit "
        "arithmetic), and fit its growth exponent over the last two decades: 1/2 is Brouwer's "
        "law of random round-off, 1 a systematic drift. Use a step at which truncation is below "
        "round-off (for Gauss-Legendre methods in the body form, energy has no truncation "
        "error at all).",
    )
    p.add_argument("case", metavar="CASE", help="case file or library case name")
    p.add_argument("--method", required=True, help="a splitting or Gauss-Legendre method")
    p.add_argument("--step", type=float, required=True, help="step (s)")
    p.add_argument("--starts", type=int, default=16, help="ensemble size (default 16)")
    p.add_argument("--steps", type=float, default=1e7, help="steps (default 1e7)")
    p.add_argument(
        "--spread",
        type=float,
        default=1e-6,
        help="standard deviation of the start-angle perturbations (rad)",
    )
    p.add_argument(
        "--form",
        choices=("euler", "body"),
        help="state form (default: the method's own default, the Euler form for a symmetric "
        "top; a Gauss-Legendre method keeps the energy to round-off only in the body form)",
    )
    p.add_argument("--plot", metavar="PNG", help="write the growth plot here")
    p.add_argument("--json", action="store_true", help="print the result as JSON")
    p.set_defaults(func=run)


def run(args) -> int:
    from topdrift.benchmarks.cases.library import load_case
    from topdrift.benchmarks.choose.roundoff import plot_roundoff, roundoff_study
    from topdrift.benchmarks.errors import UserError

    case = load_case(args.case)
    if not args.spread >= 0.0:
        raise UserError(f"--spread: must be zero or positive, got {args.spread}")
    r = roundoff_study(
        case,
        args.method,
        args.step,
        starts=args.starts,
        steps=args.steps,
        spread=args.spread,
        form=args.form,
    )
    if args.plot:
        plot_roundoff([r], args.plot)
    if args.json:
        print(json.dumps(r, indent=2))
        return 0
    print(
        f"{r['case']}: {r['method']} ({r['form']}), h = {r['step']:g} s, {r['starts']} starts,"
        f" {r['steps']:g} steps"
    )
    for n, e in list(zip(r["n"], r["rms_energy_error"], strict=True))[:: max(1, len(r["n"]) // 8)]:
        print(f"  N = {n:>10d}   RMS |dE/E| = {e:.3e}")
    if r["exponent"] is None:
        print("too few points above zero for a fit")
        return 1
    lo, hi = r["fit_range"]
    print(f"growth exponent {r['exponent']:.3f} (fit over N = {lo} .. {hi}); Brouwer's law: 0.5")
    if args.plot:
        print(f"plot: {args.plot}")
    return 0
