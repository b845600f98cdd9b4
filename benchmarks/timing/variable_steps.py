"""What the variable steps buy: cost at equal error against the fixed-step twin.

    python benchmarks/timing/variable_steps.py [--cases pole-passage,sleeping-below,cusped-release]
                                               [--ladder N]
    python benchmarks/timing/variable_steps.py --per-step 1000000 [--cases pole-passage]

For each case (Euler form, the case's horizon and sample times) and each table (leapfrog,
leapfrog-s4, leapfrog-kl6) its three runs: the fixed-step method, the time-reversible twin
(-sundman, Hairer-Soderlind step density) and the symplectic twin (-sundman-sym, extended phase
space): a ladder of steps, halving from the sample interval, the three methods interleaved at
each rung; for each run the largest attitude error over the samples against the exact
Lagrange-top solution (models/exact.py), the cost in force evaluations (the torques, counted by
the kernels: C_FORCE_EVALS, the samples' own steps included; the -sym twins' Newton iterations
evaluate only the monitor and are not in it) and the wall time of the run (this process, the CPU
printed). The gain of a variable-step run is the fixed-step method's cost at the same error
(log-log interpolation between the two fixed-step runs around it) over its own cost, in kicks
and in seconds; printed as a range over the runs whose errors lie inside the fixed-step ladder
and between 1e-10 (round-off) and 1e-2 (not yet asymptotic).
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np

from topdrift.benchmarks.cases.library import load_case
from topdrift.benchmarks.gate.machine import fingerprint
from topdrift.integrators import C_FORCE_EVALS, C_STEPS, ST_OK, get
from topdrift.models.exact import LagrangeTop
from topdrift.models.forms import FORM_EULER

TRIPLES = (("leapfrog", "leapfrog-sundman", "leapfrog-sundman-sym"),
           ("leapfrog-s4", "leapfrog-s4-sundman", "leapfrog-s4-sundman-sym"),
           ("leapfrog-kl6", "leapfrog-kl6-sundman", "leapfrog-kl6-sundman-sym"))  # fmt: skip
E_LO, E_HI = 1e-10, 1e-2
# Halvings of the step from the sample interval, per case: the fixed-step methods need steps
# far below the sample interval to pass the pole (pole-passage); the others reach round-off
# sooner. A ladder stops early once two runs in a row are at round-off (below E_LO).
LADDER = {"pole-passage": 17, "sleeping-below": 10, "cusped-release": 10}


def cpu() -> str:
    """The CPU as the gate fingerprints it: model name, family and model."""
    fp = fingerprint()
    return f"{fp['cpu']} (family {fp['family']}, model {fp['model']})"


def attitude_error(y: np.ndarray, ref: np.ndarray) -> float:
    """Largest Euler-angle error, phi and psi wrapped to (-pi, pi]."""
    d = np.array([y[0] - ref[0], y[1] - ref[1], y[2] - ref[2]])
    d[[0, 2]] = np.mod(d[[0, 2]] + math.pi, 2 * math.pi) - math.pi
    return float(np.max(np.abs(d)))


def one_run(name: str, case, step: float, times: np.ndarray, ref: np.ndarray):
    """(largest attitude error over the samples, force evaluations, wall seconds of the
    stepping); inf when the run fails."""
    body = case.body
    st = get(name).start(FORM_EULER, body.params(), 0.0, case.euler_state(), {"step": step})
    err = 0.0
    wall = 0.0
    for t, r in zip(times[1:], ref[1:], strict=True):
        t0 = time.perf_counter()
        status = st.advance_to(t)
        wall += time.perf_counter() - t0
        if status != ST_OK:
            return math.inf, int(st.counters[C_FORCE_EVALS]), wall
        err = max(err, attitude_error(st.y, r))
    return err, int(st.counters[C_FORCE_EVALS]), wall


def asymptotic(rows: list, order: int) -> list:  # rows of (error, cost)
    """The runs of a ladder where truncation error dominates: below E_HI, above E_LO, and each
    at least 2^(order - 1) times smaller than the one before (half the nominal halving
    factor): past that point round-off or a pre-asymptotic bend decides the error."""
    out = []
    for e, c in rows:
        if not E_LO < e < E_HI:
            if out:
                break
            continue
        if out and not e * 2 ** (order - 1) <= out[-1][0]:
            break
        out.append((e, c))
    return out


def gains(fixed: list, variable: list, order: int) -> list[float]:
    """Fixed-step cost at each variable run's error, over the variable run's cost."""
    ok = asymptotic(fixed, order)
    out = []
    for e, c in asymptotic(variable, order):
        for (e1, c1), (e2, c2) in zip(ok, ok[1:], strict=False):
            if e2 <= e <= e1:
                x = math.log(e / e1) / math.log(e2 / e1)
                out.append(math.exp(math.log(c1) + x * math.log(c2 / c1)) / c)
                break
    return out


def error_ratios(fixed: list, variable: list, order: int) -> list[float]:
    """Fixed-step error at each variable run's cost (log-log interpolation), over the variable
    run's error: the other way to read "equal kicks" (about the gain to the power order)."""
    ok = asymptotic(fixed, order)
    out = []
    for e, c in asymptotic(variable, order):
        for (e1, c1), (e2, c2) in zip(ok, ok[1:], strict=False):
            if c1 <= c <= c2:
                x = math.log(c / c1) / math.log(c2 / c1)
                out.append(math.exp(math.log(e1) + x * math.log(e2 / e1)) / e)
                break
    return out


