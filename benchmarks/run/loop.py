"""The sample loop every run goes through, and how a run ends.

A run, single (runner.py) or an ensemble (ensemble.py), is advanced from sample time to sample
time; each sample is recorded into a batch, and the batch is written when it is full, when
`flush_every` seconds have passed, when a stop is asked for and when the run ends. What differs
between the kinds (how they advance, what a sample holds, what a write adds: a checkpoint, the
exact solution) is the kind's; the order of advancing, recording, writing and stopping is here,
once.

The run's status is one of the store's labels (store.format.STATUSES); a stepper's status code
(integrators.ST_*) maps to one by `stepper_outcome`.
"""

from __future__ import annotations

import math
import time
from abc import ABC, abstractmethod
from dataclasses import dataclass

from topdrift.benchmarks.store.format import DIVERGED, FAILED, INTERRUPTED, SINGULAR
from topdrift.benchmarks.store.writer import RunGroup
from topdrift.integrators import (
    ST_DIVERGED,
    ST_NO_CONVERGENCE,
    ST_SINGULAR,
    ST_STEP_UNDERFLOW,
    STATUS_NAMES,
)


@dataclass(frozen=True)
class Outcome:
    """How a run ended before its last sample: the status label, what happened, and when (None
    when no time says it, as for a stop or a failed reference)."""

    status: str
    detail: str = ""
    t_fail: float | None = None


# The run was asked to stop (a signal); it ends interrupted at its last written sample.
STOPPED = Outcome(INTERRUPTED)

# The run status a stepper's status code ends a run with; any code not named here: FAILED.
RUN_STATUS = {ST_DIVERGED: DIVERGED, ST_SINGULAR: SINGULAR}

# What a stepper's failure status means, said in the run's detail after "<status> at t = ...".
WHY = {
    ST_STEP_UNDERFLOW: "the adaptive step fell below 10 ulp of t (round-off) without meeting "
    "the tolerance; loosen --rtol/--atol or look for a singularity near that time",
    ST_NO_CONVERGENCE: "the implicit stages did not converge; take a smaller --step",
}


def stepper_outcome(code: int, t_fail: float) -> Outcome:
    """The end of a run whose stepper stopped with status `code` at t_fail."""
    detail = f"{STATUS_NAMES[code]} at t = {t_fail:.17g}"
    if code in WHY:
        detail += f": {WHY[code]}"
    return Outcome(RUN_STATUS.get(code, FAILED), detail, t_fail)


class SampledRun(ABC):
    """One run as the loop drives it. `k` is the next sample to take; `samples` and
    `sample_time(k)` come from the plan; `rows` is how many samples a batch holds."""

    k: int
    samples: int
    rows: int

    @abstractmethod
    def sample_time(self, k: int) -> float:
        """The time of sample k."""

    @abstractmethod
    def steps(self) -> int:
        """Steps taken so far, for the progress report."""

    @abstractmethod
    def take_start(self) -> int:
        """Record the start sample into batch row 0 when k == 0 (and set k to 1); returns how
        many rows the batch holds now (0 on a resumed run)."""

    @abstractmethod
    def advance(self, tk: float) -> Outcome | None:
        """Advance to the sample time tk; an Outcome when the run ends there instead (STOPPED:
        a stop asked for inside the interval, the run is then back at its last sample)."""

    @abstractmethod
    def record(self, j: int, tk: float) -> Outcome | None:
        """Record the sample at tk into batch row j; an Outcome ends the run without it."""

    @abstractmethod
    def check(self, j: int, tk: float) -> Outcome | None:
        """Look at the sample just recorded in row j; an Outcome ends the run with it."""

    @abstractmethod
    def write(self, j: int) -> Outcome | None:
        """Write the batch's first j rows (and whatever goes with them); an Outcome when the
        batch could not be completed and is dropped whole, which ends the run."""


def sample_loop(run: SampledRun, *, progress, stop, flush_every: float) -> Outcome | None:
    """Take the run's samples to its end; None when it reached its last sample, else the
    Outcome that ended it. Every sample taken is written before this returns."""
    n = run.samples
    if progress:
        progress.begin(run.k, run.steps())
    j = run.take_start()
    last_write = time.perf_counter()
    while True:
        end = None
        if run.k < n:
            end, j = _one_sample(run, j, progress)
        last = end is not None or run.k == n
        if (
            last
            or j == run.rows
            or stop.requested
            or time.perf_counter() - last_write >= flush_every
        ):
            dropped = run.write(j)
            if dropped is not None:
                return dropped  # the batch is dropped whole and replaces any other end
            j = 0
            last_write = time.perf_counter()
            if progress:
                progress.flushed(run.k, run.steps())
            if end is None and run.k < n and stop.requested:
                end = STOPPED
        if end is not None or run.k == n:
            return end


def _one_sample(run: SampledRun, j: int, progress) -> tuple[Outcome | None, int]:
    """Advance to the next sample, record and check it; (how the run ended or None, rows)."""
    tk = run.sample_time(run.k)
    end = run.advance(tk)
    if end is not None:
        return end, j
    end = run.record(j, tk)
    if end is not None:
        return end, j
    j += 1
    run.k += 1
    end = run.check(j - 1, tk)
    if end is None and progress:
        progress.update(run.k, run.steps())
    return end, j


def close_run(group: RunGroup, status: str, detail: str, metrics: dict, progress) -> None:
    """Store the final metrics and then the status. The samples and metrics reach the disk
    first: a write that fails (a full disk, a file-size limit) raises here, and the run stays
    `running`, never `ok` and short."""
    group.set_metrics(metrics)
    group.flush()
    group.set(status=status, detail=detail)
    group.flush()
    if progress:
        progress.end(status)


def failure_time(t_fail: float, t: float) -> float:
    """The time a stepper says it failed at, or its current time when it says none."""
    return float(t_fail) if math.isfinite(t_fail) else float(t)
