"""Sweeps: a grid of runs computed in parallel and written by one process.

Workers (a local process pool, or the workers of a Dask cluster) each run one job into an
in-memory HDF5 image (benchmarks/memrun.py) and return it; only the client opens the results
file, copying each finished run in as it arrives. Runs already in the file with a final status
are skipped, so a sweep that was stopped or lost a worker is completed by running it again, and
no run is ever written twice.
"""

from __future__ import annotations

import json
import math
import os
import signal
import sys
import threading
import time
from collections.abc import Callable
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from multiprocessing import get_context
from pathlib import Path

from topdrift.benchmarks.cases.library import load_case
from topdrift.benchmarks.cases.schema import parse_case
from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.in_memory import MemoryRun, copy_run, run_in_memory
from topdrift.benchmarks.run.runner import StartFailed, plan_run, samples_for_horizon
from topdrift.benchmarks.store.failures import ensure_room, file_failure
from topdrift.benchmarks.store.reader import complete_ids
from topdrift.benchmarks.store.writer import open_writer
from topdrift.benchmarks.sweep.settings_ladder import rtol_ladder, step_ladder
from topdrift.benchmarks.sweep.spec import SweepSpec
from topdrift.integrators import MethodRefused, UnknownMethod
from topdrift.integrators import get as get_method


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
# see expand_grid); "over-budget" and "same-run" are the sweep's own choices (max_steps, two
# requested steps that round to one run).
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


@dataclass
class SweepOutcome:
    jobs: list[Job]
    skipped: list[str] = field(default_factory=list)  # grid points refused up front, with reason
    reused: list[str] = field(default_factory=list)  # run ids already complete in the file
    finished: dict[str, str] = field(default_factory=dict)  # run id -> status
    errors: dict[str, str] = field(default_factory=dict)  # run id -> what went wrong
    interrupted: bool = False


def _plan(job: Job):
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


def run_job(job: Job) -> MemoryRun:
    """The worker's side: plan and run one job in memory (module-level, so it pickles)."""
    result = run_in_memory(_plan(job))
    if result.run_id != job.run_id:
        raise RuntimeError(f"run id changed on the worker ({result.run_id} != {job.run_id})")
    return result


def expand(spec: SweepSpec) -> tuple[list[Job], list[str]]:
    """Every (case, method, form, setting) of the grid, planned (so checked) on the client.
    Grid points a method cannot run (an Euler-form method on an asymmetric body) are skipped
    with the reason; anything else wrong is a UserError."""
    jobs, skips = expand_grid(spec)
    return jobs, [s.line for s in skips]


