"""The HDF5 run store read with plain h5py, exactly as docs/run-files.md documents it."""

import json
import math
import re
from datetime import datetime

import h5py
import numpy as np
import pytest
from tiny_cases import top_toml

from topdrift.benchmarks.cli import entry as cli
from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.store.reader import existing_status, open_reader
from topdrift.benchmarks.store.writer import open_writer

TOP_TOML = top_toml(
    "store-top",
    "a heavy symmetric top for the store tests",
    horizon=0.4,
    samples=9,
    theta="40 deg",
    phi_rate=1.5,
    psi_rate="400 rpm",
)

GAUSS4_BODY = ["--method", "gauss4", "--step", "0.001", "--form", "body"]

METRIC_KEYS = {
    "energy_rel_max",
    "p_phi_rel_max",
    "p_psi_rel_max",
    "norm_abs_max",
    "axis_angle_max",
    "theta_abs_max",
    "phi_abs_max",
    "psi_abs_max",
    "kovalevskaya_rel_max",
    "attitude_angle_max",
    "steps",
    "rhs_evals",
    "force_evals",
    "rejected",
    "wall_s",
    "cpu_s",
    "ns_per_step",
    "energy_drift_exponent",
    "energy_drift_window",
    "energy_drift_unknown",
    "fastest_period",
    "slowest_period",
    "t_fail",
}


@pytest.fixture()
def stored(tmp_path):
    case = tmp_path / "store-top.toml"
    case.write_text(TOP_TOML)
    out = tmp_path / "results" / "runs.h5"  # results/ does not exist yet
    rc = cli.main(["run", str(case), *GAUSS4_BODY, "--out", str(out)])
    assert rc == 0
    return case, out


def test_layout_as_documented(stored):
    case, out = stored
    with h5py.File(out, "r") as f:
        assert f.attrs["format"] == "topdrift-runs"
        assert f.attrs["format_version"] == 2
        (run_id,) = list(f["runs"])
        assert re.fullmatch(r"[0-9a-f]{16}", run_id)
        g = f["runs"][run_id]
        a = g.attrs
        assert a["case"] == "store-top"
        assert a["case_toml"] == case.read_text()
        assert a["method"] == "gauss4"
        assert a["form"] == "body"
        assert a["status"] == "ok"
        settings = json.loads(a["settings"])
        assert settings["step"] == 0.001 and settings["step_requested"] == 0.001
        # ISO 8601 in UTC
        assert datetime.strptime(a["created"], "%Y-%m-%dT%H:%M:%SZ")
        versions = json.loads(a["versions"])
        for k in ("topdrift", "python", "numpy", "scipy", "numba", "h5py", "cpu"):
            assert k in versions
        assert versions["h5py"] == h5py.__version__
        metrics = json.loads(a["metrics"])
        assert set(metrics) == METRIC_KEYS
        n = 9
        shapes = {
            "t": (n,),
            "euler": (n, 3),
            "quaternion": (n, 4),
            "momentum": (n, 3),
            "state": (n, 7),
            "invariants/energy": (n,),
            "invariants/p_phi": (n,),
            "invariants/p_psi": (n,),
            "invariants/norm": (n,),
            "exact/euler": (n, 3),
            "exact/axis": (n, 3),
        }
        for name, shape in shapes.items():
            ds = g[name]
            assert ds.shape == shape, name
            assert ds.dtype == np.float64
            assert ds.chunks is not None and ds.compression == "gzip", name
        # Version 2: the exact reference's whole turns of phi and psi; a body-form run's own
        # angles come from its quaternion, modulo 2 pi, so it has no turns of its own.
        assert g["exact/euler_turns"].shape == (n, 2) and g["exact/euler_turns"].dtype == np.int64
        assert "euler_turns" not in g
        assert "checkpoint" in g
        # The documented relations between datasets: the quaternion is unit, the state in the
        # body form is (quaternion, momentum), and the figure axis of the quaternion is the
        # exact axis to the method's accuracy.
        q = g["quaternion"][()]
        assert np.allclose(np.linalg.norm(q, axis=1), 1.0, atol=1e-12)
        assert np.array_equal(g["state"][:, :4], q)
        assert np.array_equal(g["state"][:, 4:], g["momentum"][()])
        # Figure axis R e3 from a unit quaternion: third column of the body-to-space rotation
        # matrix (common practice), the third row of Shuster's space-to-body attitude matrix
        # (Shuster 1993, A Survey of Attitude Representations, eq. 159, scalar last; from memory).
        q0, q1, q2, q3 = q.T
        axis = np.column_stack(
            [2 * (q1 * q3 + q0 * q2), 2 * (q2 * q3 - q0 * q1), q0**2 - q1**2 - q2**2 + q3**2]
        )
        ang = np.arccos(np.clip(np.sum(axis * g["exact/axis"][()], axis=1), -1, 1))
        assert np.max(ang) < 1e-6
        assert metrics["axis_angle_max"] == pytest.approx(np.max(ang), abs=2e-8)
        # Angles folded into (-pi, pi], theta in [0, pi].
        e = g["euler"][()]
        assert np.all(np.abs(e[:, [0, 2]]) <= math.pi) and np.all(
            (e[:, 1] >= 0) & (e[:, 1] <= math.pi)
        )


def test_rerun_reuses_and_force_replaces(stored, capsys):
    case, out = stored
    before = out.read_bytes()
    args = ["run", str(case), *GAUSS4_BODY, "--out", str(out)]
    assert cli.main(args) == 0
    assert "already in" in capsys.readouterr().err
    assert out.read_bytes() == before  # not touched
    assert cli.main(args + ["--force"]) == 0
    with h5py.File(out, "r") as f:
        assert len(f["runs"]) == 1


def test_summary_lists_runs(stored, capsys):
    _, out = stored
    capsys.readouterr()
    assert cli.main(["summary", str(out), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    (r,) = doc["runs"]
    assert r["case"] == "store-top" and r["status"] == "ok" and r["samples_stored"] == 9
    assert cli.main(["summary", str(out)]) == 0
    table = capsys.readouterr().out.splitlines()
    assert table[0].split()[:3] == ["run", "case", "method"] and "store-top" in table[1]


def test_foreign_file_is_refused_and_left_alone(tmp_path):
    path = tmp_path / "other.h5"
    with h5py.File(path, "w") as f:
        f.attrs["format"] = "something-else"
    before = path.read_bytes()
    with pytest.raises(UserError, match="not a topdrift run store"):
        open_writer(path)
    with pytest.raises(UserError, match="not a topdrift run store"):
        existing_status(path, "0" * 16)
    with pytest.raises(UserError, match="does not exist"):
        open_reader(tmp_path / "missing.h5")
    assert path.read_bytes() == before


def test_readme_example_reads_a_run(stored, monkeypatch, capsys):
    """The h5py example in docs/run-files.md runs as printed."""
    from pathlib import Path

    _, out = stored
    page = (Path(__file__).resolve().parents[1] / "docs" / "run-files.md").read_text()
    section = page.split("# Run store (HDF5)", 1)[1]
    code = section.split("```python\n", 1)[1].split("```", 1)[0]
    monkeypatch.chdir(out.parent.parent)  # the example reads results/runs.h5
    capsys.readouterr()
    exec(compile(code, "docs/run-files.md", "exec"), {})
    line = capsys.readouterr().out.split()
    assert line[1:4] == ["store-top", "gauss4", "ok"]
    assert 0.0 <= float(line[4]) < 1e-6
