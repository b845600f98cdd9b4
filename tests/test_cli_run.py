"""`topdrift run` end to end: exit statuses, refusals, singular and diverged runs, bad input that
leaves no file, and a run killed mid-way that resumes to the same bytes as one never stopped."""

import math
import os
import signal

import h5py
import pytest
from run_files import dataset_hashes, topdrift_process
from tiny_cases import ASYM_TOML, TOP_TOML, write_case

from topdrift.benchmarks.cli import entry as cli


def test_ok_run_json_and_exit_0(command_json, tmp_path):
    case = write_case(tmp_path, "top.toml", TOP_TOML)
    out = tmp_path / "r.h5"
    rc, doc, _ = command_json(
        "run", str(case), "--method", "leapfrog", "--step", "0.001", "--out", str(out)
    )
    assert rc == 0
    (r,) = doc["runs"]
    assert set(r) >= {"run_id", "case", "method", "settings", "status", "file", "metrics"}
    assert r["status"] == "ok" and r["method"] == "leapfrog" and r["file"] == str(out)
    m = r["metrics"]
    assert m["steps"] == 500 and m["t_fail"] is None
    # Leapfrog on the canonical variables keeps p_phi and p_psi exactly (they never change).
    assert m["p_phi_rel_max"] == 0.0 and m["p_psi_rel_max"] == 0.0
    assert m["norm_abs_max"] is None  # the Euler form has no quaternion to drift
    assert 0.0 < m["energy_rel_max"] < 1e-3 and m["axis_angle_max"] < 1e-2


def test_refusal_exits_2_and_leaves_no_file(tmp_path, capsys):
    case = write_case(tmp_path, "asym.toml", ASYM_TOML)
    out = tmp_path / "results" / "r.h5"
    rc = cli.main(
        [
            "run",
            str(case),
            "--method",
            "leapfrog",
            "--step",
            "0.001",
            "--form",
            "euler",
            "--out",
            str(out),
        ]
    )
    err = capsys.readouterr().err
    assert rc == 2 and "Euler-angle form" in err and len(err.strip().splitlines()) == 1
    assert not out.exists() and not out.parent.exists()


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--method", "no-such-method", "--step", "0.01"], "unknown method"),
        (["--method", "leapfrog"], "needs --step"),
        (["--method", "leapfrog", "--rtol", "1e-6"], "--step"),
        (["--method", "rk45", "--step", "0.01"], "--rtol"),
        (["--method", "leapfrog", "--step", "-0.01"], "--step"),
        (["--method", "leapfrog", "--step", "0.01", "--samples", "1"], "--samples"),
        (["--method", "leapfrog", "--step", "0.01", "--horizon", "nan"], "--horizon"),
        (["--method", "leapfrog", "--step", "0.01", "--force", "--resume"], "not allowed"),
        (["--method", "leapfrog", "--step", "0.01", "--form", "sideways"], "invalid choice"),
    ],
)
def test_bad_input_exits_2_and_leaves_no_file(tmp_path, capsys, extra, message):
    case = write_case(tmp_path, "top.toml", TOP_TOML)
    out = tmp_path / "r.h5"
    try:
        rc = cli.main(["run", str(case), "--out", str(out), *extra])
    except SystemExit as exc:  # argparse errors
        rc = exc.code
    err = capsys.readouterr().err
    assert rc == 2 and message in err and "Traceback" not in err
    assert not out.exists()


def test_bad_input_never_touches_an_existing_file(tmp_path, capsys):
    case = write_case(tmp_path, "top.toml", TOP_TOML)
    out = tmp_path / "r.h5"
    assert (
        cli.main(["run", str(case), "--method", "leapfrog", "--step", "0.01", "--out", str(out)])
        == 0
    )
    before = out.read_bytes()
    for extra in (
        ["--method", "leapfrog"],
        ["--method", "rk45", "--step", "0.01"],
        ["--method", "leapfrog", "--step", "0.01", "--form", "body", "--samples", "0"],
    ):
        assert cli.main(["run", str(case), "missing-case", "--out", str(out), *extra]) == 2
    assert out.read_bytes() == before
    capsys.readouterr()


