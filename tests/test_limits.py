"""Limits up front: every grid, ensemble and study is sized before anything is planned or
allocated, and refused over its documented limit (README) with one line naming what is too
big, exit 2, and no file. The refusal of a 10^9-point grid is timed: today's sizing counts
from the sweep file alone; planning one point costs about half a millisecond, so a grid
planned first would take days."""

from __future__ import annotations

import pytest
from sweep_grid import N_RUNS, N_SKIPPED, write_grid
from tiny_cases import TOP_TOML
from tiny_cases import write_case as write

from topdrift.benchmarks.cli import entry as cli
from topdrift.benchmarks.sweep import grid as grid_planner
from topdrift.benchmarks.sweep.executor import expand
from topdrift.benchmarks.sweep.sizing import (
    MAX_GRID_RUNS,
    check_count,
    method_points,
)
from topdrift.benchmarks.sweep.spec import read_sweep


def one_line(capsys) -> str:
    err = capsys.readouterr().err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("topdrift: error: "), err
    assert "Traceback" not in err
    return lines[0]


def huge_grid(folder, cases=1000, methods=1000, steps=1000):
    names = ", ".join(f'"case-{i}"' for i in range(cases))  # never read: sized first
    meth = ", ".join('"leapfrog"' for _ in range(methods))
    ladder = ", ".join(f"{1e-3 * (1 + i / steps):.9g}" for i in range(steps))
    path = folder / "huge.toml"
    path.write_text(f'name = "huge"\ncases = [{names}]\nmethods = [{meth}]\nsteps = [{ladder}]\n')
    return path


def test_a_grid_of_a_billion_points_is_refused_before_any_point_is_planned(
    tmp_path, capsys, monkeypatch
):
    # Refused from the counts alone: no case is loaded and no point planned (the planner takes
    # about 0.5 ms a point, so planning first is what made such a grid hang). How long the whole
    # command takes is measured in benchmarks/timing/refusal_time.py, not here.
    def never(*_a, **_k):
        raise AssertionError("a point was planned before the grid was sized")

    monkeypatch.setattr(grid_planner, "load_case", never)
    monkeypatch.setattr(grid_planner, "plan_job", never)
    path = huge_grid(tmp_path)
    out = tmp_path / "huge.h5"
    rc = cli.main(["sweep", str(path), "--out", str(out), "--jobs", "1"])
    line = one_line(capsys)
    assert rc == 2
    assert str(path) in line and "1,000,000,000 runs" in line
    assert f"{MAX_GRID_RUNS:,}" in line
    assert not out.exists()


def test_the_count_is_the_grid_worked_out_by_hand(tmp_path):
    # sweep_grid.py: 2 cases x (leapfrog 2 forms x 2 steps + rk4 2 steps + dop853 2 rtols) = 16
    # points, of which the two Euler-form leapfrog points on the asymmetric body are refused
    # when planned: an upper bound that planning then confirms point by point.
    spec = read_sweep(str(write_grid(tmp_path)))
    methods = method_points(spec, "grid.toml")
    assert check_count(spec, "grid.toml", methods) == 16
    jobs, skipped = expand(spec)
    assert len(jobs) + len(skipped) == 16 == N_RUNS + N_SKIPPED


@pytest.mark.parametrize(
    ("extra", "says"),
    [
        # a step whose count over the horizon is beyond a run's 1e12 steps, named by its key
        ("steps = [1e-13]", "steps[0]: a step of 1e-13 s"),
        ("max_steps = 1e13", "max_steps: at most 1e+12"),
        ("samples = 20000000", "samples: expected a whole number from 2 to 10000000"),
        # 5e6 samples: 232 bytes each (every dataset of the body form with the exact solution
        # and Kovalevskaya's integral) is 1160 MB per run in a worker's memory, over 1 GiB
        ("samples = 5000000", "samples: 5000000 samples are 1160 MB"),
        ("horizon = 1e300", "horizon: 1e+300 is outside the range"),
        ("horizon = inf", "horizon: must be a positive finite number"),
        ("rtols = [nan]", "rtols[0]: must be a positive finite number"),
        # each run under 1e12 steps (6.7e11, 5e11, 3.3e11), together over the grid's 1e12
        (
            "horizon = 1e6\nsamples = 11\nsteps = [1.5e-6, 2e-6, 3e-6]",
            "the grid's fixed-step runs take 1.5e+12",
        ),
    ],
)
def test_sweep_files_over_a_limit_name_the_file_and_the_key(tmp_path, capsys, extra, says):
    path = tmp_path / "tops.toml"
    (tmp_path / "top.toml").write_text(TOP_TOML.format(theta="30 deg", spin="600 rpm"))
    path.write_text(
        f'name = "tops"\ncases = ["top.toml"]\nmethods = ["leapfrog", "rk45"]\n{extra}\n'
    )
    out = tmp_path / "tops.h5"
    assert cli.main(["sweep", str(path), "--out", str(out), "--jobs", "1"]) == 2
    line = one_line(capsys)
    assert f"{path}: " in line and says in line, line
    assert "--samples" not in line and "--step" not in line  # the file's keys, not options
    assert not out.exists()


