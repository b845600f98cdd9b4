"""SIGINT and SIGTERM stop any command within a second at any stage, with one line saying what
was finished and what is left: while starting, while a large grid is planned, while a sweep's
workers compute, in the middle of a compiled kernel (the round-off study), and in memory (pick).
Never a traceback; the exit status is 128 + the signal, as shells report it."""

from __future__ import annotations

import os
import signal
import subprocess
import time

import h5py
import pytest
from run_files import topdrift_cmd
from sweep_grid import N_RUNS, PROGRESS, reference_sweep, run_datasets, same_datasets
from tiny_cases import TOP_TOML

from topdrift.benchmarks.cli import entry as cli
from topdrift.benchmarks.stopping import Interrupted

EXIT = {signal.SIGINT: 130, signal.SIGTERM: 143}


def start(*args, **kw):
    return subprocess.Popen(
        topdrift_cmd(*args),
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
        **kw,
    )


def wait_for(proc, test) -> list[str]:
    """stderr lines up to the first that passes `test`."""
    lines = []
    for line in proc.stderr:
        lines.append(line)
        if test(line):
            return lines
    raise AssertionError("the command ended before the signal:\n" + "".join(lines))


def stop(proc, sig) -> tuple[float, float, list[str]]:
    """Send sig; (seconds to the line saying it stopped, seconds to the exit, the lines after)."""
    t0 = time.monotonic()
    proc.send_signal(sig)
    lines, said = [], None
    for line in proc.stderr:
        lines.append(line)
        if said is None and " stopped by " in line:
            said = time.monotonic() - t0
    proc.wait(timeout=30)
    gone = time.monotonic() - t0
    assert said is not None, "no line saying it stopped:\n" + "".join(lines)
    return said, gone, lines


def big_grid(folder, points_per_case=20_000) -> os.PathLike:
    """Two cases x leapfrog x 20 000 steps: 40 000 points, within the limit of 100 000, taking
    tens of seconds to plan (each point is planned: its exact solution probed, its kernel
    warmed up)."""
    (folder / "top.toml").write_text(TOP_TOML.format(theta="30 deg", spin="600 rpm"))
    (folder / "low.toml").write_text(
        TOP_TOML.format(theta="40 deg", spin="500 rpm").replace("cli-top", "cli-low")
    )
    ladder = ", ".join(f"{1e-3 * (1 + i / points_per_case):.9g}" for i in range(points_per_case))
    path = folder / "big.toml"
    path.write_text(
        'name = "big"\ncases = ["top.toml", "low.toml"]\nmethods = ["leapfrog"]\n'
        f"samples = 11\nsteps = [{ladder}]\n"
    )
    return path


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
def test_a_signal_while_a_large_grid_is_planned_stops_it_within_a_second(tmp_path, sig):
    grid = big_grid(tmp_path)
    out = tmp_path / "big.h5"
    proc = start("sweep", str(grid), "--out", str(out), "--jobs", "1")
    wait_for(proc, lambda line: line.startswith("planning the grid: "))  # well into planning
    said, gone, lines = stop(proc, sig)
    assert proc.returncode == EXIT[sig]
    assert said < 1.0 and gone < 1.0, (said, gone)
    (line,) = [ln for ln in lines if "stopped by" in ln]
    assert line.startswith(f"topdrift: sweep stopped by {sig.name}: ")
    assert "of at most 40000 grid points planned, no run started; nothing written" in line
    assert not any("Traceback" in ln for ln in lines)
    assert not out.exists()


def test_a_signal_while_the_program_starts_is_one_line(tmp_path):
    # 0.6 s in: the heavy imports (numba, the kernels) or the first planning. Either way one
    # line, no traceback, nothing written.
    grid = big_grid(tmp_path, points_per_case=100)
    out = tmp_path / "big.h5"
    proc = start("sweep", str(grid), "--out", str(out), "--jobs", "1")
    time.sleep(0.6)
    said, gone, lines = stop(proc, signal.SIGINT)
    assert proc.returncode == 130 and said < 1.0
    assert len(lines) <= 2 and "nothing written" in lines[-1], lines
    assert not any("Traceback" in ln for ln in lines)
    assert not out.exists()


def _live_processes_in_group(pgid: int) -> list[int]:
    from pathlib import Path

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


def test_a_signal_mid_sweep_stops_the_workers_within_a_second_and_keeps_what_is_written(
    tmp_path_factory, tmp_path, capsys
):
    grid, _, runs = reference_sweep(tmp_path_factory)
    out = tmp_path / "stopped.h5"
    args = ["sweep", str(grid), "--out", str(out), "--jobs", "2"]
    proc = start(*args, start_new_session=True)
    progress = wait_for(proc, lambda line: bool(PROGRESS.match(line)))
    said, gone, lines = stop(proc, signal.SIGINT)
    assert proc.returncode == 130 and said < 1.0 and gone < 1.5, (said, gone)
    (line,) = [ln for ln in lines if "stopped by" in ln]
    written = len([ln for ln in progress + lines if PROGRESS.match(ln)])
    assert f"sweep stopped by SIGINT: {written} of {N_RUNS} run(s) written to {out}" in line
    assert f"{N_RUNS - written} left" in line and "run the same command again" in line
    with h5py.File(out, "r") as f:  # exactly the runs it said, each complete
        statuses = [g.attrs["status"] for g in f["runs"].values()]
    assert len(statuses) == written and set(statuses) <= {"ok", "diverged"}
    deadline = time.monotonic() + 5.0  # the workers end with the client
    while _live_processes_in_group(proc.pid) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert _live_processes_in_group(proc.pid) == []
    # The same command again completes it, to the bytes of a sweep never stopped.
    capsys.readouterr()
    assert cli.main(args[:-1] + ["1"]) == 0
    assert f"{written} run(s) already complete" in capsys.readouterr().err
    same_datasets(run_datasets(out), runs)


def test_a_signal_in_the_middle_of_a_kernel_stops_the_round_off_study_within_a_second(tmp_path):
    # 16 starts x 10^9 steps of leapfrog: minutes of kernel time; the study advances in pieces
    # of at most 2^19 member-steps, so that the signal is heard between two.
    png = tmp_path / "r.png"
    argv = ["roundoff", "looping-nutation", "--method", "leapfrog", "--step", "1e-3"]
    proc = start(*argv, "--steps", "1e9", "--plot", str(png))
    time.sleep(8.0)  # started, its starts made, stepping
    said, gone, lines = stop(proc, signal.SIGINT)
    assert proc.returncode == 130 and said < 1.0 and gone < 1.0, (said, gone)
    (line,) = lines
    assert line.startswith("topdrift: roundoff stopped by SIGINT: at step ")
    assert "of 1000000000 (" in line and "points taken); nothing written" in line
    assert not png.exists()


def test_a_stopped_pick_says_how_many_candidates_it_searched(monkeypatch, capsys):
    from topdrift.benchmarks.choose import recommend

    real = recommend.Picker.search
    seen = []

    def search(self, method, form):
        if len(seen) == 2:
            raise Interrupted(signal.SIGINT)  # what the raising handler does at this point
        seen.append(method)
        return real(self, method, form)

    monkeypatch.setattr(recommend.Picker, "search", search)
    argv = ["pick", "cusped-release", "--target", "1e-3", "--horizon", "0.5"]
    assert cli.main(argv + ["--methods", "leapfrog", "rk4", "dop853", "gauss4"]) == 130
    err = capsys.readouterr().err.strip().splitlines()
    assert err[-1] == (
        "topdrift: pick stopped by SIGINT: 2 of 4 candidate methods searched, 2 left; "
        "nothing written"
    )
