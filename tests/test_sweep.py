"""`topdrift sweep` on a local process pool: the grid lands in one file, every run once, in the
run store's layout; a second sweep runs nothing and leaves the file as it was; the numbers do not
depend on the worker; bad sweep files are refused before any file exists; grid points a method
cannot run are skipped with the reason; a client killed mid-sweep is completed by running the same
command again, to the same bytes."""

import hashlib
import json
import math
import os
import shutil
import subprocess
import time
from pathlib import Path

import h5py
import numpy as np
import pytest
from run_files import topdrift_cmd
from sweep_grid import (
    N_RUNS,
    N_SKIPPED,
    PROGRESS,
    SWEEP_TOML,
    reference_sweep,
    run_datasets,
    same_datasets,
    write_grid,
)

from topdrift.benchmarks.cli import entry as cli
from topdrift.benchmarks.run.runner import StopFlag
from topdrift.benchmarks.sweep import executor as sweep_mod
from topdrift.benchmarks.sweep.executor import expand, run_sweep
from topdrift.benchmarks.sweep.spec import read_sweep

SAMPLE_SETS = ("t", "euler", "quaternion", "momentum", "state")
INVARIANTS = ("energy", "p_phi", "p_psi", "norm")


def file_sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    """The grid swept once in this process with one job: the reference for every comparison."""
    return reference_sweep(tmp_path_factory)


def expected_grid() -> set[tuple]:
    """The grid worked out by hand from SWEEP_TOML (cases x methods x forms x settings)."""
    rows = set()
    for case, lf_forms in (("grid-top", ("euler", "body")), ("grid-asym", ("body",))):
        for form in lf_forms:
            for h in (4e-6, 2e-6):
                rows.add((case, "leapfrog", form, ("step", h)))
        for h in (1e-5, 5e-6):
            rows.add((case, "rk4", "body", ("step", h)))
        for r in (1e-7, 1e-10):
            rows.add((case, "dop853", "body", ("rtol", r)))
    return rows


def test_every_run_once_ok_in_the_documented_layout(clean):
    grid, out, runs = clean
    assert len(runs) == N_RUNS
    got = set()
    with h5py.File(out, "r") as f:
        assert f.attrs["format"] == "topdrift-runs" and f.attrs["format_version"] == 2
        assert list(f) == ["runs"]
        for rid, g in f["runs"].items():
            a = g.attrs
            assert a["status"] == "ok", (rid, a.get("detail"))
            s = json.loads(a["settings"])
            key = ("step", s["step_requested"]) if "step" in s else ("rtol", s["rtol"])
            got.add((a["case"], a["method"], a["form"], key))
            if "rtol" in s:
                assert s["atol"] == s["rtol"] * 1e-3  # the runner's default atol
            else:
                # a whole number of steps per sample interval (1.5 s / 15)
                assert s["steps_per_sample"] * s["step"] == pytest.approx(0.1, rel=1e-12)
            assert a["horizon"] == 1.5 and a["samples"] == 16
            case_file = {"grid-top": "sym.toml", "grid-asym": "asym.toml"}[a["case"]]
            assert a["case_toml"] == (grid.parent / case_file).read_text()
            n = 16
            width = 7 if a["form"] == "body" else 6
            for name in SAMPLE_SETS:
                cols = {"euler": 3, "quaternion": 4, "momentum": 3, "state": width}.get(name)
                assert g[name].shape == ((n,) if cols is None else (n, cols)), (rid, name)
            for name in INVARIANTS:
                assert g[f"invariants/{name}"].shape == (n,)
            # exact comparison only where there is an exact solution (the Lagrange top)
            assert ("exact" in g) == (a["case"] == "grid-top")
            # turns of phi and psi (format version 2): the samples' in the Euler form only
            assert ("euler_turns" in g) == (a["form"] == "euler")
            if a["form"] == "euler":
                assert g["euler_turns"].shape == (n, 2) and g["euler_turns"].dtype == np.int64
            # sample times t_k = k T / (n - 1), the runner's documented formula
            assert np.array_equal(g["t"][()], np.array([1.5 * k / 15 for k in range(16)]))
            metrics = json.loads(a["metrics"])
            assert metrics["steps"] > 0 and math.isfinite(metrics["energy_rel_max"])
    assert got == expected_grid()


