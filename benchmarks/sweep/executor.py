"""Sweeps: a grid of runs computed in parallel and written by one process.

Workers (a local process pool, or the workers of a Dask cluster) each run one job into an
in-memory HDF5 image (run/in_memory.py) and return it; only the client opens the results file,
copying each finished run in as it arrives. Runs already in the file with a final status are
skipped, so a sweep that was stopped or lost a worker is completed by running it again, and no
run is ever written twice.

Stopping (SIGINT, SIGTERM): while the grid is sized and planned and the scheduler reached,
nothing is written and a signal stops the sweep at once. Once the file is open the signal only
sets the stop flag; the client looks at it at least every POLL_S, waits up to STOP_GRACE_S for
runs about to come back, writes those, and ends the workers: runs still being computed are
dropped (the same command computes them again) and nothing written is lost.
"""

from __future__ import annotations

import math
import os
import signal
import sys
import threading
import time
from collections.abc import Callable
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from dataclasses import dataclass, field
from multiprocessing import get_context
from pathlib import Path

from topdrift.benchmarks import stopping
from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.in_memory import MemoryRun, copy_run, run_in_memory
from topdrift.benchmarks.stopping import StopFlag
from topdrift.benchmarks.store.failures import ensure_room, file_failure
from topdrift.benchmarks.store.reader import check_path, complete_ids
from topdrift.benchmarks.store.writer import open_writer
from topdrift.benchmarks.sweep.grid import expand, expand_grid
from topdrift.benchmarks.sweep.jobs import SKIP_KINDS, Job, Skip, plan_job
from topdrift.benchmarks.sweep.spec import SweepSpec

__all__ = [
    "SKIP_KINDS",
    "Job",
    "Skip",
    "SweepOutcome",
    "expand",
    "expand_grid",
    "run_job",
    "run_sweep",
]

# How often the client looks at the stop flag while it waits for runs, and how long after a
# stop it still waits for runs about to come back before it ends the workers.
POLL_S = 0.1
STOP_GRACE_S = 0.3


@dataclass
class SweepOutcome:
    jobs: list[Job]
    skipped: list[str] = field(default_factory=list)  # grid points refused up front, with reason
    reused: list[str] = field(default_factory=list)  # run ids already complete in the file
    finished: dict[str, str] = field(default_factory=dict)  # run id -> status
    errors: dict[str, str] = field(default_factory=dict)  # run id -> what went wrong
    interrupted: bool = False
    signum: int = 0  # the signal that stopped it
    dropped: int = 0  # runs being computed when it stopped, not written (run again)
    todo: int = 0  # runs this sweep set out to compute

    @property
    def left(self) -> int:
        """Runs of the grid not in the file after this sweep (computed by running it again)."""
        return self.todo - len(self.finished)


def run_job(job: Job, stop: StopFlag | None = None) -> MemoryRun:
    """The worker's side: plan and run one job in memory (module-level, so it pickles). A stop
    (in-process sweeps only) ends the run as `interrupted`, and the caller drops it."""
    result = run_in_memory(plan_job(job), stop=stop)
    if result.run_id != job.run_id:
        raise RuntimeError(f"run id changed on the worker ({result.run_id} != {job.run_id})")
    return result


def run_sweep(
    spec: SweepSpec,
    out: Path,
    *,
    jobs: int = 1,
    scheduler: str | None = None,
    report: Callable[[str], None] | None = None,
    stop: StopFlag | None = None,
) -> SweepOutcome:
    """Run every job of the grid not yet complete in `out`. `stop` (set by a deferred signal
    handler, stopping.deferred) ends the sweep within a second once the file is open; before,
    a signal raises Interrupted (see the module docstring).

    Everything that can fail on bad input (the grid, the scheduler's address) is checked before
    the results file is opened, so that a refused sweep leaves no file behind."""
    report = report or (lambda line: print(line, file=sys.stderr))
    stop = stop if stop is not None else StopFlag()
    client = None
    try:
        with stopping.raising():  # nothing is written yet: a signal may stop it anywhere
            stopping.check(stop)
            if out.exists() or out.is_symlink():
                check_path(out)  # a path that is no run file is refused before the grid is planned
            grid, skipped = expand(spec, report)
            if scheduler:
                try:
                    client = _dask_client(scheduler)
                except stopping.Interrupted as exc:
                    raise exc.saying("while reaching the scheduler; nothing written") from None
        stopping.check(stop)
        f = open_writer(out)
    except BaseException:
        if client is not None:
            client.close()
        raise
    outcome = SweepOutcome(grid, skipped)
    try:
        _write_grid(f, out, grid, skipped, outcome, jobs, client, report, stop)
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
    if stop.requested:
        outcome.interrupted = True
        outcome.signum = stop.signum
    return outcome


