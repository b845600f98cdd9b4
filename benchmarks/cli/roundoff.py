"""`topdrift roundoff CASE --method M --step H`: how the energy error and the phase (the attitude
error against each start's exact solution) grow with the number of steps at a step small enough
for round-off to dominate; the exponents of the fits (Brouwer's laws: 1/2 and 3/2), over an
ensemble of perturbed starts, with a plot."""

from __future__ import annotations

import json


def add_parser(sub) -> None:
    p = sub.add_parser(
        "roundoff",
        help="fit the growth exponents of round-off in the energy and the phase over an "
        "ensemble of starts",
        description="Advance an ensemble of perturbed starts of CASE with one method and step, "
        "take the RMS relative energy error at log-spaced step counts (evaluated in 40-digit "
        "arithmetic), and fit its growth exponent over the last two decades: 1/2 is Brouwer's "
        "law of random round-off, 1 a systematic drift. For a Lagrange top the same for the "
        "phase, the RMS attitude error against each start's exact solution: 3/2 is Brouwer's "
        "law for an angle. That error holds the truncation of the phase too, which grows "
        "like N; the members' spread about their mean error leaves it out (nearby starts share "
        "it) and keeps their round-off: with --spread 1e-12 its exponent is the phase's "
        "round-off law at any step where the members stay that close. For the energy use a "
        "step at which truncation is below round-off (for Gauss-Legendre methods in the body "
        "form, energy has no truncation error at all).",
    )
    p.add_argument("case", metavar="CASE", help="case file or library case name")
    p.add_argument("--method", required=True, help="a splitting or Gauss-Legendre method")
    p.add_argument("--step", type=float, required=True, help="step (s)")
    p.add_argument("--starts", type=int, default=16, help="ensemble size, 2 .. 10000 (default 16)")
    p.add_argument(
        "--steps",
        type=float,
        default=1e7,
        help="steps, a whole number from 1000 to 1e12, at most 1e12 over all starts (default 1e7)",
    )
    p.add_argument(
        "--spread",
        type=float,
        default=1e-6,
        help="standard deviation of the start-angle perturbations (rad); 1e-12 for the "
        "phase spread",
    )
    p.add_argument(
        "--form",
        choices=("euler", "body"),
        help="state form (default: the method's own default, the Euler form for a symmetric "
        "top; a Gauss-Legendre method keeps the energy to round-off only in the body form)",
    )
    p.add_argument(
        "--plot",
        metavar="PNG",
        help="write the growth plot here (a .png file; never over a file topdrift did not write)",
    )
    p.add_argument("--json", action="store_true", help="print the result as JSON")
    p.set_defaults(func=run)


TABLE_ROWS = 8  # about this many rows of the points, always ending with the last one


def table_rows(points: int) -> list[int]:
    """Indices of the points the table prints: every k-th from the first, and the last, which
    is the last step count the fits use."""
    rows = list(range(0, points, max(1, points // TABLE_ROWS)))
    if points and rows[-1] != points - 1:
        rows.append(points - 1)
    return rows


def run(args) -> int:
    from topdrift.benchmarks.cases.library import load_case
    from topdrift.benchmarks.cases.numbers import non_negative, positive
    from topdrift.benchmarks.choose.figure_files import check_figure_path
    from topdrift.benchmarks.choose.roundoff import check_size, plot_roundoff, roundoff_study
    from topdrift.benchmarks.stopping import Interrupted

    # Everything that can be refused is refused before the case is read or a start made.
    positive("--step", args.step)
    non_negative("--spread", args.spread)
    check_size(args.starts, args.steps)
    if args.plot:
        check_figure_path(args.plot, "--plot")
    case = load_case(args.case)
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
        try:
            plot_roundoff([r], args.plot)
        except Interrupted as exc:
            raise exc.saying("the study was complete, the plot not written") from None
    if args.json:
        print(json.dumps(r, indent=2))
        return 0
    print(
        f"{r['case']}: {r['method']} ({r['form']}), h = {r['step']:g} s, {r['starts']} starts,"
        f" {r['steps']:g} steps"
    )
    phase, spread = r["rms_phase_error"], r["rms_phase_spread"]
    for k in table_rows(len(r["n"])):
        angle = (
            ""
            if phase is None
            else f"   RMS attitude error = {phase[k]:.3e} rad, spread {spread[k]:.3e}"
        )
        print(f"  N = {r['n'][k]:>10d}   RMS |dE/E| = {r['rms_energy_error'][k]:.3e}{angle}")
    if r["exponent"] is None:
        print("too few points above zero for a fit")
        return 1
    lo, hi = r["fit_range"]
    print(
        f"energy growth exponent {r['exponent']:.3f} (fit over N = {lo} .. {hi}); "
        "Brouwer's law: 0.5"
    )
    if r["phase_exponent"] is not None:
        lo, hi = r["phase_fit_range"]
        print(
            f"phase growth exponent {r['phase_exponent']:.3f} (attitude error, fit over N = {lo} "
            f".. {hi}); Brouwer's law: 1.5"
        )
    if r["phase_spread_exponent"] is not None:
        lo, hi = r["phase_spread_fit_range"]
        print(
            f"phase round-off exponent {r['phase_spread_exponent']:.3f} (the members' spread "
            f"about their mean error, fit over N = {lo} .. {hi}); Brouwer's law: 1.5"
        )
    else:
        print(f"phase: not fitted: {r['phase_unknown']}")
    if r["phase_note"]:
        print(f"note: {r['phase_note']}")
    if args.plot:
        print(f"plot: {args.plot}")
    return 0