def test_a_sweep_run_is_the_run_topdrift_run_makes(clean, tmp_path, capsys):
    """The in-memory image a worker returns, copied into the file, holds the same run (same id,
    same bytes) as `topdrift run` writing straight to disk."""
    grid, _, runs = clean
    out = tmp_path / "single.h5"
    capsys.readouterr()
    rc = cli.main(
        [
            "run",
            str(grid.parent / "asym.toml"),
            "--method",
            "rk4",
            "--step",
            "1e-5",
            "--horizon",
            "1.5",
            "--samples",
            "16",
            "--out",
            str(out),
            "--json",
        ]
    )
    assert rc == 0
    (row,) = json.loads(capsys.readouterr().out)["runs"]
    single = run_datasets(out)
    assert row["run_id"] in runs
    assert single[row["run_id"]]["datasets"] == runs[row["run_id"]]["datasets"]


def test_skipped_grid_points_are_reported_not_fatal(command_line, clean, tmp_path):
    grid, _, _ = clean
    out = tmp_path / "again.h5"
    shutil.copy(clean[1], out)
    rc, _, err = command_line("sweep", str(grid), "--out", str(out), "--jobs", "1")
    assert rc == 0
    skipped = [ln for ln in err.splitlines() if ln.startswith("skipped ")]
    assert len(skipped) == N_SKIPPED
    for ln in skipped:
        assert ln.startswith("skipped grid-asym leapfrog (euler) step=")
        assert "needs a symmetric body" in ln  # the method's own reason


def test_second_sweep_runs_nothing_and_leaves_the_file_alone(command_line, clean, tmp_path):
    grid, ref, runs = clean
    out = tmp_path / "again.h5"
    shutil.copy(ref, out)
    before = file_sha(out)
    rc, stdout, err = command_line("sweep", str(grid), "--out", str(out), "--jobs", "2", "--json")
    assert rc == 0
    assert f"{N_RUNS} run(s) already complete" in err
    assert not [ln for ln in err.splitlines() if PROGRESS.match(ln)]  # nothing ran
    assert file_sha(out) == before  # not one byte changed
    doc = json.loads(stdout)
    assert doc["sweep"] == "grid" and sorted(r["run_id"] for r in doc["runs"]) == sorted(runs)


BAD_SWEEPS = [
    ("unknown key", SWEEP_TOML.replace("horizon = 1.5", "horizen = 1.5"), "horizen: unknown key"),
    ("missing key", SWEEP_TOML.replace('cases = ["sym.toml", "asym.toml"]', ""), "cases: missing"),
    ("bad ladder", SWEEP_TOML.replace("steps = [1e-5, 5e-6]", "steps = [1e-5, -1.0]"), "steps[1]"),
    ("empty ladder", SWEEP_TOML.replace("rtols = [1e-7, 1e-10]", "rtols = []"), "rtols"),
    ("ladder word", SWEEP_TOML.replace("rtols = [1e-7, 1e-10]", 'rtols = "fine"'), "rtols"),
    ("unknown method", SWEEP_TOML.replace('"rk4"', '"rk5"'), "rk5"),
    ("unknown case", SWEEP_TOML.replace('"asym.toml"', '"no-such-top"'), "no-such-top"),
    ("unknown form", SWEEP_TOML.replace('["euler", "body"]', '["euler", "polar"]'), "polar"),
    ("stray method table", SWEEP_TOML + "\n[method.gauss4]\nsteps = [1e-3]\n", "method.gauss4"),
    ("name with a slash", SWEEP_TOML.replace('name = "grid"', 'name = "a/b"'), "name: 'a/b'"),
    ("not TOML", SWEEP_TOML.replace("horizon = 1.5", "horizon = "), "not valid TOML"),
]


@pytest.mark.parametrize("what,text,needle", BAD_SWEEPS, ids=[b[0] for b in BAD_SWEEPS])
def test_bad_sweep_file_exits_2_with_one_line_and_no_file(
    command_line, tmp_path, what, text, needle
):
    write_grid(tmp_path)
    bad = tmp_path / "bad.toml"
    bad.write_text(text)
    out = tmp_path / "results" / "bad.h5"
    rc, stdout, err = command_line("sweep", str(bad), "--out", str(out), "--jobs", "1")
    assert rc == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("topdrift: error: "), err
    assert needle in lines[0]
    assert stdout == ""
    assert not out.exists() and not out.parent.exists()


