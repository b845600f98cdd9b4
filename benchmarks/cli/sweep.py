"""`topdrift sweep SWEEP [--out FILE] [--jobs N | --scheduler ADDRESS]`: a grid of cases x
methods x settings into one HDF5 file, computed in parallel, written by this process alone."""

from __future__ import annotations

import os
from pathlib import Path


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
        help="local worker processes, 1 .. 4 per core (default: the number of cores)",
    )
    where.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help="run on an existing Dask cluster (e.g. tcp://127.0.0.1:8786); needs topdrift[dask]",
    )
    p.add_argument("--json", action="store_true", help="print the sweep's runs as JSON")
    p.set_defaults(func=run)


# More local workers than this many per core is refused: each is a Python process that loads
# numba and the kernels (about 150 MB), and workers beyond the cores only take turns on them.
MAX_JOBS_PER_CORE = 4


def _jobs(requested: int | None) -> int:
    import sys

    from topdrift.benchmarks.errors import UserError

    cores = os.cpu_count() or 1
    if requested is None:
        return cores
    top = MAX_JOBS_PER_CORE * cores
    if not 1 <= requested <= top:
        raise UserError(
            f"--jobs: need a whole number from 1 to {top} ({MAX_JOBS_PER_CORE} per core on "
            f"this machine's {cores}), got {requested}"
        )
    if requested > cores:
        sys.stderr.write(
            f"topdrift: warning: --jobs {requested} on {cores} core(s): workers beyond the "
            "cores take turns on them and make the sweep no faster\n"
        )
    return requested


def stopped_line(outcome, out) -> str:
    """What a stopped sweep finished and what is left, in one line."""
    from topdrift.benchmarks.stopping import signal_name

    written = len(outcome.finished)
    dropped = f", {outcome.dropped} in the workers' hands dropped" if outcome.dropped else ""
    before = f" ({len(outcome.reused)} were complete before)" if outcome.reused else ""
    return (
        f"topdrift: sweep stopped by {signal_name(outcome.signum)}: {written} of "
        f"{outcome.todo} run(s) written to {out} this time{before}, {outcome.left} left"
        f"{dropped}; run the same command again to complete the sweep"
    )


def run(args) -> int:
    import json
    import sys

    from topdrift.benchmarks.cli.summary import print_table
    from topdrift.benchmarks.stopping import Interrupted, deferred, exit_status
    from topdrift.benchmarks.store.format import DEFAULT_FILE
    from topdrift.benchmarks.store.reader import list_runs, open_reader
    from topdrift.benchmarks.sweep.executor import run_sweep
    from topdrift.benchmarks.sweep.spec import read_sweep

    jobs = _jobs(args.jobs)
    spec = read_sweep(args.sweep)
    out = Path(args.out) if args.out else DEFAULT_FILE.with_name(f"sweep-{spec.name}.h5")
    # Sizing, planning and reaching the scheduler stop at once on a signal (nothing is
    # written); once the file is open, the signal asks the sweep to stop (executor.py).
    with deferred() as stop:
        outcome = run_sweep(spec, out, jobs=jobs, scheduler=args.scheduler, stop=stop)
    ids = {j.run_id for j in outcome.jobs}
    try:
        with open_reader(out) as f:
            rows = [r for r in list_runs(f) if r["run_id"] in ids]
        if args.json:
            print(json.dumps({"sweep": spec.name, "file": str(out), "runs": rows}, indent=2))
        else:
            print_table(rows)
    except Interrupted as exc:
        raise exc.saying(f"the sweep's runs are in {out}; only the table was cut short") from None
    if outcome.interrupted:
        sys.stderr.write(stopped_line(outcome, out) + "\n")
        return exit_status(outcome.signum)
    # Diverged or singular runs are findings of a sweep (a ladder probes its limits); a run that
    # could not be computed at all is a failure.
    return 1 if outcome.errors else 0