def _write_grid(f, out, grid, skipped, outcome, jobs, client, report, stop) -> None:
    """Compute the runs not yet complete in the open file f and copy each in as it arrives."""
    done = complete_ids(f)
    todo = [j for j in grid if j.run_id not in done]
    outcome.reused = [j.run_id for j in grid if j.run_id in done]
    outcome.todo = len(todo)
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
        _in_process(todo, accept, outcome, stop)
    else:
        _on_pool(todo, jobs, accept, outcome, stop)


def _in_process(todo, accept, outcome, stop) -> None:
    for job in todo:
        if stop.requested:
            return
        try:
            result = run_job(job, stop=stop)
        except Exception as exc:  # one run's failure, as on a pool or a cluster
            accept(job, None, f"{type(exc).__name__}: {exc}")
            continue
        if stop.requested and result.status == "interrupted":
            outcome.dropped += 1  # stopped half way: computed again by the next sweep
            return
        accept(job, result, None)


PARENT_POLL_S = 0.2


def _worker_start(client_pid: int, quit_now) -> None:
    """Set up a pool worker. A Ctrl-C reaches the whole process group; the client alone decides
    to stop, so a worker must not die of it and take its finished run with it. A worker ends
    when the client sets `quit_now` (a stop: the runs in hand are dropped), and must not outlive
    a client that was killed outright: it would wait on its queue for ever. A thread watches
    both."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)

    def watch() -> None:
        while os.getppid() == client_pid and not quit_now.wait(PARENT_POLL_S):
            pass
        os._exit(1)

    threading.Thread(target=watch, name="topdrift-parent-watch", daemon=True).start()


def _take(futures: dict, done, accept) -> None:
    # In grid order within one poll's batch, so that the file's order does not depend on
    # which of two runs finished a few milliseconds first.
    for fut in sorted(done, key=lambda fu: futures[fu][0]):
        _, job = futures.pop(fut)  # drop the result once written: memory stays flat
        try:
            result = fut.result()
        except Exception as exc:  # a worker's failure is one run's failure
            accept(job, None, f"{type(exc).__name__}: {exc}")
        else:
            accept(job, result, None)


def _on_pool(todo, jobs, accept, outcome, stop) -> None:
    # spawn: workers start clean (no inherited file handles or threads) and load numba's cache.
    ctx = get_context("spawn")
    quit_now = ctx.Event()
    with ProcessPoolExecutor(
        max_workers=jobs,
        mp_context=ctx,
        initializer=_worker_start,
        initargs=(os.getpid(), quit_now),
    ) as pool:
        futures = {pool.submit(run_job, j): (i, j) for i, j in enumerate(todo)}
        try:
            while futures and not stop.requested:
                done, _ = wait(list(futures), timeout=POLL_S, return_when=FIRST_COMPLETED)
                _take(futures, done, accept)
            if stop.requested and futures:
                # Runs about to come back are still written; the rest are dropped.
                done, _ = wait(list(futures), timeout=STOP_GRACE_S, return_when=FIRST_COMPLETED)
                _take(futures, {fu for fu in done if not fu.cancelled()}, accept)
                outcome.dropped = sum(1 for fu in futures if fu.running())
        finally:
            # Whatever ends the loop (a stop, or an error while writing), runs not started are
            # dropped rather than computed for nobody, and the workers end now.
            for fu in futures:
                fu.cancel()
            quit_now.set()
            pool.shutdown(wait=True, cancel_futures=True)


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
    results = dask_completed(list(futures))
    while futures and not stop.requested:
        if not results.has_ready():
            time.sleep(POLL_S)  # looked at again within POLL_S: a stop is heard at once
            continue
        for fut in results.next_batch(block=False):
            job = futures.pop(fut)
            try:
                result = fut.result()
            except Exception as exc:
                accept(job, None, f"{type(exc).__name__}: {exc}")
            else:
                accept(job, result, None)
            fut.release()  # the cluster may forget the image once it is in the file
    if futures:  # stopped: what was not returned is cancelled on the cluster
        client.cancel(list(futures))