def test_bad_options_exit_2_and_leave_an_existing_file_alone(command_line, clean, tmp_path):
    grid, ref, _ = clean
    out = tmp_path / "kept.h5"
    shutil.copy(ref, out)
    before = file_sha(out)
    rc, _, err = command_line("sweep", str(grid), "--out", str(out), "--jobs", "0")
    assert rc == 2 and "--jobs" in err and len(err.strip().splitlines()) == 1
    rc, _, err = command_line("sweep", "no-such-sweep", "--out", str(out))
    assert rc == 2 and "no-such-sweep" in err and len(err.strip().splitlines()) == 1
    assert file_sha(out) == before
    # a results file that is not a run store is refused, and left as it was
    foreign = tmp_path / "notes.h5"
    foreign.write_bytes(b"not HDF5 at all\n")
    rc, _, err = command_line("sweep", str(grid), "--out", str(foreign), "--jobs", "1")
    assert rc == 2 and str(foreign) in err and len(err.strip().splitlines()) == 1
    assert foreign.read_bytes() == b"not HDF5 at all\n"


def _complete_runs(path: Path) -> int:
    with h5py.File(path, "r") as f:
        return sum(1 for g in f["runs"].values() if g.attrs.get("status") in ("ok", "diverged"))


def _live_processes_in_group(pgid: int) -> list[int]:
    """Processes of a process group that are not zombies (Linux /proc)."""
    live = []
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            stat = Path(f"/proc/{entry}/stat").read_text()
        except OSError:
            continue
        fields = stat.rsplit(")", 1)[1].split()
        if int(fields[2]) == pgid and fields[0] != "Z":
            live.append(int(entry))
    return live


def test_client_killed_mid_sweep_is_completed_by_the_same_command(command_line, clean, tmp_path):
    """SIGKILL of `topdrift sweep --jobs 2` after some runs are in the file, then the same
    command again. Every run of the final file was computed by a two-worker pool, so its bytes
    matching the one-job sweep's also show that the numbers do not depend on the worker."""
    grid, _, runs = clean
    out = tmp_path / "killed.h5"
    args = ["sweep", str(grid), "--out", str(out), "--jobs", "2"]
    # Its own session, so that the workers it spawns can be found (and checked gone) by group.
    proc = subprocess.Popen(
        topdrift_cmd(*args),
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
        start_new_session=True,
    )
    try:
        # A progress line is printed once its run is in the file and flushed: after the second,
        # kill. (Watching the progress lines, not the file, keeps this test from reading an HDF5
        # file while another process writes it.)
        done = 0
        for line in proc.stderr:
            done += bool(PROGRESS.match(line))
            if done == 2:
                break
        proc.kill()  # SIGKILL: no handler, no flush, no goodbye
        proc.wait(timeout=10)
    finally:
        if proc.poll() is None:
            proc.kill()
        proc.stderr.close()
    assert proc.returncode == -9
    partial = _complete_runs(out)
    assert 2 <= partial < N_RUNS, "the kill must land mid-sweep"
    # The workers notice that their client is gone and end (they would otherwise wait for
    # ever on their queue).
    deadline = time.monotonic() + 10.0
    while _live_processes_in_group(proc.pid) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert _live_processes_in_group(proc.pid) == []

    # The same command line again (in this process, to spare a second interpreter start-up).
    rc, _, err = command_line("sweep", *args[1:])
    assert rc == 0, err
    # Only the runs not complete before are run, each once, numbered 1..rest.
    progress = [PROGRESS.match(ln) for ln in err.splitlines() if PROGRESS.match(ln)]
    rest = N_RUNS - partial
    assert [int(m.group(1)) for m in progress] == list(range(1, rest + 1))
    assert {int(m.group(2)) for m in progress} == {rest}
    assert f"{partial} run(s) already complete" in err
    same_datasets(run_datasets(out), runs)


def test_auto_ladders_follow_the_documented_rule(tmp_path):
    """An "auto" step ladder starts at 1/8 of the fastest period of the start and spans
    8 / order decades; rungs over max_steps are skipped with the reason. Worked by hand for the
    grid's symmetric top: body rates w1 = -phidot sin(theta) = -0.5, w2 = 0,
    w3 = psidot + phidot cos(theta) = 20 pi + cos(30 deg) rad/s (the rates of the Euler angles,
    Goldstein sec. 4.9) [from memory]; gravity's rate sqrt(M g l / I3) = 7.0 rad/s is slower."""
    write_grid(tmp_path)
    (tmp_path / "auto.toml").write_text(
        'name = "auto"\ncases = ["sym.toml"]\nmethods = ["leapfrog", "dop853"]\n'
        'forms = ["euler"]\nhorizon = 1.5\nsamples = 16\nrungs = 3\nmax_steps = 1e5\n'
    )
    jobs, skipped = expand(read_sweep(str(tmp_path / "auto.toml")))
    w3 = 20.0 * math.pi + math.cos(math.radians(30.0))
    h0 = (2.0 * math.pi / w3) / 8.0
    want = [float(f"{h0 * 10.0 ** (-2.0 * k):.3g}") for k in range(3)]  # 8 / 2 decades
    assert want == [0.0123, 0.000123, 1.23e-06]
    steps = [j.step for j in jobs if j.method == "leapfrog"]
    assert steps == want[:2]  # 1.5 s / 1.23e-6 s = 1.2e6 steps > max_steps
    (line,) = skipped
    assert line.startswith("grid-top leapfrog (euler) step=1.23e-06: 1.22e+06 steps")
    assert "max_steps = 100000" in line
    # tolerances: log-spaced from 1e-3 to 1e-12, 3 significant digits
    assert [j.rtol for j in jobs if j.method == "dop853"] == [1e-3, 3.16e-8, 1e-12]


