"""A version-1 run file (tests/fixtures/runs_v1.h5, made by tests/fixtures/make_v1.py with the
code before format_version 2) is still read by every command that reads run files: summary,
plot, report, and run --resume, which continues its interrupted run. The gate reads no run
files (it reruns its baseline's grid), so it has no part here."""

from __future__ import annotations

import shutil
from pathlib import Path

import h5py
import numpy as np

FIXTURE = Path(__file__).parent / "fixtures" / "runs_v1.h5"
STOPPED = ["--method", "gauss4", "--step", "0.0001", "--horizon", "20", "--samples", "201"]


def _copy(tmp_path) -> Path:
    out = tmp_path / "v1.h5"
    shutil.copyfile(FIXTURE, out)
    return out


def test_the_fixture_is_version_1():
    with h5py.File(FIXTURE, "r") as f:
        assert f.attrs["format_version"] == 1
        status = sorted(g.attrs["status"] for g in f["runs"].values())
    assert status == ["interrupted", "ok"]


def test_summary_reads_version_1(command_json):
    rc, doc, err = command_json("summary", str(FIXTURE))
    assert rc == 0, err
    runs = {r["method"]: r for r in doc["runs"]}
    assert runs["leapfrog"]["status"] == "ok" and runs["gauss4"]["status"] == "interrupted"


def test_plot_reads_version_1(command_line, tmp_path):
    for kind in ("theta", "drift", "axis-path"):
        png = tmp_path / f"{kind}.png"
        rc, _, err = command_line("plot", str(FIXTURE), "--kind", kind, "--out", str(png))
        assert rc == 0, err
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_report_reads_version_1(command_line, tmp_path):
    rc, _, err = command_line("report", str(FIXTURE), "--out", str(tmp_path / "rep"))
    assert rc == 0, err
    assert "looping-nutation" in (tmp_path / "rep" / "report.md").read_text()


def test_resume_continues_a_version_1_run(command_json, tmp_path):
    out = _copy(tmp_path)
    with h5py.File(out, "r") as f:
        (g,) = [g for g in f["runs"].values() if g.attrs["status"] == "interrupted"]
        run_id, before = g.name.rsplit("/", 1)[1], g["t"].shape[0]
        t_before = g["t"][()]
    rc, doc, err = command_json("run", "looping-nutation", *STOPPED, "--out", str(out), "--resume")
    assert rc == 0, err
    (r,) = doc["runs"]
    assert r["run_id"] == run_id and r["status"] == "ok"
    with h5py.File(out, "r") as f:
        g = f["runs"][run_id]
        assert 1 < before < 201 and g["t"].shape == (201,)
        assert np.array_equal(g["t"][:before], t_before)  # the stored samples kept as they were
        # Still a version-1 file: the resumed run is written in its layout, no turns, no units.
        assert f.attrs["format_version"] == 1
        assert "euler_turns" not in g and "exact/euler_turns" not in g
        assert "units" not in g["euler"].attrs


def test_a_version_1_run_stopped_twice_resumes_each_time(
    command_line, command_json, monkeypatch, tmp_path
):
    # The first resume writes a checkpoint with the turn counts (the kernels fold the angles
    # now) into the version-1 group; a second stop and resume must read that one too.
    import os
    import signal

    from topdrift.integrators.gauss.methods import GaussStepper

    out = _copy(tmp_path)
    real = GaussStepper.advance_to
    calls = {"n": 0}

    def stop_at_the_fifth(self, t):
        calls["n"] += 1
        if calls["n"] == 5:
            os.kill(os.getpid(), signal.SIGINT)  # a user's ^C, handled as the command does
        return real(self, t)

    with h5py.File(out, "r") as f:
        (g,) = [g for g in f["runs"].values() if g.attrs["status"] == "interrupted"]
        run_id, before = g.name.rsplit("/", 1)[1], g["t"].shape[0]
    monkeypatch.setattr(GaussStepper, "advance_to", stop_at_the_fifth)
    rc, _, err = command_line("run", "looping-nutation", *STOPPED, "--out", str(out), "--resume")
    assert rc == 130, err
    with h5py.File(out, "r") as f:
        g = f["runs"][run_id]
        mid = g["t"].shape[0]
        assert g.attrs["status"] == "interrupted" and before < mid < 201
        assert "turns" in g["checkpoint/stepper"]  # the checkpoint this code writes
    monkeypatch.setattr(GaussStepper, "advance_to", real)
    args = ["run", "looping-nutation", *STOPPED, "--out", str(out), "--resume"]
    rc, _, err = command_line(*args)
    assert rc == 0, err
    rc, doc, err = command_json(*args)  # now a reuse of the finished run
    assert rc == 0, err
    (r,) = doc["runs"]
    assert r["run_id"] == run_id and r["status"] == "ok"
    # the same bits as a single resume of the fixture's run
    once = tmp_path / "once.h5"
    shutil.copyfile(FIXTURE, once)
    rc, _, err = command_json("run", "looping-nutation", *STOPPED, "--out", str(once), "--resume")
    assert rc == 0, err
    with h5py.File(out, "r") as a, h5py.File(once, "r") as b:
        for name in ("t", "euler", "state", "invariants/energy"):
            assert np.array_equal(a["runs"][run_id][name][()], b["runs"][run_id][name][()]), name
