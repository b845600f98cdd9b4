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
