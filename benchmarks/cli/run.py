"""`topdrift run CASE... --method NAME (--step H | --rtol R [--atol A])`: integrate cases over
their horizon and store every sample in the HDF5 run store.

Everything is checked before the results file is opened: a bad case, an unknown method, a
refusal or a conflicting option exits 2 and leaves no file behind (and an existing one untouched).
"""

from __future__ import annotations

import json
import signal
from pathlib import Path

EXIT_INTERRUPTED = {signal.SIGINT: 130, signal.SIGTERM: 143}


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
    again.add_argument("--force", action="store_true", help="replace a stored run of the same id")
    again.add_argument(
        "--resume", action="store_true", help="continue an interrupted run from its checkpoint"
    )
    p.add_argument(
        "--flush-every",
        type=float,
        default=None,
        metavar="S",
        help="seconds between writes to the file (default 2; 0 writes every sample)",
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
    p.add_argument("--json", action="store_true", help="print the runs as JSON on stdout")
    p.set_defaults(func=run)


def _plans(args):
    from topdrift.benchmarks.cases.library import load_case
    from topdrift.benchmarks.run.runner import plan_run

    plans = []
    for spec in args.cases:
        case = load_case(spec)
        d = case.run  # the case's own defaults, used where the command line is silent
        method = args.method or d.get("method")
        if method is None:
            from topdrift.benchmarks.errors import UserError

            raise UserError(f"{spec}: no method; give --method NAME (see `topdrift methods`)")
        from topdrift.integrators import get

        control = get(method).info.control
        explicit = any(v is not None for v in (args.step, args.rtol, args.atol))
        if control == "step":
            step = args.step if explicit else d.get("step")
            rtol = args.rtol
            atol = args.atol
        else:
            step = args.step
            rtol = args.rtol if explicit else d.get("rtol")
            atol = args.atol if explicit else d.get("atol")
        form = args.form or (d.get("form") if method == d.get("method") else None)
        plans.append(
            plan_run(
                case,
                method,
                step=step,
                rtol=rtol,
                atol=atol,
                form=form,
                horizon=args.horizon,
                samples=args.samples,
            )
        )
    return plans


def _decide(plans, out: Path, force: bool, resume: bool) -> list[str]:
    """For each plan: 'new', 'resume' or 'reuse'; refuses (exit 2) an unfinished run without
    --resume or --force. Reads the file only."""
    from topdrift.benchmarks.errors import UserError
    from topdrift.benchmarks.store.format import FINAL_STATUSES
    from topdrift.benchmarks.store.reader import existing_status

    actions = []
    seen = set()
    for p in plans:
        if p.run_id in seen:
            raise UserError(f"{p.case.name}: given twice (run {p.run_id})")
        seen.add(p.run_id)
        status, n = existing_status(out, p.run_id)
        if status is None or force:
            actions.append("new")
        elif status in FINAL_STATUSES:
            actions.append("reuse")
        elif resume:
            # Killed before its first write: nothing was done, so nothing to continue from.
            action = "resume" if p.y0 is not None and n > 0 else "new"
            why = p.method.resume_refusal() if action == "resume" else ""
            if why and "ensemble" not in p.settings:  # said on stderr and kept with the run
                p.notes.append(f"not resumed: {why}; running it again from the start")
                action = "new"
            if action == "resume" and "ensemble" not in p.settings:  # ensembles start over
                _check_resume(p, out)
            actions.append(action)
        else:
            raise UserError(
                f"{out}: run {p.run_id} ({p.case.name}, {p.method.name}) is {status} at sample "
                f"{n}/{p.samples}; pass --resume to continue it or --force to start over"
            )
    return actions


def _check_resume(plan, out: Path) -> None:
    from topdrift.benchmarks.run.runner import check_resume
    from topdrift.benchmarks.store.reader import open_reader

    with open_reader(out) as f:
        check_resume(plan, f)


def _stored(out: Path, run_id: str) -> tuple[str, dict, str]:
    from topdrift.benchmarks.store.reader import stored_result

    return stored_result(out, run_id)


def run(args) -> int:
    import sys

    from topdrift.benchmarks.errors import UserError
    from topdrift.benchmarks.run.progress import Progress
    from topdrift.benchmarks.run.runner import FLUSH_EVERY_S, StopFlag, execute
    from topdrift.benchmarks.store.failures import NoRoom, file_failure
    from topdrift.benchmarks.store.format import DEFAULT_FILE
    from topdrift.benchmarks.store.writer import open_writer

    out = Path(args.out) if args.out else DEFAULT_FILE
    if args.flush_every is not None and not args.flush_every >= 0.0:
        raise UserError(f"--flush-every: must be zero or positive, got {args.flush_every}")
    flush_every = FLUSH_EVERY_S if args.flush_every is None else args.flush_every
    plans = _plans(args)
    ensembles = {}
    if args.ensemble is not None:
        from topdrift.benchmarks.run.ensemble import plan_ensemble

        for p in plans:
            ep = plan_ensemble(p, args.ensemble, args.spread)
            ensembles[ep.run_id] = ep
    actions = _decide(plans, out, args.force, args.resume)

    def say_notes(p) -> None:
        # Once a run is done (or reused), so that a refusal on the way stays one line.
        for note in p.notes:
            sys.stderr.write(f"topdrift: {p.case.name} {p.method.name}: {note}\n")

    stop = StopFlag()

    def on_signal(signum, _frame):
        stop.signum = signum

    results = []
    if any(a != "reuse" for a in actions):
        old = {s: signal.signal(s, on_signal) for s in EXIT_INTERRUPTED}
        try:
            f = open_writer(out)
            try:
                for p, action in zip(plans, actions, strict=True):
                    if action == "reuse":
                        results.append(None)
                        continue
                    progress = Progress(p.label, p.samples)
                    if p.run_id in ensembles:
                        from topdrift.benchmarks.run.ensemble import execute_ensemble

                        if action == "resume":
                            sys.stderr.write(
                                f"topdrift: {p.case.name}: an ensemble run keeps no "
                                "checkpoint; running it again from the start\n"
                            )
                        r = execute_ensemble(
                            ensembles[p.run_id],
                            f,
                            progress=progress,
                            stop=stop,
                            flush_every=flush_every,
                        )
                    else:
                        r = execute(
                            p,
                            f,
                            resume=action == "resume",
                            progress=progress,
                            stop=stop,
                            flush_every=flush_every,
                        )
                    results.append(r)
                    say_notes(p)
                    if stop.requested:
                        break
            except NoRoom:
                raise  # nothing failed to write: the run was stopped before it could
            except (OSError, RuntimeError, KeyError) as exc:
                # A write that failed (a full disk, a file-size limit, the medium gone) or a
                # part of the file HDF5 could not read: the run in hand is never marked done
                # (its status is set only after its samples are flushed).
                error = file_failure(
                    exc,
                    f,
                    out,
                    in_hand="the run in hand is not marked complete",
                    next_step="go on with --resume",
                )
                if error is None:
                    raise
                f = None
                raise error from None
            finally:
                if f is not None:  # also after a UserError or an interrupt: release the lock
                    f.close()
        finally:
            for s, h in old.items():
                signal.signal(s, h)

    rows = []
    for i, (p, action) in enumerate(zip(plans, actions, strict=True)):
        r = results[i] if i < len(results) else None
        if action == "reuse" or r is None:
            if action != "reuse":
                continue  # not reached: stopped by a signal
            status, metrics, detail = _stored(out, p.run_id)
            say_notes(p)
            sys.stderr.write(
                f"topdrift: {p.case.name} {p.method.name}: already in {out} as run {p.run_id} "
                f"({status}); reusing it (--force runs it again)\n"
            )
        else:
            status, metrics, detail = r.status, r.metrics, r.detail
        rows.append(
            {
                "run_id": p.run_id,
                "case": p.case.name,
                "method": p.method.name,
                "form": p.form,
                "settings": p.settings,
                "status": status,
                "detail": detail,
                "notes": p.notes,
                "file": str(out),
                "metrics": metrics,
            }
        )
    if args.json:
        print(json.dumps({"runs": rows}, indent=2))
    else:
        from topdrift.benchmarks.cli.summary import print_table

        print_table(rows)
    if stop.requested:
        return EXIT_INTERRUPTED.get(stop.signum, 130)
    return 0 if all(r["status"] == "ok" for r in rows) else 1
