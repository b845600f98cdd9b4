"""Brouwer's law for the Gauss-Legendre methods: compensated, plain, and a standard implementation;
then the phase of the compensated methods.

    python benchmarks/timing/brouwer.py [--case looping-nutation] [--order 4] [--step 2e-3]
                                        [--steps 1e7] [--starts 16] [--json OUT] [--plot PNG]
                                        [--phase-steps 1e7] [--no-energy] [--no-phase]
                                        [--phase-methods gauss6-kahan[,gauss4-kahan]]

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

The phase (Brouwer's second law: an angle's error grows like N^(3/2), same paper): the RMS over
the ensemble of each member's attitude error against its own start's exact solution, fitted like
the energy, for gauss4-kahan and gauss6-kahan. Two things besides round-off grow with N and
must stay below it over the fitted decades: the truncation error of the phase, N h^(p+1), which
needs a step much smaller than the energy study's (PHASE_STEPS below, with the arithmetic); and
any mismatch of the kernels' model with the exact one, which grows linearly: the kernels hold
1/I, rounded unless I is a power of two, so the phase is measured on a top of our own with
moments of inertia that are powers of two (PHASE_TOP, demo numbers); and the body-form
equations move a quaternion whose |q|^2 is 1 only to rounding as a top of weight M g l |q|^2,
which the study's exact reference takes into account (LagrangeTop.from_state, weight_by_norm).
The two exponents of each method are printed, against 0.5 +- 0.1 and 1.5 +- 0.15.

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
PHASE_TARGET = 1.5
PHASE_TOLERANCE = 0.15

# The phase study's top (our own demo numbers): a toy top whose moments are powers of two, so
# that 1/I is a double and the kernels integrate the very top the exact solution describes.
# Spin about 155 rad/s, nutation period 0.087 s.
PHASE_TOP = """
format_version = 1
name = "dyadic-top"
description = "A toy top whose moments of inertia are powers of two (exact 1/I in the kernels)."
horizon = 1.0
samples = 11

[body]
mass = 0.25
inertia = [0.000244140625, 0.000244140625, 0.0001220703125]
com = [0.0, 0.0, 0.03125]

