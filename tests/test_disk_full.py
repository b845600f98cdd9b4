"""A full disk and a results folder that cannot be written. A full disk is emulated with a
file-size limit (RLIMIT_FSIZE, SIGXFSZ ignored so that the write fails with EFBIG, as it fails
with ENOSPC on a full disk); tests run as root, who ignores permission bits, so an unwritable
folder is a path under a regular file. Either way: one error line, exit 2, no traceback, and no
run marked `ok` that does not hold all its samples. A run stopped for want of room is marked
`interrupted` before HDF5 is asked to write what does not fit (store.NoRoom), and resumes to the
bytes of a run that never stopped."""

from __future__ import annotations

import resource
import signal
import subprocess
import textwrap

import h5py
import pytest
from run_files import dataset_hashes, topdrift_cmd
from tiny_cases import TOP_TOML, write_case

from topdrift.benchmarks.cli import entry as cli

# 4001 samples of leapfrog, flushed after every sample: the file grows well past the limits below.
LONG = ["--method", "leapfrog", "--step", "0.001", "--horizon", "20", "--samples", "4001"]


def limited(limit: int, *args):
    def pre():
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))

    return subprocess.run(
        topdrift_cmd(*args),
        preexec_fn=pre,
        capture_output=True,
        text=True,
        timeout=120,
    )


def check_left_behind(path, capsys) -> str:
    """Every run the file still shows as ok holds all its samples; a file HDF5 can no longer read
    is refused by `summary` on one line. Returns 'readable' or 'unreadable'."""
    capsys.readouterr()
    rc = cli.main(["summary", str(path)])
    err = capsys.readouterr().err
    if rc == 2:
        assert err.count("\n") == 1 and str(path) in err and "Traceback" not in err
        return "unreadable"
    assert rc == 0
    with h5py.File(path, "r", locking=False) as f:
        for g in f["runs"].values():
            if g.attrs["status"] == "ok":
                assert g["t"].shape[0] == g.attrs["samples"]
                assert g["state"].shape[0] == g.attrs["samples"]
    return "readable"


def one_error_line(stderr: str, path) -> str:
    assert "Traceback" not in stderr and "Exception ignored" not in stderr, stderr
    errors = [ln for ln in stderr.splitlines() if ln.startswith("topdrift: error:")]
    assert len(errors) == 1 and stderr.rstrip().splitlines()[-1] == errors[0], stderr
    assert str(path) in errors[0]
    return errors[0]


@pytest.fixture(scope="module")
def whole(tmp_path_factory):
    d = tmp_path_factory.mktemp("whole")
    case = write_case(d, "top.toml", TOP_TOML)
    out = d / "whole.h5"
    assert cli.main(["run", str(case), *LONG, "--out", str(out)]) == 0
    with h5py.File(out, "r") as f:
        (run_id,) = f["runs"].keys()
    return case, out, run_id


COUNTS = {"faults": 0, "resumes_compared": 0}


# 30 kB: no room for the run's group at all. 1.5 MB: room for a part of the samples
# (flushed after every sample, the file grows well past these limits).
@pytest.mark.parametrize("limit", [30_000, 1_500_000])
def test_run_on_a_full_disk_stops_interrupted_and_resumes(whole, tmp_path, capsys, limit):
    case, ref, run_id = whole
    out = tmp_path / "r.h5"
    proc = limited(limit, "run", str(case), *LONG, "--out", str(out), "--flush-every", "0")
    COUNTS["faults"] += 1
    assert proc.returncode == 2, proc.stderr
    line = one_error_line(proc.stderr, out)
    assert "not enough room" in line and "MB left on the disk or under the file-size limit" in line
    assert out.stat().st_size <= limit
    assert check_left_behind(out, capsys) == "readable"
    with h5py.File(out, "r") as f:
        runs = f["runs"]
        if run_id in runs:  # the 30 kB file had no room to start the run at all
            g = runs[run_id]
            assert g.attrs["status"] == "interrupted" and "not enough room" in g.attrs["detail"]
            assert g["t"].shape[0] == g["checkpoint/run"].attrs["sample"] < 4001
            assert f"{g['t'].shape[0]} of 4001 samples stored" in line
    # Room made (no limit): the run goes on to the bytes of one that never stopped.
    capsys.readouterr()
    assert cli.main(["run", str(case), *LONG, "--out", str(out), "--resume"]) == 0
    assert dataset_hashes(out, run_id) == dataset_hashes(ref, run_id)
    COUNTS["resumes_compared"] += 1


def test_a_complete_run_stays_complete_when_a_later_one_runs_out_of_room(tmp_path, capsys):
    case = write_case(tmp_path, "top.toml", TOP_TOML)
    out = tmp_path / "r.h5"
    short = ["--method", "leapfrog", "--step", "0.01"]
    assert cli.main(["run", str(case), *short, "--out", str(out)]) == 0
    limit = out.stat().st_size + 1_500_000
    proc = limited(limit, "run", str(case), *LONG, "--out", str(out), "--flush-every", "0")
    COUNTS["faults"] += 1
    assert proc.returncode == 2, proc.stderr
    one_error_line(proc.stderr, out)
    assert check_left_behind(out, capsys) == "readable"
    with h5py.File(out, "r") as f:
        statuses = sorted(str(g.attrs["status"]) for g in f["runs"].values())
    assert statuses == ["interrupted", "ok"]


def test_sweep_on_a_full_disk_keeps_its_complete_runs(tmp_path, capsys):
    case = write_case(tmp_path, "top.toml", TOP_TOML)
    spec = tmp_path / "s.toml"
    spec.write_text(
        textwrap.dedent(
            f"""\
            name = "s"
            description = "a grid that outgrows the limit"
            cases = ["{case}"]
            methods = ["leapfrog"]
            steps = [0.01, 0.0025, 0.002, 0.001]
            horizon = 20.0
            samples = 4001
            """
        )
    )
    out = tmp_path / "s.h5"
    proc = limited(2_000_000, "sweep", str(spec), "--out", str(out), "--jobs", "1")
    COUNTS["faults"] += 1
    assert proc.returncode == 2, proc.stderr
    assert "not enough room for run" in one_error_line(proc.stderr, out)
    assert check_left_behind(out, capsys) == "readable"
    with h5py.File(out, "r") as f:
        kept = len(f["runs"])
    assert 1 <= kept < 4
    # Room made: the same sweep runs only what is missing.
    capsys.readouterr()
    assert cli.main(["sweep", str(spec), "--out", str(out), "--jobs", "1"]) == 0
    err = capsys.readouterr().err
    assert f"{kept} run(s) already complete" in err
    check_left_behind(out, capsys)
    with h5py.File(out, "r") as f:
        assert sorted(str(g.attrs["status"]) for g in f["runs"].values()) == ["ok"] * 4


def test_full_disk_counts():
    assert COUNTS == {"faults": 4, "resumes_compared": 2}, COUNTS


def test_results_folder_that_cannot_be_made_is_one_line_and_no_file(tmp_path, capsys):
    case = write_case(tmp_path, "top.toml", TOP_TOML)
    blocker = tmp_path / "results"
    blocker.write_text("a file where the folder should be\n")
    for out in (blocker / "r.h5", blocker / "deeper" / "r.h5"):
        capsys.readouterr()
        rc = cli.main(
            ["run", str(case), "--method", "leapfrog", "--step", "0.01", "--out", str(out)]
        )
        err = capsys.readouterr().err
        assert rc == 2 and err.count("\n") == 1 and "cannot create the results file" in err, err
    assert blocker.read_text() == "a file where the folder should be\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["results", "top.toml"]
