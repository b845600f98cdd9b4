"""`topdrift run CASE... --method NAME (--step H | --rtol R [--atol A])`: integrate cases over
their horizon and store every sample in the HDF5 run store.

A thin command over four library steps: plan (run/requested.py), decide what to do with runs
already stored (run/stored_runs.py), execute (run/batch.py) and report (run/report_rows.py).
Everything is checked before the results file is opened: a bad case, an unknown method, a
refusal or a conflicting option exits 2 and leaves no file behind (and an existing one untouched).
"""

from __future__ import annotations

import json
from pathlib import Path


def add_parser(sub) -> None:
    p = sub.add_parser(
        "run",
        help="integrate cases with one method and store the samples in HDF5",
        description="Integrate each CASE (a case file or a library case name) with one method "
        "and one setting, sampled at uniform times, into the HDF5 run store. "
        "Options not given come from the case file.",
    )
    p.add_argument("cases", nargs="+", metavar="CASE", help="case file or library case name")
    p.add_argument("--method", help="integrator name (see `topdrift methods`)")
    p.add_argument("--step", type=float, help="step of a fixed-step method (s)")
    p.add_argument("--rtol", type=float, help="relative tolerance of an adaptive method")
    p.add_argument("--atol", type=float, help="absolute tolerance (default: rtol / 1000)")
    p.add_argument(
        "--form",
        choices=("euler", "body"),
        help="state form to integrate in (default: the method's first that fits)",
    )
    p.add_argument("--horizon", type=float, help="end time T (s); default from the case")
    p.add_argument("--samples", type=int, help="output samples, t = 0 and T included")
    p.add_argument(
        "--out", default=None, metavar="FILE", help="results file (default: results/runs.h5)"
    )
    again = p.add_mutually_exclusive_group()
    again.add_argument(
        "--force",
        action="store_true",
        help="run again and replace a stored run of the same id (once the new one is complete)",
    )
    again.add_argument(
        "--resume", action="store_true", help="continue an interrupted run from its checkpoint"
    )
    p.add_argument(
        "--flush-every",
        type=float,
        default=None,
        metavar="S",
        help="seconds between writes to the file (default 2; below 0.5 warns: each write "
        "costs time, and writing after every sample makes a run many times slower)",
    )
    p.add_argument(
        "--ensemble",
        type=int,
        metavar="N",
        help="run N starts at once (member 0 the case's own, the others perturbed); "
        "splitting and Gauss-Legendre methods",
    )
    p.add_argument(
        "--spread",
        type=float,
        default=1e-6,
        metavar="S",
        help="standard deviation of the ensemble's start-angle perturbations (rad, default 1e-6)",
    )
    p.add_argument(
        "--scalar-members",
        action="store_true",
        help="advance an ensemble's members one by one with the method's own kernel, each the "
        "same bits as a single run from its start (default for plain splittings: SIMD lanes, "
        "several times faster, each member within a few ulps per step of its single run)",
    )
    p.add_argument("--json", action="store_true", help="print the runs as JSON on stdout")
    p.set_defaults(func=run)


def run(args) -> int:
    import sys

    from topdrift.benchmarks.cases.numbers import non_negative, whole
    from topdrift.benchmarks.run.batch import check_flush_every, execute_batch, stopped_line
    from topdrift.benchmarks.run.report_rows import result_rows
    from topdrift.benchmarks.run.requested import Request, plan_cases, plan_ensembles
    from topdrift.benchmarks.run.stored_runs import decide
    from topdrift.benchmarks.stopping import Interrupted, deferred
    from topdrift.benchmarks.store.format import DEFAULT_FILE

    def say(line: str) -> None:
        sys.stderr.write(line + "\n")

    # Checked first, planned next, decided against the file (read only), then run: bad input
    # at any of these steps leaves no file and never touches an existing one.
    out = Path(args.out) if args.out else DEFAULT_FILE
    flush_every = check_flush_every(args.flush_every, say)
    if args.ensemble is not None:
        from topdrift.benchmarks.run.ensemble import MAX_MEMBERS

        whole("--ensemble", args.ensemble, 2, MAX_MEMBERS, "a whole number of starts")
        non_negative("--spread", args.spread)
    request = Request(
        args.method, args.step, args.rtol, args.atol, args.form, args.horizon, args.samples
    )
    plans = plan_cases(args.cases, request)
    ensembles = {}
    if args.ensemble is not None:
        try:
            lanes = False if args.scalar_members else None
            ensembles = plan_ensembles(plans, args.ensemble, args.spread, lanes)
        except Interrupted as exc:
            raise exc.saying("while the ensembles were planned; nothing written") from None
    actions = decide(plans, out, args.force, args.resume)
    for p, a in zip(plans, actions, strict=True):
        if a.note:
            say(f"topdrift: {p.case.name} {p.method.name}: {a.note}")
    with deferred() as stop:  # from here on a signal asks the runs to stop (stopping.py)
        outcome = execute_batch(
            plans, actions, out, stop=stop, ensembles=ensembles, flush_every=flush_every
        )
    # The plans' notes once the runs are done (or reused), so that a refusal on the way (a file
    # another process is writing, say) stays one line.
    for p in plans:
        for note in p.notes:
            say(f"topdrift: {p.case.name} {p.method.name}: {note}")
    try:
        rows = result_rows(plans, actions, outcome.results, out, say=say)
        if args.json:
            print(json.dumps({"runs": rows}, indent=2))
        else:
            from topdrift.benchmarks.cli.summary import print_table

            print_table(rows)
    except Interrupted as exc:
        raise exc.saying(f"the runs are in {out}; only their table was cut short") from None
    if stop.requested:
        say(stopped_line(stop, plans, actions, outcome, out, ensembles))
        return stop.exit_status
    return 0 if all(r["status"] == "ok" for r in rows) else 1
