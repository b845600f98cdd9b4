"""Executing the runs of one `topdrift run` into one results file, in order, and saying in one
line what a stop finished and what it left.

The file is opened once, after every plan and decision (run/requested.py, run/stored_runs.py)
is made, so that bad input never touches it. A run that replaces a stored one is computed
under /replacing and moved over it only when complete (store/replacement.py). The caller gives
the StopFlag that its signal handlers set (stopping.deferred): the runner looks at it after
every sample, and no run starts once it is set.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.progress import Progress
from topdrift.benchmarks.run.runner import FLUSH_EVERY_S, RunResult, execute
from topdrift.benchmarks.run.stored_runs import RESUME, REUSE, Action
from topdrift.benchmarks.stopping import StopFlag
from topdrift.benchmarks.store.failures import NoRoom, file_failure
from topdrift.benchmarks.store.format import FINAL_STATUSES
from topdrift.benchmarks.store.replacement import swap_in
from topdrift.benchmarks.store.writer import open_writer

# Below this many seconds between two writes of a run's samples, `run --flush-every` warns.
# Every write rewrites the last, partly filled chunk of each dataset and the checkpoint, so
# writing after every sample costs time that grows with the samples: measured, a run of 2000
# samples that takes 8 s with writes every 2 s took 186 s writing after every sample.
MIN_FLUSH_EVERY_S = 0.5


@dataclass
class BatchOutcome:
    results: list[RunResult | None] = field(default_factory=list)  # per plan; None: not run
    kept: list[str] = field(default_factory=list)  # lines: stored runs a stop left as they were


def check_flush_every(value: float | None, warn) -> float:
    """The seconds between writes: the default, or the value given (0 or more, finite); `warn`
    gets a line when it is below MIN_FLUSH_EVERY_S."""
    import math

    if value is None:
        return FLUSH_EVERY_S
    if not (math.isfinite(value) and value >= 0.0):
        raise UserError(f"--flush-every: must be zero or a positive finite number, got {value!r}")
    if value < MIN_FLUSH_EVERY_S:
        warn(
            f"topdrift: warning: --flush-every {value:g}: writing more often than every "
            f"{MIN_FLUSH_EVERY_S:g} s can make a run many times slower (each write rewrites the "
            "last block of every dataset); use it to watch a run closely, not to run one"
        )
    return float(value)


def _one(plan, action: Action, ensembles: dict, f, stop: StopFlag, flush_every: float):
    import sys

    progress = Progress(plan.label, plan.samples)
    if plan.run_id in ensembles:
        from topdrift.benchmarks.run.ensemble import execute_ensemble

        if action.kind == RESUME:
            sys.stderr.write(
                f"topdrift: {plan.case.name}: an ensemble run keeps no "
                "checkpoint; running it again from the start\n"
            )
        return execute_ensemble(
            ensembles[plan.run_id],
            f,
            progress=progress,
            stop=stop,
            flush_every=flush_every,
            parent=action.parent,
        )
    return execute(
        plan,
        f,
        resume=action.kind == RESUME,
        progress=progress,
        stop=stop,
        flush_every=flush_every,
        parent=action.parent,
    )


def execute_batch(
    plans: list,
    actions: list[Action],
    out: Path,
    *,
    stop: StopFlag,
    ensembles: dict | None = None,
    flush_every: float = FLUSH_EVERY_S,
) -> BatchOutcome:
    """Run every plan whose action is not REUSE into the file `out`, in order, until done or
    stopped. A failed write is one UserError line; the run in hand is never marked complete."""
    ensembles = ensembles or {}
    outcome = BatchOutcome()
    if all(a.kind == REUSE for a in actions):
        outcome.results = [None] * len(plans)
        return outcome
    f = open_writer(out)
    try:
        for p, action in zip(plans, actions, strict=True):
            if action.kind == REUSE or stop.requested:
                outcome.results.append(None)
                continue
            r = _one(p, action, ensembles, f, stop, flush_every)
            outcome.results.append(r)
            if action.replaces:
                if r.status in FINAL_STATUSES:
                    swap_in(f, p.run_id)
                else:
                    outcome.kept.append(p.run_id)
    except NoRoom:
        raise  # nothing failed to write: the run was stopped before it could
    except (OSError, RuntimeError, KeyError) as exc:
        # A write that failed (a full disk, a file-size limit, the medium gone) or a part of
        # the file HDF5 could not read: the run in hand is never marked done (its status is set
        # only after its samples are flushed).
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
    return outcome


def stopped_line(
    stop: StopFlag, plans: list, actions: list[Action], outcome: BatchOutcome, out, ensembles=()
) -> str:
    """One line: what a stopped `run` finished, where it stopped, and what is left."""
    done = [
        p
        for p, r in zip(plans, outcome.results, strict=False)
        if r is not None and r.status in FINAL_STATUSES
    ]
    cut = [
        (p, a, r)
        for p, a, r in zip(plans, actions, outcome.results, strict=False)
        if r is not None and r.status not in FINAL_STATUSES
    ]
    started = sum(1 for r in outcome.results if r is not None)
    untouched = sum(1 for a in actions if a.kind != REUSE) - started
    parts = [f"{len(done)} run(s) finished"]
    for p, a, r in cut:
        at = "" if r.samples_stored is None else f" at sample {r.samples_stored}/{p.samples}"
        where = f"run {p.run_id} ({p.case.name}, {p.method.name}) stopped{at}"
        if a.replaces:
            parts.append(
                f"{where} as it replaced the stored run, which is kept as it was in {out} "
                "(--resume continues the replacement, --force starts it again)"
            )
        elif p.run_id in ensembles:
            parts.append(f"{where}; an ensemble keeps no checkpoint: --resume runs it again")
        else:
            parts.append(f"{where}; --resume continues it")
    if untouched:
        parts.append(f"{untouched} not started")
    return f"topdrift: run stopped by {stop.name}: " + "; ".join(parts)
