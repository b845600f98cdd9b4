"""Brouwer's law for the Gauss-Legendre methods: compensated, plain, and a standard implementation.

    python benchmarks/timing/brouwer.py [--case looping-nutation] [--order 4] [--step 2e-3]
                                        [--steps 1e7] [--starts 16] [--json OUT] [--plot PNG]

Runs the round-off study (topdrift.benchmarks.choose.roundoff) on one ensemble of perturbed
starts in the body form, where the energy is a quadratic invariant that Gauss methods keep
exactly, so that its error is pure round-off, for three variants of the K-stage method:

  gaussK-kahan   the registered compensated method: tableau of doubles that satisfies the
                 symplecticity condition exactly, stages rounded to the double nearest the exact
                 stage solution, every rounding of the update carried in the compensation.
  gaussK         its plain twin: the same, with the update y_n + h sum b_i F_i rounded.
  standard       a standard implementation: correctly rounded tableau (misses the symplecticity
                 condition by ~1e-17), plain summation; built here from the integrator's data,
                 not a registered method.

Target (the issue's): the compensated method grows like sqrt(N), fitted exponent 0.5 +- 0.1 over
>= 16 starts and >= 10^7 steps (Brouwer's law: D. Brouwer, Astron. J. 46 (1937) 149; E. Hairer,
R. I. McLachlan, A. Razakarivony, BIT 48 (2008) 231-243, from memory). Exit status 1 if it misses.

What to expect of the other two, and why. Rounding y_n + increment to nearest is an unbiased
random error, so the plain twin is a random walk too, with a larger step (about 4 times here):
exponent near 0.5 unless another rounding in it is biased. The near-linear growth reported for
a standard implementation comes from systematic defects, and the contrast keeps the one that
costs nothing to have: correctly rounded coefficients change the energy by
-h^2 sum m_ij F_i.C F_j every step with the same sign (m the ~1e-17 defect of the condition),
which outgrows the random walk within a few thousand steps. Its stages are still rounded as in
the registered methods; a real standard implementation also stops the iteration at a tolerance,
which adds a second systematic term, so this contrast understates its drift if anything. The
signed mean over the starts is printed beside the RMS: a shared bias shows as |mean| near the
RMS, a random walk as |mean| near RMS / sqrt(starts).

At the defaults this takes a few minutes per variant on two cores.
"""

from __future__ import annotations

import argparse
import json
import sys
import time

from topdrift.benchmarks.cases.library import load_case
from topdrift.benchmarks.choose.roundoff import plot_roundoff, roundoff_study
from topdrift.integrators.gauss.methods import GaussMethod
from topdrift.integrators.gauss.tableau import GAUSS2, GAUSS3, Tableau

TARGET = 0.5
TOLERANCE = 0.1


def standard_implementation(order: int) -> GaussMethod:
    """gaussK with the correctly rounded tableau and plain summation (not registered)."""
    table = GAUSS2 if order == 4 else GAUSS3
    m = GaussMethod(f"gauss{order}-rounded-tableau", table, compensated=False)
    m.tableau = Tableau(table, exact_symplectic=False)
    return m


def _report(r: dict) -> None:
    print(
        f"{r['method']:>22s}: {r['starts']} starts, {r['steps']:.3g} steps of {r['step']:g} s "
        f"({r['seconds']:.0f} s)"
    )
    n, rms, mean = r["n"], r["rms_energy_error"], r["mean_energy_error"]
    rows = list(range(0, len(n), max(1, len(n) // 6)))
    for k in rows + ([len(n) - 1] if rows[-1] != len(n) - 1 else []):
        print(f"    N = {n[k]:>10d}   RMS dE/E = {rms[k]:.3e}   mean dE/E = {mean[k]:+.3e}")
    sys.stdout.flush()


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--case", default="looping-nutation")
    ap.add_argument("--order", type=int, choices=(4, 6), default=4)
    ap.add_argument("--step", type=float, default=2e-3)
    ap.add_argument("--steps", type=float, default=1e7)
    ap.add_argument("--starts", type=int, default=16)
    ap.add_argument("--json", metavar="OUT", help="write the three results here")
    ap.add_argument("--plot", metavar="PNG", help="write the three growth curves here")
    args = ap.parse_args(argv)
    case = load_case(args.case)
    k = args.order
    results = []
    for method in (f"gauss{k}-kahan", f"gauss{k}", standard_implementation(k)):
        t0 = time.perf_counter()
        r = roundoff_study(
            case, method, args.step, starts=args.starts, steps=args.steps, form="body"
        )
        r["seconds"] = time.perf_counter() - t0
        results.append(r)
        _report(r)
    comp, plain, standard = results
    print()
    ok = comp["exponent"] is not None and abs(comp["exponent"] - TARGET) <= TOLERANCE
    for r, what in (
        (comp, f"target {TARGET} +- {TOLERANCE}"),
        (plain, "plain twin, no target"),
        (standard, "standard implementation (correctly rounded tableau, plain sum)"),
    ):
        e = "none" if r["exponent"] is None else f"{r['exponent']:.3f}"
        print(
            f"{r['method']:>22s}: growth exponent {e} (fit over N = {r['fit_range']}); "
            f"RMS at N = {r['n'][-1]}: {r['rms_energy_error'][-1]:.2e}, "
            f"mean {r['mean_energy_error'][-1]:+.2e}; {what}"
        )
    print(
        f"verdict: {comp['method']} exponent {comp['exponent']:.3f} "
        f"{'within' if ok else 'OUTSIDE'} {TARGET} +- {TOLERANCE} (Brouwer's law)"
    )
    if args.json:
        with open(args.json, "w") as f:
            json.dump(results, f, indent=2)
    if args.plot:
        plot_roundoff(results, args.plot)
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
