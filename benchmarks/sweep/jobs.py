"""One run of a sweep as plain values (a Job), so that it travels to any worker, and its plan."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from topdrift.benchmarks.cases.schema import parse_case
from topdrift.benchmarks.run.runner import RunPlan, plan_run


@dataclass(frozen=True)
class Job:
    """One run of a sweep, in plain values so that it can travel to any worker."""

    case_name: str
    case_label: str
    case_toml: str
    case_path: str | None
    method: str
    form: str
    step: float | None
    rtol: float | None
    atol: float | None
    horizon: float
    samples: int
    run_id: str = ""

    def describe(self) -> str:
        s = f"step={self.step:.4g}" if self.step is not None else f"rtol={self.rtol:.3g}"
        return f"{self.case_name} {self.method} ({self.form}) {s}"


# Why a grid point did not become a job. "refused": the method cannot run it (a form it lacks, a
# body it cannot describe); "failed": it refused to start because its kernel raised in the
# first steps (runner.StartFailed); "error": planning raised something else (only when asked,
# see grid.expand_grid); "over-budget" and "same-run" are the sweep's own choices (max_steps,
# two requested steps that round to one run).
SKIP_KINDS = ("refused", "failed", "error", "over-budget", "same-run")


@dataclass(frozen=True)
class Skip:
    """A grid point that is not run, with the reason. `form` is None when the method refused the
    case before any form was chosen (no form of it fits the body); `step`, `rtol` and `atol` are
    None then too, and for a method-level refusal they name no setting."""

    case_name: str
    method: str
    form: str | None
    step: float | None
    rtol: float | None
    atol: float | None
    kind: str
    reason: str
    line: str  # the sentence a sweep prints after "skipped"


def skip_of(job: Job, kind: str, reason: str) -> Skip:
    """The Skip of a planned grid point."""
    return Skip(
        job.case_name,
        job.method,
        job.form,
        job.step,
        job.rtol,
        job.atol,
        kind,
        reason,
        f"{job.describe()}: {reason}",
    )


def plan_job(job: Job) -> RunPlan:
    """The job's run plan, from the case text it carries (the case file need not be there)."""
    case = parse_case(job.case_toml, job.case_label, Path(job.case_path) if job.case_path else None)
    return plan_run(
        case,
        job.method,
        step=job.step,
        rtol=job.rtol,
        atol=job.atol,
        form=job.form,
        horizon=job.horizon,
        samples=job.samples,
    )