def test_a_ladder_of_the_wrong_kind_for_a_method_is_refused(command_line, tmp_path):
    write_grid(tmp_path)
    bad = tmp_path / "wrong.toml"
    bad.write_text(SWEEP_TOML + "\n[method.rk4]\nrtols = [1e-6]\n")
    out = tmp_path / "wrong.h5"
    rc, _, err = command_line("sweep", str(bad), "--out", str(out), "--jobs", "1")
    assert rc == 2 and not out.exists()
    assert "method.rk4.rtols: rk4 is a fixed-step method; give steps" in err


def test_a_stopped_sweep_keeps_its_runs_and_is_completed_again(clean, tmp_path):
    """A stop request (what SIGINT or SIGTERM set in the command) ends the sweep after the runs
    in hand; they are in the file, and the sweep run again does only the rest."""
    grid, _, runs = clean
    out = tmp_path / "stopped.h5"
    stop = StopFlag()
    lines = []

    def report(line):
        lines.append(line)
        if len([ln for ln in lines if PROGRESS.match(ln)]) == 3:
            stop.signum = 2

    first = run_sweep(read_sweep(str(grid)), out, jobs=1, report=report, stop=stop)
    assert first.interrupted and len(first.finished) == 3
    assert len(run_datasets(out)) == 3
    second = run_sweep(read_sweep(str(grid)), out, jobs=1, report=lambda _: None)
    assert not second.interrupted and sorted(second.reused) == sorted(first.finished)
    assert len(second.finished) == N_RUNS - 3
    same_datasets(run_datasets(out), runs)


def test_steps_that_round_to_the_same_step_run_once(tmp_path):
    """A fixed step is rounded down to divide the sample interval (README, "Run store"): with a
    sample every 0.1 s, 0.3 s and 0.2 s both run as 0.1 s, one computation, the second said so."""
    write_grid(tmp_path)
    (tmp_path / "same.toml").write_text(
        'name = "same"\ncases = ["sym.toml"]\nmethods = ["rk4"]\nhorizon = 1.0\nsamples = 11\n'
        "steps = [0.3, 0.2, 0.05]\n"
    )
    jobs, skipped = expand(read_sweep(str(tmp_path / "same.toml")))
    assert [j.step for j in jobs] == [0.3, 0.05]
    assert skipped == [
        "grid-top rk4 (body) step=0.2: runs as step=0.1, the same run as "
        "grid-top rk4 (body) step=0.3"
    ]


def test_a_failed_run_is_left_out_and_exits_1(command_line, clean, tmp_path, monkeypatch):
    """A run whose worker raises is reported and left out of the file (so that the next sweep
    computes it); the other runs are written; the exit status is 1."""
    grid, _, runs = clean
    real = sweep_mod.run_job
    broken = {}

    def flaky(job, **kw):  # an in-process sweep passes its stop flag as `stop`
        if not broken:
            broken[job.run_id] = job
            raise RuntimeError("worker lost its disk")
        return real(job, **kw)

    monkeypatch.setattr(sweep_mod, "run_job", flaky)
    out = tmp_path / "flaky.h5"
    rc, _, err = command_line("sweep", str(grid), "--out", str(out), "--jobs", "1")
    assert rc == 1
    (rid,) = broken
    assert f"{broken[rid].describe()}: failed: RuntimeError: worker lost its disk" in err
    assert sorted(run_datasets(out)) == sorted(set(runs) - {rid})
    monkeypatch.setattr(sweep_mod, "run_job", real)
    rc, _, err = command_line("sweep", str(grid), "--out", str(out), "--jobs", "1")
    assert rc == 0 and f"{N_RUNS - 1} run(s) already complete" in err
    same_datasets(run_datasets(out), runs)
