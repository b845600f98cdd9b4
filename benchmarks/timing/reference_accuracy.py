"""The extended-precision reference of every library case with no exact solution, over the
case's own horizon and samples: what it costs to build and the accuracy it verifies.

    python benchmarks/timing/reference_accuracy.py [--check-mpmath CASE:HORIZON ...]
        [--cross-taylor CASE ...]

Builds each reference afresh with the provider that takes the case (the cache is neither read
nor written) and prints a Markdown table: the provider, steps of the two integrations (none for
the closed form), seconds (with the CPU), the largest parting of the two and the verified
accuracy (figure axis, attitude, momentum). With --check-mpmath, the Taylor reference of a case
over a horizon is also compared with a 50-digit Taylor integration in mpmath (minutes for tens
of seconds of a fast top), to show that the estimate holds. With --cross-taylor, the Taylor
reference of a free-body case at its own samples is compared with the closed form, word by word
(its true error, beside its own estimate).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

from topdrift.benchmarks.cases.library import library_cases
from topdrift.benchmarks.run.case_reference import provider_for, sample_times
from topdrift.benchmarks.run.runner import plan_run, versions
from topdrift.integrators.extended import free_closed_form
from topdrift.integrators.extended import reference as extended


def without_exact(cases):
    for case in cases:
        plan = plan_run(case, "dop853", rtol=1e-8, atol=1e-10, form="body")
        if plan.exact is None:
            yield case


def table(cases) -> list[str]:
    rows = [
        "| case | reference | horizon (s) | samples | steps (reference + check) | build (s) | "
        "parting, axis (rad) | verified accuracy: axis (rad) | attitude (rad) | momentum "
        "(rel.) |",
        "| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |",
    ]
    for case in cases:
        times = sample_times(case.horizon, case.samples)
        provider, _ = provider_for(case.body)
        t0 = time.perf_counter()
        ref = provider.build(case.body, case.body_state(), times, None)
        wall = time.perf_counter() - t0
        a, c = ref.accuracy, ref.cost
        steps = f"{c['steps']} + {c['check_steps']}" if c["steps"] else "none"
        rows.append(
            f"| {case.name} | {provider.name} | {case.horizon:g} | {case.samples} | {steps} | "
            f"{wall:.2f} | {ref.parting['axis']:.2g} | {a['axis']:.2g} | {a['attitude']:.2g} | "
            f"{a['momentum']:.2g} |"
        )
    return rows


def cross_taylor(name: str, cases: dict) -> str:
    """The Taylor reference of a free-body case against the closed form at the case's samples."""
    case = cases[name]
    times = sample_times(case.horizon, case.samples)
    y0 = case.body_state()
    closed = free_closed_form.evaluate(case.body, y0, times, free_closed_form.MAIN_DPS)
    main = extended.integrate(case.body, y0, times, extended.MAIN)
    check = extended.integrate(case.body, y0, times, extended.CHECK)
    est, true = extended.parting(main, check), extended.parting(main, closed)
    f = extended.ESTIMATE_FACTOR
    return (
        f"| {name} | {case.horizon:g} | {case.samples} | {true['axis']:.2g} | "
        f"{f * est['axis']:.2g} | {true['attitude']:.2g} | {f * est['attitude']:.2g} |"
    )


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
    ap.add_argument("--cross-taylor", nargs="*", default=[], metavar="CASE")
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
    if args.cross_taylor:
        print(
            "\n| case | horizon (s) | samples | taylor-dd axis error against the closed form "
            "(rad) | its 2 x parting | attitude error (rad) | its 2 x parting |\n"
            "| --- | --- | --- | --- | --- | --- | --- |"
        )
        for name in args.cross_taylor:
            print(cross_taylor(name, cases))


if __name__ == "__main__":
    main()
