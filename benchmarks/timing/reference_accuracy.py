"""The extended-precision reference of every library case with no exact solution, over the
case's own horizon and samples: what it costs to build and the accuracy it verifies.

    python benchmarks/timing/reference_accuracy.py [--check-mpmath CASE:HORIZON ...]

Builds each reference afresh (the cache is neither read nor written) and prints a Markdown
table: steps of the two integrations, seconds (with the CPU), the largest parting of the two
and the verified accuracy (figure axis, attitude, momentum). With --check-mpmath, the reference
of a case over a horizon is also compared with a 50-digit Taylor integration in mpmath (minutes
for tens of seconds of a fast top), to show that the estimate holds.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

from topdrift.benchmarks.cases.library import library_cases
from topdrift.benchmarks.run.case_reference import sample_times
from topdrift.benchmarks.run.runner import plan_run, versions
from topdrift.integrators.extended import reference as extended


def without_exact(cases):
    for case in cases:
        plan = plan_run(case, "dop853", rtol=1e-8, atol=1e-10, form="body")
        if plan.exact is None:
            yield case


def table(cases) -> list[str]:
    rows = [
        "| case | horizon (s) | samples | steps (reference + check) | build (s) | parting, axis "
        "(rad) | verified accuracy: axis (rad) | attitude (rad) | momentum (rel.) |",
        "| --- | --- | --- | --- | --- | --- | --- | --- | --- |",
    ]
    for case in cases:
        times = sample_times(case.horizon, case.samples)
        t0 = time.perf_counter()
        ref = extended.verified_reference(case.body, case.body_state(), times)
        wall = time.perf_counter() - t0
        a = ref.accuracy
        rows.append(
            f"| {case.name} | {case.horizon:g} | {case.samples} | {ref.cost['steps']} + "
            f"{ref.cost['check_steps']} | {wall:.2f} | {ref.parting['axis']:.2g} | "
            f"{a['axis']:.2g} | {a['attitude']:.2g} | {a['momentum']:.2g} |"
        )
    return rows


def check_mpmath(spec: str, cases: dict) -> str:
    sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "tests"))
    from independent_references import taylor_states_mp

    name, horizon = spec.split(":")
    case, horizon = cases[name], float(horizon)
    times = np.linspace(0.0, horizon, 11)
    y0 = case.body_state()
    main = extended.integrate(case.body, y0, times, extended.MAIN)
    check = extended.integrate(case.body, y0, times, extended.CHECK)
    est = extended.parting(main, check)
    import mpmath as mp

    with mp.workdps(50):
        rows = taylor_states_mp(case.body, y0, times)
        hi = np.array([[float(v) for v in r] for r in rows])
        lo = np.array(
            [
                [float(v - mp.mpf(h)) for v, h in zip(r, hr, strict=True)]
                for r, hr in zip(rows, hi, strict=True)
            ]
        )
    true = extended.parting(main, extended.Integration(hi, lo, 0, 0.0, extended.MAIN))
    f = extended.ESTIMATE_FACTOR
    return (
        f"| {name} | {horizon:g} | {true['axis']:.2g} | {f * est['axis']:.2g} | "
        f"{true['attitude']:.2g} | {f * est['attitude']:.2g} |"
    )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--check-mpmath", nargs="*", default=[], metavar="CASE:HORIZON")
    args = ap.parse_args()
    cases = {c.name: c for c in library_cases()}
    print(f"CPU: {versions()['cpu']}\n")
    print("\n".join(table(without_exact(cases.values()))))
    if args.check_mpmath:
        print(
            "\n| case | horizon (s) | true axis error (rad) | 2 x parting | true attitude error "
            "(rad) | 2 x parting |\n| --- | --- | --- | --- | --- | --- |"
        )
        for spec in args.check_mpmath:
            print(check_mpmath(spec, cases))


if __name__ == "__main__":
    main()
