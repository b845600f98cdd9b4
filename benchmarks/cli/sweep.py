"""`topdrift sweep SWEEP [--out FILE] [--jobs N | --scheduler ADDRESS]`: a grid of cases x
methods x settings into one HDF5 file, computed in parallel, written by this process alone."""

from __future__ import annotations

import os
import signal
from pathlib import Path

EXIT_INTERRUPTED = {signal.SIGINT: 130, signal.SIGTERM: 143}


def add_parser(sub) -> None:
    p = sub.add_parser(
        "sweep",
        help="run a grid of cases x methods x settings into one HDF5 file",
        description="Run every case x method x setting of a sweep file (or a shipped sweep: "
        "quick, standard) into one results file. Runs already complete in the file are "
        "skipped, so running a stopped sweep again completes it.",
    )
    p.add_argument("sweep", metavar="SWEEP", help="sweep file, or a shipped sweep name")
    p.add_argument("--out", metavar="FILE", help="results file (default results/sweep-NAME.h5)")
    where = p.add_mutually_exclusive_group()
    where.add_argument(
        "--jobs",
        type=int,
        default=None,
        metavar="N",
        help="local worker processes (default: the number of cores)",
    )
    where.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help="run on an existing Dask cluster (e.g. tcp://127.0.0.1:8786); needs topdrift[dask]",
    )
    p.add_argument("--json", action="store_true", help="print the sweep's runs as JSON")
    p.set_defaults(func=run)


def run(args) -> int:
    import json

    from topdrift.benchmarks.cli.summary import print_table
    from topdrift.benchmarks.errors import UserError
    from topdrift.benchmarks.run.runner import StopFlag
    from topdrift.benchmarks.store.format import DEFAULT_FILE
    from topdrift.benchmarks.store.reader import list_runs, open_reader
    from topdrift.benchmarks.sweep.executor import run_sweep
    from topdrift.benchmarks.sweep.spec import read_sweep

    spec = read_sweep(args.sweep)
    if args.jobs is not None and args.jobs < 1:
        raise UserError(f"--jobs: need at least 1, got {args.jobs}")
    jobs = args.jobs if args.jobs is not None else (os.cpu_count() or 1)
    out = Path(args.out) if args.out else DEFAULT_FILE.with_name(f"sweep-{spec.name}.h5")
    stop = StopFlag()

    def on_signal(signum, _frame):
        stop.signum = signum

    old = {s: signal.signal(s, on_signal) for s in EXIT_INTERRUPTED}
    try:
        outcome = run_sweep(spec, out, jobs=jobs, scheduler=args.scheduler, stop=stop)
    finally:
        for s, h in old.items():
            signal.signal(s, h)
    ids = {j.run_id for j in outcome.jobs}
    with open_reader(out) as f:
        rows = [r for r in list_runs(f) if r["run_id"] in ids]
    if args.json:
        print(json.dumps({"sweep": spec.name, "file": str(out), "runs": rows}, indent=2))
    else:
        print_table(rows)
    if stop.requested or outcome.interrupted:
        return EXIT_INTERRUPTED.get(stop.signum, 130)
    # Diverged or singular runs are findings of a sweep (a ladder probes its limits); a run that
    # could not be computed at all is a failure.
    return 1 if outcome.errors else 0
