"""`topdrift sweep --scheduler` against a real Dask cluster on loopback (two worker processes,
one thread each): the same bytes as a local sweep; a worker killed mid-sweep loses nothing and
writes nothing twice; an unreachable scheduler is a one-line error that leaves no file."""

import os
import signal
from pathlib import Path

import distributed  # in the `test` extra, so that CI runs these tests
import pytest
from sweep_grid import N_RUNS, PROGRESS, reference_sweep, run_datasets, same_datasets

from topdrift.benchmarks.cli import entry as cli
from topdrift.benchmarks.sweep import executor as sweep_mod
from topdrift.benchmarks.sweep.executor import run_sweep
from topdrift.benchmarks.sweep.spec import read_sweep


@pytest.fixture(scope="module")
def cluster():
    """A LocalCluster on 127.0.0.1 and a client of the test's own (to find and kill workers);
    both closed at teardown."""
    lc = distributed.LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=True,
        host="127.0.0.1",
        dashboard_address=None,
        silence_logs=50,  # CRITICAL: the nanny's restart warning is expected here
    )
    client = distributed.Client(lc)
    try:
        yield lc, client
    finally:
        client.close()
        lc.close()


@pytest.fixture(scope="module")
def local(tmp_path_factory):
    """The grid swept locally with one job: the reference."""
    grid, _, runs = reference_sweep(tmp_path_factory)
    return grid, runs


def test_scheduler_sweep_writes_the_bytes_of_a_local_one(cluster, local, tmp_path, capsys):
    lc, _ = cluster
    grid, ref = local
    out = tmp_path / "dask.h5"
    capsys.readouterr()
    rc = cli.main(["sweep", str(grid), "--out", str(out), "--scheduler", lc.scheduler_address])
    err = capsys.readouterr().err
    assert rc == 0, err
    assert len([ln for ln in err.splitlines() if PROGRESS.match(ln)]) == N_RUNS
    same_datasets(run_datasets(out), ref)


def test_worker_killed_mid_sweep_loses_nothing_and_writes_nothing_twice(
    cluster, local, tmp_path, monkeypatch
):
    lc, client = cluster
    grid, ref = local
    out = tmp_path / "lost-worker.h5"
    pids = client.run(os.getpid)  # worker address -> pid
    assert len(pids) == 2

    copies: list[str] = []
    real_copy = sweep_mod.copy_run

    def counting_copy(image, run_id, dst):
        copies.append(run_id)
        real_copy(image, run_id, dst)

    monkeypatch.setattr(sweep_mod, "copy_run", counting_copy)

    killed = {}
    lines = []

    def report(line: str) -> None:
        lines.append(line)
        if PROGRESS.match(line) and not killed:
            # After the first result: kill a worker that holds work not yet returned.
            busy = [w for w, keys in client.processing().items() if keys and w in pids]
            assert busy, "the kill must land while runs are in flight"
            killed["worker"] = busy[0]
            killed["keys"] = set(client.processing()[busy[0]])
            os.kill(pids[busy[0]], signal.SIGKILL)

    outcome = run_sweep(read_sweep(str(grid)), out, scheduler=lc.scheduler_address, report=report)
    assert killed and killed["keys"]
    assert outcome.errors == {} and not outcome.interrupted
    # Every run reached the client once and was written once: nothing lost, nothing twice.
    assert sorted(copies) == sorted(ref) and len(copies) == N_RUNS
    assert sorted(outcome.finished) == sorted(ref)
    progress = [int(PROGRESS.match(ln).group(1)) for ln in lines if PROGRESS.match(ln)]
    assert progress == list(range(1, N_RUNS + 1))
    same_datasets(run_datasets(out), ref)


def test_unreachable_scheduler_is_one_line_exit_2_and_no_file(local, tmp_path, capsys, monkeypatch):
    grid, _ = local
    monkeypatch.setattr(sweep_mod, "CONNECT_TIMEOUT_S", 1.0)  # the default is 10 s
    out = tmp_path / "nowhere" / "r.h5"
    # Port 9 (discard) on loopback: nothing listens there in a test environment.
    capsys.readouterr()
    rc = cli.main(["sweep", str(grid), "--out", str(out), "--scheduler", "tcp://127.0.0.1:9"])
    cap = capsys.readouterr()
    assert rc == 2
    lines = cap.err.strip().splitlines()
    assert len(lines) == 1 and "cannot reach the Dask scheduler" in lines[0], cap.err
    assert "tcp://127.0.0.1:9" in lines[0]
    assert not out.exists() and not Path(out.parent).exists()