def test_singular_through_the_pole_and_at_the_start(command_json, tmp_path, capsys):
    # No spin and no precession (p_phi = p_psi = 0): a planar swing from 3 deg that passes
    # through the downward vertical, theta = pi, where the canonical Euler form is singular.
    case = write_case(
        tmp_path,
        "pole.toml",
        TOP_TOML.replace("phi_rate = 1.0", "phi_rate = 0.0"),
        theta="3 deg",
        spin="0 rpm",
    )
    out = tmp_path / "r.h5"
    rc, doc, _ = command_json(
        "run",
        str(case),
        "--method",
        "leapfrog",
        "--step",
        "0.01",
        "--samples",
        "3",
        "--horizon",
        "2",
        "--out",
        str(out),
    )
    (r,) = doc["runs"]
    assert rc == 1 and r["status"] == "singular"
    assert 0.0 < r["metrics"]["t_fail"] < 2.0
    # A start on the vertical has no Euler-form state: refused up front, nothing stored (the
    # refusal's wording is checked in test_faults.py).
    up = write_case(tmp_path, "up.toml", TOP_TOML, theta="0 deg")
    before = out.read_bytes()
    rc = cli.main(
        [
            "run",
            str(up),
            "--method",
            "leapfrog",
            "--step",
            "0.01",
            "--form",
            "euler",
            "--out",
            str(out),
        ]
    )
    assert rc == 2 and "the body form" in capsys.readouterr().err
    assert out.read_bytes() == before
    # The body form runs the same start.
    rc, doc, _ = command_json(
        "run",
        str(up),
        "--method",
        "leapfrog",
        "--step",
        "0.01",
        "--form",
        "body",
        "--out",
        str(out),
    )
    assert rc == 0 and doc["runs"][0]["status"] == "ok"
    with h5py.File(out, "r") as f:
        statuses = sorted(g.attrs["status"] for g in f["runs"].values())
        assert statuses == ["ok", "singular"]
        for g in f["runs"].values():
            for name in ("t", "euler", "quaternion", "momentum", "invariants/energy"):
                assert not any(math.isnan(v) for v in g[name][()].ravel())


def test_diverged_with_a_step_far_too_large(command_json, tmp_path):
    case = write_case(tmp_path, "top.toml", TOP_TOML)
    out = tmp_path / "r.h5"
    # RK4 at a step of 0.25 s against a spin period of 0.1 s: far outside its stability region.
    rc, doc, _ = command_json(
        "run",
        str(case),
        "--method",
        "rk4",
        "--step",
        "0.25",
        "--samples",
        "5",
        "--horizon",
        "10",
        "--form",
        "body",
        "--out",
        str(out),
    )
    (r,) = doc["runs"]
    assert rc == 1 and r["status"] == "diverged"
    assert 0.0 < r["metrics"]["t_fail"] <= 10.0
    with h5py.File(out, "r") as f:
        g = f["runs"][r["run_id"]]
        assert g.attrs["status"] == "diverged"
        e = g["invariants/energy"][()]
        assert all(math.isfinite(v) for v in e)


def _wait_for_flush(proc):
    lines = []
    for line in proc.stderr:
        lines.append(line)
        if "flushed sample" in line:
            return lines
    raise AssertionError("no flush reported:\n" + "".join(lines))


LONG = ["--method", "gauss4", "--step", "0.0002", "--horizon", "200", "--samples", "201"]