[start]
theta = "30 deg"
phi = 0.0
psi = 0.0
theta_rate = 0.0
phi_rate = 2.0
psi_rate = "1500 rpm"
"""
# Steps of the phase study, per method. Three terms make up the RMS attitude error at N steps:
# round-off, R = rho h^2 N^(3/2) (the energy walks like sqrt(N) with a step per step of order
# h, the phase integrates it); truncation, T = kappa h^(2s+1) N (the s-stage method's phase error
# per step, w h = z with w about 155 rad/s: about C z^(2s+1), C = (s!)^2 / ((2s)! (2s+1)!), the
# error constant of its diagonal Pade approximant of exp; Hairer & Wanner, Solving ODEs II,
# sec. IV.3, from memory); and the floor F of about 1e-16 rad at which the exact solution and
# the angle between two attitudes are evaluated. Brouwer's law shows in a fit over the last two
# decades only if R is above both others from N / 100 on. Measured on this top (16 and 8
# starts, docs/ensembles-and-roundoff.md): rho is about 7e-15 (gauss6) and 8e-15 (gauss4) in
# s^-2; kappa about 1e7 s^-5 for gauss4. So for gauss6 at N = 1e7, h = 4e-5 puts R(1e5) at
# 4e-16, above F, with T about a tenth of R at the end; at 3e-5 the fit read 1.40 (8 starts),
# at 2e-5 R(1e5) is at F. In the RMS error gauss4 has no such step below N ~ 1e9: R(N / 100) > 3 F
# and T < R / 5 there need N / 100 > 1e7; at 1e-6 its error is R from about 3e7 steps on (slope
# 1.46 from 3e7 to 1e8 measured), F before. T is shared by starts this close, R is not: the
# spread about the members' mean has no T, and at 4e-5 its R is above F from N ~ 1e5 on.
# The truncation is what nearby starts share, so the phase is judged by the members' spread about
# their mean error (roundoff.py, rms_phase_spread), with starts PHASE_SPREAD rad apart: that
# takes gauss4-kahan's truncation out, and a step of 4e-5 serves both methods (measured with
# brouwer_phase_dd.py: 1.587 over N = 3.4e5 .. 3e7, 16 starts).
PHASE_STEPS = {"gauss4-kahan": 4e-5, "gauss6-kahan": 4e-5}
PHASE_SPREAD = 1e-12


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
    ap.add_argument("--phase-steps", type=float, default=1e7, help="steps of the phase study")
    ap.add_argument("--no-energy", action="store_true", help="skip the three-variant energy study")
    ap.add_argument("--no-phase", action="store_true", help="skip the phase study")
    ap.add_argument(
        "--phase-methods",
        default=",".join(PHASE_STEPS),
        help="comma-separated methods of the phase study (of: " + ", ".join(PHASE_STEPS) + ")",
    )
    args = ap.parse_args(argv)
    ok = True
    if not args.no_energy:
        ok = _energy_study(args) and ok
    if not args.no_phase:
        ok = _phase_study(args) and ok
    return 0 if ok else 1


def _phase_study(args) -> bool:
    """Both exponents of each compensated method on PHASE_TOP at its PHASE_STEPS step."""
    from topdrift.benchmarks.cases.schema import parse_case

    case = parse_case(PHASE_TOP, "dyadic-top.toml")
    ok = True
    print(f"\nphase: {case.name}, {args.starts} starts, {args.phase_steps:.3g} steps")
    chosen = [m.strip() for m in args.phase_methods.split(",") if m.strip()]
    unknown = [m for m in chosen if m not in PHASE_STEPS]
    if unknown or not chosen:
        print(f"--phase-methods: choose from {', '.join(PHASE_STEPS)}, got {args.phase_methods!r}")
        return False
    for method in chosen:
        step = PHASE_STEPS[method]
        t0 = time.perf_counter()
        r = roundoff_study(
            case,
            method,
            step,
            starts=args.starts,
            steps=args.phase_steps,
            form="body",
            spread=PHASE_SPREAD,
        )
        r["seconds"] = time.perf_counter() - t0
        n, phase, spread = r["n"], r["rms_phase_error"], r["rms_phase_spread"]
        for j in list(range(0, len(n), max(1, len(n) // 6))) + [len(n) - 1]:
            print(
                f"    N = {n[j]:>10d}   RMS dE/E = {r['rms_energy_error'][j]:.3e}   "
                f"RMS attitude error = {phase[j]:.3e} rad, spread {spread[j]:.3e} rad"
            )
        e, a, total = r["exponent"], r["phase_spread_exponent"], r["phase_exponent"]
        e_ok = e is not None and abs(e - TARGET) <= TOLERANCE
        a_ok = a is not None and abs(a - PHASE_TARGET) <= PHASE_TOLERANCE
        ok = ok and e_ok and a_ok
        es = "none" if e is None else f"{e:.3f}"
        as_ = "none" if a is None else f"{a:.3f}"
        ts = "none" if total is None else f"{total:.3f}"
        print(
            f"{method:>22s}: h = {step:g} s ({r['seconds']:.0f} s): energy exponent {es} "
            f"({'within' if e_ok else 'OUTSIDE'} {TARGET} +- {TOLERANCE}), phase round-off "
            f"exponent (spread about the mean) {as_} ({'within' if a_ok else 'OUTSIDE'} "
            f"{PHASE_TARGET} +- {PHASE_TOLERANCE}), RMS phase error exponent {ts}; fits over "
            f"N = {r['fit_range']} and {r['phase_spread_fit_range']}"
        )
        if r["phase_note"]:
            print(f"    note: {r['phase_note']}")
        defect = weight_defect(method)
        if abs(defect) > 1e-30:
            # A step of the method advances time by h sum(b): the phase then drifts by the
            # defect times the angle turned, linearly, whatever the round-off does.
            print(
                f"    the weights of {method} sum to 1 {defect:+.3g} (exact rationals): a linear "
                f"phase drift of {abs(defect):.2g} times the angle turned"
            )
        sys.stdout.flush()
    return ok


def weight_defect(method: str) -> float:
    """sum(b) - 1 of the weights a Gauss method's update takes, in exact rationals, rounded
    once: b_hi + b_lo for the compensated methods, b for the plain ones."""
    from fractions import Fraction

    from topdrift.integrators import get

    m = get(method)
    tab = m.tableau
    if m.info.compensated:
        pairs = zip(tab.b_hi, tab.b_lo, strict=True)
        total = sum(Fraction(float(h)) + Fraction(float(lo)) for h, lo in pairs)
    else:
        total = sum(Fraction(float(x)) for x in tab.b)
    return float(total - 1)


def _energy_study(args) -> bool:
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
    return ok


if __name__ == "__main__":
    sys.exit(main())
