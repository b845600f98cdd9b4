"""Brouwer's law for the Gauss-Legendre methods: plain and compensated summation side by side.

    python benchmarks/timing/brouwer.py [--case looping-nutation] [--order 4] [--step 2e-3]
                                        [--steps 1e7] [--starts 16] [--json OUT] [--plot PNG]

Runs the round-off study (topdrift.benchmarks.roundoff) for gaussK and gaussK-kahan on the same
ensemble of perturbed starts in the body form, where the energy is a quadratic invariant that the
methods keep exactly, so that its error is pure round-off. Prints both RMS curves, both fitted
exponents and the verdict against the target 0.5 +- 0.1 for the compensated method (Brouwer's
law: D. Brouwer, Astron. J. 46 (1937) 149; the target and the conditions, >= 16 starts and
>= 10^7 steps, as in E. Hairer, R. I. McLachlan, A. Razakarivony, BIT 48 (2008) 231-243, from
memory). The plain method is reported beside it, with no target: without compensation its
per-step error is larger, and whether it also grows like sqrt(N) depends on the rounding of
y_n + increment being unbiased. The signed mean over the starts is printed beside the RMS: a
shared bias shows as |mean| near the RMS, a random walk as |mean| near RMS / sqrt(starts). Exit
status 1 if the compensated exponent misses the target.

At the defaults this takes several minutes per method on two cores.
"""

from __future__ import annotations

import argparse
import json
import sys
import time

from topdrift.benchmarks.library import load_case
from topdrift.benchmarks.roundoff import plot_roundoff, roundoff_study

TARGET = 0.5
TOLERANCE = 0.1


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--case", default="looping-nutation")
    ap.add_argument("--order", type=int, choices=(4, 6), default=4)
    ap.add_argument("--step", type=float, default=2e-3)
    ap.add_argument("--steps", type=float, default=1e7)
    ap.add_argument("--starts", type=int, default=16)
    ap.add_argument("--json", metavar="OUT", help="write both results here")
    ap.add_argument("--plot", metavar="PNG", help="write both growth curves here")
    args = ap.parse_args(argv)
    case = load_case(args.case)
    results = []
    for method in (f"gauss{args.order}", f"gauss{args.order}-kahan"):
        t0 = time.perf_counter()
        r = roundoff_study(
            case, method, args.step, starts=args.starts, steps=args.steps, form="body"
        )
        r["seconds"] = time.perf_counter() - t0
        results.append(r)
        print(
            f"{method:>13s}: {r['starts']} starts, {r['steps']:.3g} steps of {r['step']:g} s "
            f"({r['seconds']:.0f} s)"
        )
        n, rms, mean = r["n"], r["rms_energy_error"], r["mean_energy_error"]
        rows = list(range(0, len(n), max(1, len(n) // 6)))
        for k in rows + ([len(n) - 1] if rows[-1] != len(n) - 1 else []):
            print(f"    N = {n[k]:>10d}   RMS dE/E = {rms[k]:.3e}   mean dE/E = {mean[k]:+.3e}")
        sys.stdout.flush()
    plain, comp = results
    print()
    ok = comp["exponent"] is not None and abs(comp["exponent"] - TARGET) <= TOLERANCE
    for r in results:
        e = "none" if r["exponent"] is None else f"{r['exponent']:.3f}"
        print(f"{r['method']:>13s}: growth exponent {e} (fit over N = {r['fit_range']})")
    print(
        f"verdict: {comp['method']} exponent "
        f"{'within' if ok else 'OUTSIDE'} {TARGET} +- {TOLERANCE} (Brouwer's law); "
        f"RMS at N = {comp['n'][-1]}: compensated {comp['rms_energy_error'][-1]:.2e}, "
        f"plain {plain['rms_energy_error'][-1]:.2e}"
    )
    if args.json:
        with open(args.json, "w") as f:
            json.dump(results, f, indent=2)
    if args.plot:
        plot_roundoff(results, args.plot)
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