def test_sigkill_then_resume_gives_the_same_bytes(command_json, tmp_path, capsys):
    case = write_case(tmp_path, "top.toml", TOP_TOML)
    whole = tmp_path / "whole.h5"
    part = tmp_path / "part.h5"
    rc, doc, _ = command_json("run", str(case), *LONG, "--out", str(whole))
    assert rc == 0
    run_id = doc["runs"][0]["run_id"]

    proc = topdrift_process("run", str(case), *LONG, "--out", str(part), "--flush-every", "0")
    _wait_for_flush(proc)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    proc.stderr.close()
    proc.stdout.close()
    assert proc.returncode == -signal.SIGKILL
    with h5py.File(part, "r") as f:  # readable as left, holding what was done
        g = f["runs"][run_id]
        assert g.attrs["status"] == "running"
        done = g["t"].shape[0]
        assert 1 < done < 201
    # Without --resume the unfinished run is not silently redone.
    assert cli.main(["run", str(case), *LONG, "--out", str(part)]) == 2
    assert "--resume" in capsys.readouterr().err
    rc, doc, _ = command_json("run", str(case), *LONG, "--out", str(part), "--resume")
    assert rc == 0 and doc["runs"][0]["status"] == "ok"
    a, b = dataset_hashes(whole, run_id), dataset_hashes(part, run_id)
    assert set(a) >= {"t", "euler", "quaternion", "momentum", "invariants/energy", "exact/euler"}
    assert a == b


def test_sigterm_flushes_and_marks_interrupted(tmp_path):
    case = write_case(tmp_path, "top.toml", TOP_TOML)
    out = tmp_path / "r.h5"
    proc = topdrift_process(
        "run", str(case), *LONG, "--out", str(out), "--flush-every", "0", env=dict(os.environ)
    )
    _wait_for_flush(proc)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 143, err
    with h5py.File(out, "r") as f:
        (g,) = f["runs"].values()
        assert g.attrs["status"] == "interrupted"
        n = g["t"].shape[0]
        assert 1 < n < 201
        assert g["checkpoint/run"].attrs["sample"] == n


def test_a_second_writer_is_refused(tmp_path):
    from topdrift.benchmarks.store.writer import open_writer

    case = write_case(tmp_path, "top.toml", TOP_TOML)
    out = tmp_path / "r.h5"
    f = open_writer(out)  # this process holds the file for writing
    try:
        before = out.stat().st_size
        proc = topdrift_process(
            "run", str(case), "--method", "leapfrog", "--step", "0.01", "--out", str(out)
        )
        _, err = proc.communicate(timeout=60)
        assert proc.returncode == 2 and "another process is writing" in err
        assert out.stat().st_size == before
    finally:
        f.close()


def test_resume_of_a_run_killed_before_its_first_write_starts_it(command_json, tmp_path, capsys):
    from topdrift.benchmarks.cases.schema import read_case
    from topdrift.benchmarks.run.runner import plan_run, run_attrs
    from topdrift.benchmarks.store.writer import RunGroup, open_writer

    case = write_case(tmp_path, "top.toml", TOP_TOML)
    out = tmp_path / "r.h5"
    plan = plan_run(read_case(case), "leapfrog", step=0.01)
    f = open_writer(out)
    RunGroup.create(f, plan.run_id, run_attrs(plan), 6, plan.exact is not None, plan.samples)
    f.close()  # what a kill right after the group was made leaves: status running, no rows
    args = [str(case), "--method", "leapfrog", "--step", "0.01", "--out", str(out)]
    assert cli.main(["run", *args]) == 2
    assert "is running at sample 0/11" in capsys.readouterr().err
    rc, doc, _ = command_json("run", *args, "--resume")
    assert rc == 0 and doc["runs"][0]["status"] == "ok"
    with h5py.File(out, "r") as f:
        assert f["runs"][plan.run_id]["t"].shape == (11,)


def test_out_that_is_a_directory_or_not_hdf5_exits_2(tmp_path, capsys):
    case = write_case(tmp_path, "top.toml", TOP_TOML)
    junk = tmp_path / "junk.h5"
    junk.write_text("not hdf5\n")
    for out, message in ((tmp_path, "is a directory"), (junk, "not an HDF5 file")):
        rc = cli.main(
            ["run", str(case), "--method", "leapfrog", "--step", "0.01", "--out", str(out)]
        )
        assert rc == 2 and message in capsys.readouterr().err
    assert junk.read_text() == "not hdf5\n"
