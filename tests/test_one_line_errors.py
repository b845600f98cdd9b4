"""Inputs that ended in a traceback (exit 1, which CI reads as a regression) or in a misleading
message, each now one line naming what is wrong, exit 2, nothing written: command-line numbers
range-checked as `run` checks them, baseline files with numbers no float64 holds or a
normalised timing of 0, and paths that exist but are not files (a directory, a named pipe)."""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest
from tiny_cases import TOP_TOML
from tiny_cases import write_case as write

from topdrift.benchmarks.cli import entry as cli

BASELINE = Path(__file__).resolve().parents[1] / "results" / "baseline.json"


def one_line(capsys) -> str:
    err = capsys.readouterr().err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("topdrift: error: "), err
    assert "Traceback" not in err
    return lines[0]


def main(argv) -> int:
    try:
        return cli.main(argv)
    except SystemExit as exc:  # argparse's refusals
        return exc.code


@pytest.mark.parametrize(
    ("extra", "says"),
    [
        (["--horizon", "inf"], "--horizon: must be a positive finite number, got inf"),
        (["--horizon", "1e400"], "--horizon: must be a positive finite number"),
        (["--horizon", "-2"], "--horizon: must be a positive finite number"),
        (["--horizon", "1e90"], "samples, more than 10000000; give --samples"),
        (["--target", "nan"], "--target: must be a positive finite number, got nan"),
        (["--target", "1e-300"], "--target: 1e-300 is outside the range"),
        (["--samples", "1"], "--samples: need a whole number of samples from 2 to 10000000"),
        (["--samples", "100000000"], "--samples: need a whole number of samples"),
    ],
)
def test_pick_numbers_are_range_checked_as_run_checks_them(capsys, extra, says):
    argv = ["pick", "cusped-release", "--target", "1e-6", "--methods", "leapfrog", *extra]
    assert main(argv) == 2
    assert says in one_line(capsys)


def _baseline_with(tmp_path, section: str, key: str, value: str) -> Path:
    """The committed baseline with the first entry of `section` holding `value` at `key`, as
    JSON text verbatim (json.dumps cannot write 1e400, which is the point)."""
    data = json.loads(BASELINE.read_text())
    marker = "@@VALUE@@"
    next(iter(data[section].values()))[key] = marker
    path = tmp_path / "baseline.json"
    path.write_text(json.dumps(data).replace(f'"{marker}"', value, 1))
    return path


@pytest.mark.parametrize(
    ("section", "key", "value"),
    [
        ("runs", "energy_rel_max", "1e400"),  # read as infinity by Python: an OverflowError once
        ("runs", "steps", "1e400"),
        ("timings", "ns_per_step_norm", "0"),  # divided by: a ZeroDivisionError once
        ("timings", "horizon", "1e400"),
    ],
)
def test_a_baseline_with_numbers_out_of_range_is_one_line(tmp_path, capsys, section, key, value):
    path = _baseline_with(tmp_path, section, key, value)
    assert main(["gate", "--baseline", str(path)]) == 2
    line = one_line(capsys)
    # The reader refuses a literal no double holds as it parses (before any key is known), and
    # names the key of a value out of its range.
    assert str(path) in line and (value in line if value == "1e400" else key in line), line


def test_paths_that_are_not_files_are_named_for_what_they_are(tmp_path, capsys):
    folder = tmp_path / "folder"
    folder.mkdir()
    fifo = tmp_path / "pipe.h5"
    os.mkfifo(fifo)  # opening it would wait for a writer: every command must look first
    assert main(["summary", str(folder)]) == 2
    assert one_line(capsys) == f"topdrift: error: {folder}: is a directory, not a run file"
    assert main(["summary", str(fifo)]) == 2
    assert "is a named pipe (FIFO), not a run file" in one_line(capsys)
    case = write(tmp_path, "top.toml", TOP_TOML)
    run = ["run", str(case), "--method", "leapfrog", "--step", "0.01", "--out", str(fifo)]
    assert main(run) == 2
    assert "is a named pipe (FIFO), not a run file" in one_line(capsys)
    for command in (["plot", str(fifo), "--kind", "drift"], ["report", str(fifo), "--out", "r"]):
        assert main(command) == 2
        assert "is a named pipe (FIFO)" in one_line(capsys)
    assert main(["sweep", "quick", "--out", str(fifo), "--jobs", "1"]) == 2
    assert "is a named pipe (FIFO), not a run file" in one_line(capsys)
    assert not Path("r").exists()