def expand_grid(spec: SweepSpec, *, keep_errors: bool = False) -> tuple[list[Job], list[Skip]]:
    """As `expand`, with each skipped grid point as a Skip. `keep_errors`: a grid point whose
    planning raises anything but a refusal or a UserError becomes a Skip of kind "error" instead
    of ending the expansion (the regression gate wants every cell's fate, a sweep a traceback)."""
    jobs: list[Job] = []
    skipped: list[Skip] = []
    same: dict[tuple, Job] = {}
    for spec_case in spec.cases:
        case = load_case(spec_case)
        horizon = spec.horizon if spec.horizon is not None else case.horizon
        # The horizon rule of every command: a sweep's horizon keeps the case's sample interval
        # unless the sweep gives its own sample count.
        samples = spec.samples if spec.samples is not None else samples_for_horizon(case, horizon)
        for name in spec.methods:
            try:
                method = get_method(name)
            except UnknownMethod:
                # For the gate, a method that is no longer registered (a plug-in that failed
                # to load) is a cell that stopped running, not a sweep file to reject.
                if not keep_errors:
                    raise
                why = f"unknown method {name!r}: not registered (a plug-in that did not load?)"
                line = f"{case.name} {name}: {why}"
                skipped.append(Skip(case.name, name, None, None, None, None, "error", why, line))
                continue
            own = spec.per_method.get(name, {})
            wrong = "rtols" if method.info.control == "step" else "steps"
            if wrong in own:
                kind = "a fixed-step" if wrong == "rtols" else "an adaptive"
                raise UserError(
                    f"{spec.name}: method.{name}.{wrong}: {name} is {kind} method; "
                    f"give {'steps' if wrong == 'rtols' else 'rtols'}"
                )
            forms = own.get("forms") or spec.forms
            if forms is None:
                try:
                    forms = [method.default_form(case.body)]
                except MethodRefused as exc:
                    line = f"{case.name} {name}: {exc}"
                    skipped.append(
                        Skip(case.name, name, None, None, None, None, "refused", str(exc), line)
                    )
                    continue
            for form in forms:
                if method.info.control == "step":
                    ladder = own.get("steps", spec.steps)
                    if ladder == "auto":
                        every = step_ladder(case, method.info.order, spec.rungs, horizon, math.inf)
                        ladder = [h for h in every if horizon / h <= spec.max_steps]
                        for h in (h for h in every if h not in ladder):  # said, not silent
                            why = (
                                f"{horizon / h:.3g} steps over the horizon, more than "
                                f"max_steps = {spec.max_steps:g}"
                            )
                            line = f"{case.name} {name} ({form}) step={h:.4g}: {why}"
                            skipped.append(
                                Skip(case.name, name, form, h, None, None, "over-budget", why, line)
                            )
                    settings = [(h, None, None) for h in ladder]
                else:
                    ladder = own.get("rtols", spec.rtols)
                    if ladder == "auto":
                        ladder = rtol_ladder(spec.rungs)
                    settings = [
                        (None, r, None if spec.atol_ratio is None else r * spec.atol_ratio)
                        for r in ladder
                    ]
                for step, rtol, atol in settings:
                    job = Job(
                        case.name,
                        str(case.path.name if case.path else case.name),
                        case.toml_text,
                        str(case.path) if case.path else None,
                        name,
                        form,
                        step,
                        rtol,
                        atol,
                        horizon,
                        samples,
                    )
                    try:
                        plan = _plan(job)
                    except MethodRefused as exc:
                        kind = "failed" if isinstance(exc, StartFailed) else "refused"
                        skipped.append(_skip(job, kind, str(exc)))
                        continue
                    except UserError:
                        raise
                    except Exception as exc:  # noqa: BLE001 - kept as a cell only when asked
                        if not keep_errors:
                            raise
                        skipped.append(_skip(job, "error", f"{type(exc).__name__}: {exc}"))
                        continue
                    # Two requested steps that round to the same step (one whole number of
                    # steps per sample interval) are the same computation: run it once.
                    used = {k: v for k, v in plan.settings.items() if k != "step_requested"}
                    used = json.dumps(used, sort_keys=True)
                    key = (job.case_toml, name, form, used, horizon, samples)
                    if key in same:
                        why = (
                            f"runs as step={plan.settings['step']:.4g}, "
                            f"the same run as {same[key].describe()}"
                        )
                        skipped.append(_skip(job, "same-run", why))
                        continue
                    same[key] = job
                    jobs.append(Job(**{**job.__dict__, "run_id": plan.run_id}))
    seen = set()
    unique = []
    for j in jobs:  # a case or method listed twice
        if j.run_id not in seen:
            seen.add(j.run_id)
            unique.append(j)
    return unique, skipped


def _skip(job: Job, kind: str, reason: str) -> Skip:
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


def run_sweep(
    spec: SweepSpec,
    out: Path,
    *,
    jobs: int = 1,
    scheduler: str | None = None,
    report: Callable[[str], None] | None = None,
    stop=None,
) -> SweepOutcome:
    """Run every job of the grid not yet complete in `out`. `stop` (an object with a
    `requested` attribute, set by a signal handler) ends the sweep after the runs in hand.

    Everything that can fail on bad input (the grid, the scheduler's address) is checked before
    the results file is opened, so that a refused sweep leaves no file behind."""
    report = report or (lambda line: print(line, file=sys.stderr))
    grid, skipped = expand(spec)
    outcome = SweepOutcome(grid, skipped)
    client = _dask_client(scheduler) if scheduler else None
    try:
        f = open_writer(out)
    except BaseException:
        if client is not None:
            client.close()
        raise
    try:
        done = complete_ids(f)
        todo = [j for j in grid if j.run_id not in done]
        outcome.reused = [j.run_id for j in grid if j.run_id in done]
        for line in skipped:
            report(f"skipped {line}")
        if outcome.reused:
            report(f"{len(outcome.reused)} run(s) already complete in {out}; not run again")
        total = len(todo)
        count = 0

        def accept(job: Job, result: MemoryRun | None, error: str | None) -> None:
            nonlocal count
            count += 1
            if error is not None:
                outcome.errors[job.run_id] = error
                report(f"[{count}/{total}] {job.describe()}: failed: {error}")
                return
            # The image's size bounds what the copy adds; refused before writing (store.NoRoom).
            ensure_room(f, len(result.image), f"run {job.run_id} ({job.describe()})")
            copy_run(result.image, job.run_id, f)
            outcome.finished[job.run_id] = result.status
            wall = result.metrics.get("wall_s")
            took = f" in {wall:.3g} s" if isinstance(wall, float) and math.isfinite(wall) else ""
            report(f"[{count}/{total}] {job.describe()}: {result.status}{took}")

        if client is not None:
            _on_dask(todo, client, accept, outcome, stop)
        elif jobs <= 1:
            for job in todo:
                if stop is not None and stop.requested:
                    outcome.interrupted = True
                    break
                try:
                    result = run_job(job)
                except Exception as exc:  # one run's failure, as on a pool or a cluster
                    accept(job, None, f"{type(exc).__name__}: {exc}")
                else:
                    accept(job, result, None)
        else:
            _on_pool(todo, jobs, accept, outcome, stop)
    except (OSError, RuntimeError, KeyError) as exc:
        # A full disk or a file-size limit while a run was copied in, or a part of the file
        # HDF5 could not read.
        error = file_failure(
            exc,
            f,
            out,
            in_hand="the runs already copied in are kept",
            next_step="run the same sweep again (complete runs are not run twice)",
        )
        if error is None:
            raise
        f = None
        raise error from None
    finally:
        try:
            if f is not None:
                f.close()
        finally:
            if client is not None:
                client.close()
    return outcome