def per_step(case, steps: int, rounds: int) -> None:
    """ns per step of each method, interleaved round by round in this process, best round; one
    sample at the end (the variable-step run's side step is a single step of the table)."""
    body, y0 = case.body, case.euler_state()
    eps = 1e-4
    best = {}
    for _ in range(rounds):
        for triple in TRIPLES:
            for name in triple:
                st = get(name).start(FORM_EULER, body.params(), 0.0, y0, {"step": eps})
                st.advance_to(eps)  # compiled and loaded before the clock starts
                t0 = time.perf_counter()
                st.advance_to(eps * steps)
                wall = time.perf_counter() - t0
                n = int(st.counters[C_STEPS])
                best[name] = min(best.get(name, math.inf), wall / max(n, 1) * 1e9)
    print(f"\nns per step, Euler form, {case.name}, best of {rounds} rounds (CPU: {cpu()}):")
    for fixed_name, *var_names in TRIPLES:
        f = best[fixed_name]
        cells = "   ".join(f"{v:26s} {best[v]:7.1f} ({best[v] / f:.2f}x)" for v in var_names)
        print(f"  {fixed_name:14s} {f:7.1f}   {cells}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", default="pole-passage,sleeping-below,cusped-release")
    ap.add_argument("--ladder", type=int, default=0, help="halvings per ladder (0: LADDER)")
    ap.add_argument(
        "--per-step",
        type=int,
        default=0,
        metavar="N",
        help="instead: ns per step over about N steps of each method, interleaved",
    )
    ap.add_argument("--rounds", type=int, default=5)
    args = ap.parse_args()
    if args.per_step:
        per_step(load_case(args.cases.split(",")[0]), args.per_step, args.rounds)
        return
    print(f"CPU: {cpu()}")
    for spec in args.cases.split(","):
        case = load_case(spec)
        times = case.times()
        top = LagrangeTop.from_state(case.body, FORM_EULER, case.euler_state())
        ref = np.asarray(top.euler(times), dtype=float).reshape(-1, 3)
        interval = case.horizon / (case.samples - 1)
        steps = [interval / 2**k for k in range(args.ladder or LADDER.get(case.name, 10))]
        print(f"\n{case.name}: horizon {case.horizon} s, {case.samples} samples")
        for triple in TRIPLES:
            rows = {name: [] for name in triple}
            live = set(triple)
            t0 = time.perf_counter()
            for h in steps:  # the three methods interleaved rung by rung
                for name in triple:
                    if name not in live:
                        continue
                    rows[name].append(one_run(name, case, h, times, ref))
                    if len(rows[name]) > 1 and max(r[0] for r in rows[name][-2:]) < E_LO:
                        live.discard(name)
            wall = time.perf_counter() - t0
            for name in triple:
                cells = "  ".join(f"{e:.1e}/{c}/{w:.3g}s" for e, c, w in rows[name])
                print(f"  {name:26s} error/force evaluations/seconds: {cells}")
            fixed_name = triple[0]
            for var_name in triple[1:]:
                order = get(var_name).info.order
                for what, k in (("kicks", 1), ("seconds", 2)):
                    fixed = [(r[0], r[k]) for r in rows[fixed_name]]
                    var = [(r[0], r[k]) for r in rows[var_name]]
                    g = gains(fixed, var, order)
                    span = f"{min(g):.3g}-{max(g):.3g}x over {len(g)} runs" if g else "no overlap"
                    r = error_ratios(fixed, var, order)
                    rspan = f"{min(r):.3g}-{max(r):.3g}x" if r else "no overlap"
                    print(
                        f"  gain of {var_name} in {what}: at equal error {span}; "
                        f"error at equal {what} {rspan}"
                    )
            print(f"  ({wall:.1f} s)")


if __name__ == "__main__":
    main()
