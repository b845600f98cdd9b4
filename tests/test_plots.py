"""Figures and the report from a hand-built and from a real short runs file; bad input exits 2
with one line and never touches the results file."""

from __future__ import annotations

import hashlib
import re
import subprocess
import sys
import textwrap

import h5py
import numpy as np
import pytest
from handmade_store import build, quaternion_zxz
from scipy.spatial.transform import Rotation

from topdrift.benchmarks.choose import plots
from topdrift.benchmarks.cli.entry import main
from topdrift.benchmarks.store.reader import load_records

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), section 5.2 [from memory]


def digest(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


def assert_png(path, min_bytes=10_000):
    data = path.read_bytes()
    assert data[:8] == PNG_MAGIC, path
    assert len(data) > min_bytes, (path, len(data))  # a blank figure is a few kB


@pytest.fixture
def store(tmp_path):
    return build(tmp_path / "runs.h5", cases=("one", "two"))


def test_figure_axis_against_scipy_rotations():
    # scipy's intrinsic "ZXZ" Euler sequence is Rz(phi) Rx(theta) Rz(psi); its third matrix
    # column is R e3 (scipy.spatial.transform.Rotation).
    rng = np.random.default_rng(11)
    e = rng.uniform([-np.pi, 0.01, -np.pi], [np.pi, np.pi - 0.01, np.pi], (50, 3))
    want = Rotation.from_euler("ZXZ", e).as_matrix()[:, :, 2]
    q = quaternion_zxz(e[:, 0], e[:, 1], e[:, 2])
    np.testing.assert_allclose(plots.axis_from_quaternion(q), want, atol=1e-14)
    np.testing.assert_allclose(plots.axis_from_euler(e), want, atol=1e-14)
    q_scipy = Rotation.from_euler("ZXZ", e).as_quat()[:, [3, 0, 1, 2]]  # scalar last -> first
    np.testing.assert_allclose(plots.axis_from_quaternion(q_scipy), want, atol=1e-14)


@pytest.mark.parametrize("kind", ["work-precision", "drift", "theta", "axis-path"])
def test_plot_each_kind_from_a_handmade_store(store, tmp_path, kind, capsys):
    before = digest(store)
    out = tmp_path / f"{kind}.png"
    assert main(["plot", str(store), "--kind", kind, "--case", "one", "--out", str(out)]) == 0
    assert capsys.readouterr().out.strip() == str(out)
    assert_png(out)
    assert digest(store) == before


def test_plot_one_run_and_energy_error(store, tmp_path):
    out = tmp_path / "theta1.png"
    assert main(["plot", str(store), "--kind", "theta", "--run", "fixed00", "--out", str(out)]) == 0
    assert_png(out)
    out = tmp_path / "wp.png"
    argv = [
        "plot",
        str(store),
        "--kind",
        "work-precision",
        "--case",
        "two",
        "--error",
        "energy",
        "--cost",
        "evals",
        "--out",
        str(out),
    ]
    assert main(argv) == 0
    assert_png(out)


def test_report_from_a_handmade_store(store, tmp_path, capsys):
    before = digest(store)
    out = tmp_path / "rep"
    assert main(["report", str(store), "--out", str(out)]) == 0
    md = (out / "report.md").read_text()
    assert digest(store) == before
    for case in ("one", "two"):
        assert f"## Case `{case}`" in md
    assert md.count("| split2 | h=") == 2 * 4  # three ok steps and the diverged run, per case
    assert md.count("**diverged**") == 2
    assert "| rk-adapt | rtol=1e-06, atol=1e-09 | ok |" in md
    links = re.findall(r"!\[[^\]]*\]\(([^)]+)\)", md)
    assert len(links) >= 2 * 4
    for name in links:
        assert_png(out / name)
    # Table rows have as many cells as the header: escaped pipes in |E - E0| do not split one.
    for block in re.findall(r"(\|.*\|\n\|(?:---\|)+\n(?:\|.*\|\n)+)", md):
        rows = block.strip().splitlines()
        n = len(re.split(r"(?<!\\)\|", rows[0]))
        assert all(len(re.split(r"(?<!\\)\|", r)) == n for r in rows), rows[0]


def test_real_short_runs_plot_and_report(tmp_path, capsys):
    runs = tmp_path / "runs.h5"
    common = ["--horizon", "6", "--samples", "121", "--out", str(runs)]
    assert main(["run", "demo-wheel", "--method", "leapfrog", "--step", "2e-3", *common]) == 0
    for h in ("4e-3", "2e-3"):
        assert main(["run", "demo-wheel", "--method", "rk4", "--step", h, *common]) == 0
    capsys.readouterr()
    before = digest(runs)
    records = load_records(runs)
    assert {r["method"] for r in records} == {"leapfrog", "rk4"}
    out = tmp_path / "rep"
    assert main(["report", str(runs), "--out", str(out)]) == 0
    md = (out / "report.md").read_text()
    # A symplectic method keeps the energy error bounded, a non-symplectic Runge-Kutta method
    # drifts linearly (Hairer, Lubich and Wanner, Geometric Numerical Integration, 2nd ed.,
    # ch. I.1 and IX.8 [from memory]).
    assert re.search(r"\| leapfrog \| h=0\.002 \| ok \|.*\| bounded", md)
    assert len(re.findall(r"\| rk4 \| h=0\.00\d+ \| ok \|.*\| linear \|", md)) == 2
    assert "Cheapest method per target error" in md
    for kind in ("work-precision-axis", "work-precision-energy", "drift", "theta", "axis-path"):
        assert_png(out / f"demo-wheel-{kind}.png")
    png = tmp_path / "cpu.png"
    argv = ["plot", str(runs), "--kind", "work-precision", "--cost", "cpu", "--out", str(png)]
    assert main(argv) == 0
    assert_png(png)
    png = tmp_path / "path.png"
    rid = records[0]["run_id"][:8]
    assert main(["plot", str(runs), "--kind", "axis-path", "--run", rid, "--out", str(png)]) == 0
    assert_png(png)
    assert digest(runs) == before


def readable_while_held_for_writing(path):
    # Another process keeps the file open for writing (as `topdrift run` does for a whole run);
    # reading must still work.
    holder = subprocess.Popen(
        [
            sys.executable,
            "-c",
            textwrap.dedent(f"""
            import sys, time, h5py
            f = h5py.File({str(path)!r}, "a")
            print("open", flush=True)
            sys.stdin.readline()
            f.close()
        """),
        ],
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert holder.stdout.readline().strip() == "open"
        return load_records(path)
    finally:
        holder.stdin.write("\n")
        holder.stdin.close()
        holder.wait(timeout=30)


def test_file_held_open_by_a_writer_is_still_read(store):
    records = readable_while_held_for_writing(store)
    assert len(records) == 12


def test_running_and_incomplete_runs_are_marked_not_fatal(tmp_path, capsys):
    path = build(tmp_path / "runs.h5")
    with h5py.File(path, "a") as f:
        g = f["runs"].create_group("half")  # a writer has only just created it
        g.attrs["case"] = "steady"
        g["t"] = np.zeros(0)
        f["runs"]["fixed00"].attrs["status"] = "running"
    statuses = {r["run_id"]: r["status"] for r in load_records(path)}
    assert statuses["half"] == "incomplete" and statuses["fixed00"] == "running"
    out = tmp_path / "rep"
    assert main(["report", str(path), "--out", str(out)]) == 0
    assert "**running**" in (out / "report.md").read_text()
    png = tmp_path / "all.png"
    assert main(["plot", str(path), "--kind", "drift", "--out", str(png)]) == 0  # skips 'half'
    assert_png(png)
    assert main(["plot", str(path), "--kind", "drift", "--run", "half", "--out", str(png)]) == 2
    assert "is incomplete" in capsys.readouterr().err


def bad_files(tmp_path):
    text = tmp_path / "notes.txt"
    text.write_text("not hdf5\n")
    other = tmp_path / "other.h5"
    with h5py.File(other, "w") as f:
        f.attrs["format"] = "something-else"
    newer = tmp_path / "newer.h5"
    with h5py.File(newer, "w") as f:
        f.attrs["format"] = "topdrift-runs"
        f.attrs["format_version"] = 99
        f.create_group("runs")
    empty = tmp_path / "empty.h5"
    with h5py.File(empty, "w") as f:
        f.attrs["format"] = "topdrift-runs"
        f.attrs["format_version"] = 1
        f.create_group("runs")
    return {
        "text": text,
        "other": other,
        "newer": newer,
        "empty": empty,
        "store": build(tmp_path / "runs.h5", cases=("one", "two")),
    }


@pytest.mark.parametrize(
    ("file", "extra", "says"),
    [
        ("missing", ["--kind", "drift"], "does not exist"),
        ("text", ["--kind", "drift"], "not an HDF5 file"),
        ("other", ["--kind", "drift"], "not a topdrift run store"),
        ("newer", ["--kind", "drift"], "format_version 99"),
        ("empty", ["--kind", "drift"], "holds no runs"),
        ("store", ["--kind", "drift"], "several cases"),
        ("store", ["--kind", "drift", "--case", "nope"], "no runs of case 'nope'"),
        ("store", ["--kind", "theta", "--run", "zzz"], "no run 'zzz'"),
        ("store", ["--kind", "theta", "--run", "fixed00", "--run", "fixed06"], "several cases"),
        ("store", ["--kind", "work-precision", "--run", "fixed00"], "--run"),
        ("store", ["--kind", "drift", "--case", "one", "--error", "axis"], "work-precision"),
        ("store", ["--kind", "work-precision", "--case", "one", "--cost", "cpu"], "CPU time"),
    ],
)
def test_plot_bad_input_exits_2_with_one_line(tmp_path, capsys, file, extra, says):
    files = bad_files(tmp_path)
    path = files.get(file, tmp_path / "missing.h5")
    before = {k: digest(v) for k, v in files.items()}
    out = tmp_path / "fig.png"
    assert main(["plot", str(path), *extra, "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("topdrift: error: ") and says in err, err
    assert not out.exists()
    assert {k: digest(v) for k, v in files.items()} == before


@pytest.mark.parametrize(
    ("file", "extra", "says"),
    [
        ("missing", [], "does not exist"),
        ("newer", [], "upgrade topdrift"),
        ("empty", [], "holds no runs"),
        ("store", ["--case", "nope"], "no runs of case 'nope'"),
    ],
)
def test_report_bad_input_exits_2_with_one_line(tmp_path, capsys, file, extra, says):
    files = bad_files(tmp_path)
    path = files.get(file, tmp_path / "missing.h5")
    out = tmp_path / "rep"
    assert main(["report", str(path), "--out", str(out), *extra]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and says in err, err
    assert not (out / "report.md").exists()


def test_plot_never_writes_over_the_results_file(tmp_path, capsys):
    store = build(tmp_path / "runs.h5")
    before = digest(store)
    argv = ["plot", str(store), "--kind", "drift", "--out", str(store)]
    assert main(argv) == 2
    assert "results file itself" in capsys.readouterr().err
    assert digest(store) == before


def test_axis_path_of_a_case_with_no_exact_solution_uses_its_reference(tmp_path, capsys):
    """An asymmetric top has no exact solution: the figure shows the runs seen from the case's
    extended-precision reference (docs/references.md), at the runs' own sample times."""
    from sweep_grid import ASYM_TOML

    from topdrift.benchmarks.choose.reference_path import reference_axis
    from topdrift.benchmarks.choose.selection import load_labelled

    case = tmp_path / "asym.toml"
    case.write_text(ASYM_TOML)
    runs = tmp_path / "runs.h5"
    for method, setting in (("dop853", ["--rtol", "1e-9"]), ("rk4", ["--step", "0.001"])):
        assert main(["run", str(case), "--method", method, *setting, "--out", str(runs)]) == 0
    capsys.readouterr()
    records = load_records(runs)
    series = load_labelled(str(runs), records, records)
    found = reference_axis(series)
    assert found is not None
    axes, label = found
    assert label.startswith("extended-precision reference (verified to 2.2e-16 rad)")
    for s in series:  # each run's axis within its own error of the reference's (rtol 1e-9, h 1e-3)
        got = plots.axis_from_quaternion(s["quaternion"])
        assert axes.shape == got.shape and np.max(np.abs(got - axes)) < 1e-6
    out = tmp_path / "path.png"
    assert main(["plot", str(runs), "--kind", "axis-path", "--out", str(out)]) == 0
    assert_png(out)
    # runs over two horizons have no single reference: the runs are drawn against each other
    assert main(["run", str(case), "--method", "rk4", "--step", "0.001", "--horizon", "0.5",
                 "--out", str(runs)]) == 0  # fmt: skip
    records = load_records(runs)
    assert reference_axis(load_labelled(str(runs), records, records)) is None
