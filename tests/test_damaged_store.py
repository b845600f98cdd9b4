"""A damaged results file (cut short, bytes overwritten in the superblock or in a run's headers)
is a one-line error (exit 2) for every command that reads or writes it, and is left exactly as it
was: never overwritten, never "repaired". A file held by a writer refuses a second writer while
readers still read it."""

from __future__ import annotations

import shutil
import subprocess
import sys
import textwrap

import h5py
import pytest
from tiny_cases import TOP_TOML, write_case

from topdrift.benchmarks.cli import entry as cli


@pytest.fixture(scope="module")
def good(tmp_path_factory):
    d = tmp_path_factory.mktemp("good")
    case = write_case(d, "top.toml", TOP_TOML)
    path = d / "runs.h5"
    for method, opt in (("leapfrog", ["--step", "0.01"]), ("rk45", ["--rtol", "1e-8"])):
        assert cli.main(["run", str(case), "--method", method, *opt, "--out", str(path)]) == 0
    with h5py.File(path, "r") as f:
        run = next(iter(f["runs"].values()))
        header = h5py.h5o.get_info(run.id).addr  # the run group's object header
    return case, path, header


def _damaged(good, tmp_path, kind: str):
    _, path, header = good
    data = bytearray(path.read_bytes())
    n = len(data)
    if kind.startswith("cut-"):
        keep = {"cut-0": 0, "cut-7": 7, "cut-100": 100, "cut-half": n // 2, "cut-last": n - 1}
        data = data[: keep[kind]]
    elif kind == "flip-signature":  # the 8-byte format signature at offset 0
        data[1] ^= 0xFF
    elif kind == "flip-superblock":  # the end-of-file address, bytes 40-47 of a v0 superblock
        for i in range(40, 48):
            data[i] ^= 0xFF
    elif kind == "flip-run-header":  # a run group's object header, in the middle of the file
        for i in range(header, header + 16):
            data[i] ^= 0xFF
    else:
        raise ValueError(kind)
    bad = tmp_path / "bad.h5"
    bad.write_bytes(bytes(data))
    return bad


KINDS = ["cut-0", "cut-7", "cut-100", "cut-half", "cut-last"]
KINDS += ["flip-signature", "flip-superblock", "flip-run-header"]


def _commands(case, bad, tmp_path):
    sweep = tmp_path / "s.toml"
    sweep.write_text(
        textwrap.dedent(
            f"""\
            name = "s"
            description = "one run"
            cases = ["{case}"]
            methods = ["leapfrog"]
            steps = [0.01]
            """
        )
    )
    return {
        "run": ["run", str(case), "--method", "leapfrog", "--step", "0.005", "--out", str(bad)],
        "summary": ["summary", str(bad)],
        "plot": ["plot", str(bad), "--kind", "drift", "--out", str(tmp_path / "p.png")],
        "report": ["report", str(bad), "--out", str(tmp_path / "rep")],
        "sweep": ["sweep", str(sweep), "--out", str(bad), "--jobs", "1"],
    }


COUNT = {"files": 0, "commands": 0}


@pytest.mark.parametrize("kind", KINDS)
def test_damaged_file_is_one_line_exit_2_and_left_alone(good, tmp_path, capsys, kind):
    case = good[0]
    bad = _damaged(good, tmp_path, kind)
    before = bad.read_bytes()
    COUNT["files"] += 1
    for name, argv in _commands(case, bad, tmp_path).items():
        capsys.readouterr()
        rc = cli.main(argv)
        out, err = capsys.readouterr()
        assert rc == 2, f"{kind} {name}: exit {rc}\n{out}\n{err}"
        assert "Traceback" not in err
        errors = [ln for ln in err.splitlines() if ln.startswith("topdrift: error:")]
        assert len(errors) == 1 and str(bad) in errors[0], f"{kind} {name}: {err}"
        assert err.strip().splitlines()[-1] == errors[0]
        assert bad.read_bytes() == before, f"{kind} {name} changed the file"
        COUNT["commands"] += 1
    assert not (tmp_path / "p.png").exists() and not (tmp_path / "rep" / "report.md").exists()


def test_damage_counts():
    assert COUNT == {"files": len(KINDS), "commands": 5 * len(KINDS)}, COUNT


HOLD = """
import sys, time
from topdrift.benchmarks.store.writer import open_writer
f = open_writer(sys.argv[1])
print("holding", flush=True)
sys.stdin.read()
f.close()
"""


def test_second_writer_refused_while_readers_read(good, tmp_path, capsys):
    case, path, _ = good
    held = tmp_path / "held.h5"
    shutil.copy(path, held)
    before = held.read_bytes()
    proc = subprocess.Popen(
        [sys.executable, "-c", HOLD, str(held)],
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert proc.stdout.readline().strip() == "holding"
        capsys.readouterr()
        rc = cli.main(
            ["run", str(case), "--method", "leapfrog", "--step", "0.005", "--out", str(held)]
        )
        err = capsys.readouterr().err
        assert rc == 2 and "another process is writing" in err and err.count("\n") == 1
        # Readers take no lock: they read the held file as last flushed.
        assert cli.main(["summary", str(held)]) == 0
        assert "leapfrog" in capsys.readouterr().out
        png = tmp_path / "drift.png"
        assert cli.main(["plot", str(held), "--kind", "drift", "--out", str(png)]) == 0
        assert png.stat().st_size > 0
        capsys.readouterr()
    finally:
        proc.stdin.close()
        proc.wait(timeout=30)
    assert held.read_bytes() == before
