"""`topdrift demo`: the Quick-start command."""

import json

import h5py

from topdrift.benchmarks.cli.demo import LINEUP
from topdrift.benchmarks.cli.entry import main


def test_demo_runs_every_family_and_reuses_its_runs(tmp_path, capsys):
    out = tmp_path / "demo.h5"
    assert main(["demo", "--out", str(out), "--horizon", "2", "--json"]) == 0
    first = json.loads(capsys.readouterr().out)
    assert [r["method"] for r in first["runs"]] == [m for m, _, _ in LINEUP]
    assert all(r["status"] == "ok" for r in first["runs"])
    for r in first["runs"]:
        # Every demo run is compared with the exact solution of the Lagrange top.
        assert r["metrics"]["axis_angle_max"] is not None
    with h5py.File(out, "r") as f:
        created = {k: f["runs"][k].attrs["created"] for k in f["runs"]}
    assert main(["demo", "--out", str(out), "--horizon", "2", "--json"]) == 0
    again = json.loads(capsys.readouterr().out)
    assert [r["run_id"] for r in again["runs"]] == [r["run_id"] for r in first["runs"]]
    with h5py.File(out, "r") as f:
        assert {k: f["runs"][k].attrs["created"] for k in f["runs"]} == created


def test_demo_prints_the_comparison(tmp_path, capsys):
    assert main(["demo", "--out", str(tmp_path / "d.h5"), "--horizon", "1"]) == 0
    text = capsys.readouterr().out
    assert "exact motion" in text and "leapfrog-kl6" in text and "topdrift pick" in text
