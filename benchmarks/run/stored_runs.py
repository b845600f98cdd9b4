"""What `topdrift run` does with each planned run, given what the results file already holds:
start it, continue it, reuse it, or compute its replacement beside it (store/replacement.py).
Reads the file only.

A stored run is never touched by `--force` until its successor is complete: the new run is
computed under /replacing and moved over the stored one at the end. With an unfinished
replacement left in the file (a `--force` that was stopped or killed), `--resume` continues
that replacement (the newest attempt), `--force` starts it again, and a plain run reuses the
stored run and says that the replacement is waiting.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.runner import check_resume
from topdrift.benchmarks.store.format import FINAL_STATUSES, REPLACING, RUNS
from topdrift.benchmarks.store.reader import existing_status, open_reader

NEW = "new"  # compute from the start
RESUME = "resume"  # continue from the checkpoint
REUSE = "reuse"  # already complete: report the stored result


@dataclass(frozen=True)
class Action:
    kind: str  # NEW, RESUME or REUSE
    parent: str = RUNS  # where the run's group is written: /runs, or /replacing
    note: str = ""  # said on stderr before anything runs

    @property
    def replaces(self) -> bool:
        """The run is computed beside a stored one and moved over it once complete."""
        return self.parent == REPLACING


def _waiting_note(out: Path, plan, n: int, total: int) -> str:
    return (
        f"an unfinished --force replacement of run {plan.run_id} (stopped at sample "
        f"{n}/{total}) is kept beside it in {out}; --resume continues it, --force starts it again"
    )


def _checked(plan, out: Path, action: Action) -> Action:
    """A resume is checked on the file opened for reading, before anything opens it for
    writing (runner.check_resume: its checkpoint restores exactly, its stored samples are all
    there), so that a refused resume leaves the file byte for byte as it was. An ensemble keeps
    no checkpoint and starts over. A method that cannot be resumed from a file (its
    resume_refusal says why: scipy-lsoda) is run again from the start, with a note kept with
    the run."""
    if action.kind == RESUME and "ensemble" not in plan.settings:
        why = plan.method.resume_refusal()
        if why:
            plan.notes.append(f"not resumed: {why}; running it again from the start")
            return Action(NEW, action.parent, action.note)
        with open_reader(out) as f:
            check_resume(plan, f, action.parent)
    return action


def decide_one(plan, out: Path, force: bool, resume: bool) -> Action:
    status, n = existing_status(out, plan.run_id)
    left, left_n = existing_status(out, plan.run_id, REPLACING)
    startable = plan.y0 is not None
    if force:
        if status is None and left is None:
            return Action(NEW)
        return Action(NEW, REPLACING)  # an old leftover is dropped when the new group is made
    if resume and left is not None:
        # The newest attempt is the replacement: continue it (or start it, if it was killed
        # before its first write: nothing was done, so nothing to continue from).
        return _checked(plan, out, Action(RESUME if startable and left_n > 0 else NEW, REPLACING))
    if status is None:
        return Action(NEW)
    if status in FINAL_STATUSES:
        note = _waiting_note(out, plan, left_n, plan.samples) if left is not None else ""
        return Action(REUSE, note=note)
    if resume:
        return _checked(plan, out, Action(RESUME if startable and n > 0 else NEW))
    raise UserError(
        f"{out}: run {plan.run_id} ({plan.case.name}, {plan.method.name}) is {status} at sample "
        f"{n}/{plan.samples}; pass --resume to continue it or --force to start over"
    )


def decide(plans: list, out: Path, force: bool, resume: bool) -> list[Action]:
    """One Action per plan; refuses (UserError) a plan given twice, and an unfinished run
    without --resume or --force."""
    seen = set()
    actions = []
    for p in plans:
        if p.run_id in seen:
            raise UserError(f"{p.case.name}: given twice (run {p.run_id})")
        seen.add(p.run_id)
        actions.append(decide_one(p, out, force, resume))
    return actions