@pytest.mark.parametrize(
    ("args", "says"),
    [
        (["--starts", "100000000"], "--starts: need a whole number of starts from 2 to 10000"),
        (["--steps", "1e30"], "--steps: need a whole number of steps from 1000 to 1e+12"),
        (["--steps", "nan"], "--steps: need a whole number of steps"),
        (["--steps", "1e4.5"], "invalid float value"),
        (["--starts", "10000", "--steps", "1e9"], "1e+13 member-steps, more than the 1e+12"),
        (["--step", "inf"], "--step: must be a positive finite number"),
        (["--spread", "-1"], "--spread: must be zero or a positive finite number"),
        (["--plot", "out/x.xyz"], "figures are written as PNG"),
    ],
)
def test_roundoff_is_sized_before_the_case_is_read(tmp_path, capsys, args, says):
    # The case does not exist: a size refused first shows that nothing was read or made.
    base = ["roundoff", "no-such-case", "--method", "leapfrog", "--step", "1e-3"]
    try:
        rc = cli.main(base + args)
    except SystemExit as exc:  # argparse's own refusal of a malformed number
        rc = exc.code
    line = one_line(capsys)
    assert rc == 2 and says in line, line


def test_ensembles_are_sized_before_their_starts_are_made(tmp_path, capsys):
    case = write(tmp_path, "top.toml", TOP_TOML)
    out = tmp_path / "e.h5"
    base = ["run", str(case), "--method", "leapfrog", "--out", str(out)]
    # 10^5 members x 5e7 steps: member-steps over a run's budget of 1e12
    assert cli.main(base + ["--step", "1e-8", "--ensemble", "100000"]) == 2
    assert "5e+12 member-steps, more than the 1e+12" in one_line(capsys)
    # 10^5 members x 10^5 samples: 10^10 member-samples (480 GB), over 1e9
    argv = base + ["--step", "1e-3", "--samples", "100000", "--horizon", "100"]
    assert cli.main(argv + ["--ensemble", "100000"]) == 2
    assert "member-samples" in one_line(capsys)
    assert cli.main(base + ["--step", "1e-3", "--ensemble", "100001"]) == 2
    assert "--ensemble: need a whole number of starts from 2 to 100000" in one_line(capsys)
    assert not out.exists()


def test_too_many_local_workers_are_refused_and_more_than_the_cores_warned(tmp_path, capsys):
    import os

    grid = write_grid(tmp_path)
    out = tmp_path / "g.h5"
    cores = os.cpu_count() or 1
    assert cli.main(["sweep", str(grid), "--out", str(out), "--jobs", str(4 * cores + 1)]) == 2
    assert f"from 1 to {4 * cores}" in one_line(capsys)
    assert not out.exists()
    # Within the cap but beyond the cores: run, with one warning line first.
    with_warning = ["sweep", str(grid), "--out", str(out), "--jobs", str(cores + 1)]
    assert cli.main(with_warning) == 0
    err = capsys.readouterr().err
    assert err.splitlines()[0].startswith(f"topdrift: warning: --jobs {cores + 1} on {cores}")


def test_flush_every_below_the_minimum_warns_and_a_negative_one_is_refused(tmp_path, capsys):
    case = write(tmp_path, "top.toml", TOP_TOML)
    out = tmp_path / "r.h5"
    base = ["run", str(case), "--method", "leapfrog", "--step", "0.01", "--out", str(out)]
    assert cli.main(base + ["--flush-every", "-1"]) == 2
    assert "--flush-every: must be zero or a positive finite number" in one_line(capsys)
    assert cli.main(base + ["--flush-every", "nan"]) == 2
    one_line(capsys)
    assert not out.exists()
    assert cli.main(base + ["--flush-every", "0"]) == 0
    err = capsys.readouterr().err
    warnings = [ln for ln in err.splitlines() if ln.startswith("topdrift: warning:")]
    assert len(warnings) == 1 and "--flush-every 0" in warnings[0] and "0.5 s" in warnings[0]