PARENT_POLL_S = 0.5


def _worker_start(client_pid: int) -> None:
    """Set up a pool worker. A Ctrl-C reaches the whole process group; the client alone decides
    to stop (after the runs in hand), so a worker must not die of it and take its finished run
    with it. And a worker must not outlive a client that was killed outright: it would wait on
    its queue for ever, so a thread ends it once its parent is gone."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)

    def watch() -> None:
        while os.getppid() == client_pid:
            time.sleep(PARENT_POLL_S)
        os._exit(1)

    threading.Thread(target=watch, name="topdrift-parent-watch", daemon=True).start()


def _on_pool(todo, jobs, accept, outcome, stop) -> None:
    # spawn: workers start clean (no inherited file handles or threads) and load numba's cache.
    with ProcessPoolExecutor(
        max_workers=jobs,
        mp_context=get_context("spawn"),
        initializer=_worker_start,
        initargs=(os.getpid(),),
    ) as pool:
        futures = {pool.submit(run_job, j): j for j in todo}
        try:
            for fut in as_completed(list(futures)):
                job = futures.pop(fut)  # drop the result once written: memory stays flat
                try:
                    result = fut.result()
                except Exception as exc:  # a worker's failure is one run's failure
                    accept(job, None, f"{type(exc).__name__}: {exc}")
                else:
                    accept(job, result, None)
                if stop is not None and stop.requested:
                    outcome.interrupted = True
                    break
        finally:
            # Whatever ends the loop (a stop, or an error while writing), runs not started are
            # dropped rather than computed for nobody.
            pool.shutdown(wait=True, cancel_futures=True)
        if outcome.interrupted:
            # Runs that were in hand when the stop came have finished by now: keep them.
            for fut, job in futures.items():
                if fut.done() and not fut.cancelled() and fut.exception() is None:
                    accept(job, fut.result(), None)


# How long to try to reach a scheduler before calling the address unreachable.
CONNECT_TIMEOUT_S = 10.0


def _dask_client(address: str):
    try:
        from distributed import Client
    except ImportError:
        raise UserError(
            "--scheduler needs dask.distributed: pip install 'topdrift[dask]'"
        ) from None
    try:
        return Client(address, timeout=CONNECT_TIMEOUT_S)
    except (OSError, TimeoutError, ValueError) as exc:
        raise UserError(f"--scheduler {address}: cannot reach the Dask scheduler ({exc})") from None
    except TypeError as exc:
        # Dask's own words when a tls:// address meets a client without TLS settings.
        raise UserError(
            f"--scheduler {address}: cannot reach the Dask scheduler ({exc}); a tls:// address "
            "needs Dask's TLS settings (distributed.comm.tls.*, see the README)"
        ) from None


def _on_dask(todo, client, accept, outcome, stop) -> None:
    from distributed import as_completed as dask_completed

    # The run id is the task key: a task the scheduler reruns after losing its worker is
    # still one task, and its result reaches this client once.
    futures = {
        client.submit(run_job, j, key=f"topdrift-run-{j.run_id}", pure=False): j for j in todo
    }
    for fut in dask_completed(list(futures)):
        job = futures.pop(fut)
        try:
            result = fut.result()
        except Exception as exc:
            accept(job, None, f"{type(exc).__name__}: {exc}")
        else:
            accept(job, result, None)
        fut.release()  # the cluster may forget the image once it is in the file
        if stop is not None and stop.requested:
            outcome.interrupted = True
            client.cancel(list(futures))
            break
