"""Faults during a run. Signals: SIGINT and SIGTERM flush what was done and mark the run
`interrupted`; SIGKILL leaves a readable file; `--resume` then completes to the bytes of a run
that never stopped, for an adaptive method (dop853), a Gauss-Legendre one (gauss6), which
test_cli_run.py (gauss4, SIGKILL and SIGTERM) does not cover, and the scipy references (RK45,
DOP853 and Radau resume from their plain-data snapshots; LSODA is run again from its start, and
says so, which gives the same bytes). Numerical faults: a start on the
Euler-angle pole is refused up front, a case without an exact solution says why and stores no
axis error, and an adaptive step that falls below round-off ends with a status that says so."""

from __future__ import annotations

import json
import math
import signal

import h5py
import numpy as np
import pytest
from run_files import dataset_hashes, topdrift_process
from tiny_cases import ASYM_TOML, TOP_TOML, write_case

from topdrift.benchmarks.cases.schema import parse_case
from topdrift.benchmarks.cli import entry as cli
from topdrift.benchmarks.run.runner import execute, plan_run
from topdrift.benchmarks.store.writer import open_writer
from topdrift.integrators import ST_STEP_UNDERFLOW, Method

# Long enough that the signal lands mid-run (a few seconds), short enough for CI.
SETTINGS = {
    "dop853": ["--method", "dop853", "--rtol", "1e-12", "--horizon", "60", "--samples", "121"],
    "gauss6": ["--method", "gauss6", "--step", "0.0005", "--horizon", "60", "--samples", "121"],
    # The scipy references cost 20-100 us a step (a Python right-hand side): shorter horizons.
    "scipy-rk45": [
        "--method",
        "scipy-rk45",
        "--rtol",
        "1e-8",
        "--horizon",
        "40",
        "--samples",
        "121",
    ],
    "scipy-dop853": [
        "--method",
        "scipy-dop853",
        "--rtol",
        "1e-8",
        "--horizon",
        "60",
        "--samples",
        "121",
    ],
    "scipy-radau": [
        "--method",
        "scipy-radau",
        "--rtol",
        "1e-8",
        "--horizon",
        "4",
        "--samples",
        "121",
    ],
    "scipy-lsoda": [
        "--method",
        "scipy-lsoda",
        "--rtol",
        "1e-8",
        "--horizon",
        "20",
        "--samples",
        "121",
    ],
}
FAULTS = [
    ("dop853", signal.SIGINT),
    ("gauss6", signal.SIGINT),
    ("dop853", signal.SIGKILL),
    ("scipy-rk45", signal.SIGINT),
    ("scipy-dop853", signal.SIGKILL),
    ("scipy-radau", signal.SIGKILL),
    ("scipy-lsoda", signal.SIGINT),
]
COUNTS = {"faults": 0, "resumes_compared": 0}


def _wait_for_samples(proc, at_least: int) -> None:
    lines = []
    for line in proc.stderr:
        lines.append(line)
        if "flushed sample" in line:
            done = int(line.split("flushed sample ")[1].split("/")[0])
            if done >= at_least:
                return
    raise AssertionError("the run ended before the fault:\n" + "".join(lines))


@pytest.fixture(scope="module")
def whole(tmp_path_factory):
    """Each method's run, never stopped: the bytes a resumed run must reproduce."""
    d = tmp_path_factory.mktemp("whole")
    case = write_case(d, "top.toml", TOP_TOML)
    out = {}
    for method, opts in SETTINGS.items():
        path = d / f"{method}.h5"
        assert cli.main(["run", str(case), *opts, "--out", str(path), "--json"]) == 0
        with h5py.File(path, "r") as f:
            (run_id,) = f["runs"].keys()
        out[method] = (path, run_id)
    return case, out


@pytest.mark.parametrize(("method", "sig"), FAULTS, ids=[f"{m}-{s.name}" for m, s in FAULTS])
def test_signal_mid_run_then_resume_gives_the_same_bytes(
    command_json, tmp_path, capsys, whole, method, sig
):
    case, runs = whole
    ref_path, run_id = runs[method]
    part = tmp_path / "part.h5"
    opts = SETTINGS[method]
    capsys.readouterr()
    proc = topdrift_process("run", str(case), *opts, "--out", str(part), "--flush-every", "0")
    _wait_for_samples(proc, 3)
    proc.send_signal(sig)
    COUNTS["faults"] += 1
    _, err = proc.communicate(timeout=60)
    if sig == signal.SIGKILL:
        assert proc.returncode == -signal.SIGKILL
        expected = "running"
    else:
        assert proc.returncode == 130, err  # 128 + SIGINT, as shells report it
        assert "Traceback" not in err
        expected = "interrupted"
    with h5py.File(part, "r") as f:  # readable as left
        g = f["runs"][run_id]
        assert g.attrs["status"] == expected
        n = g["t"].shape[0]
        assert 3 <= n < 121
        if sig != signal.SIGKILL:  # flushed up to the stop: every sample has its checkpoint
            assert g["checkpoint/run"].attrs["sample"] == n
            assert np.all(np.isfinite(g["euler"][()]))
    rc, doc, _ = command_json("run", str(case), *opts, "--out", str(part), "--resume")
    assert rc == 0 and doc["runs"][0]["status"] == "ok"
    a, b = dataset_hashes(ref_path, run_id), dataset_hashes(part, run_id)
    assert {"t", "euler", "state", "invariants/energy", "exact/axis"} <= set(a)
    assert a == b
    # The steps and evaluations a resumed run reports are those of the run never stopped.
    with h5py.File(ref_path, "r") as f1, h5py.File(part, "r") as f2:
        m1 = json.loads(f1["runs"][run_id].attrs["metrics"])
        m2 = json.loads(f2["runs"][run_id].attrs["metrics"])
        for key in ("steps", "energy_rel_max", "axis_angle_max"):
            assert m1[key] == m2[key], key
    with h5py.File(part, "r") as f:  # LSODA is never resumed from a file (scipy_methods.py)
        notes = json.loads(f["runs"][run_id].attrs["notes"])
    assert any("not resumed" in note for note in notes) == (method == "scipy-lsoda"), notes
    COUNTS["resumes_compared"] += 1


def test_fault_counts():
    # Runs after the parametrized test above (file order); the report quotes these numbers.
    assert COUNTS == {"faults": len(FAULTS), "resumes_compared": len(FAULTS)}, COUNTS


# ----------------------------------------------------------------------------- numerical faults


def test_euler_start_on_the_pole_is_refused_up_front(tmp_path, capsys):
    for theta in ("0 deg", "180 deg"):
        case = write_case(tmp_path, "up.toml", TOP_TOML, theta=theta)
        out = tmp_path / "r.h5"
        for extra in (["--form", "euler"], []):  # leapfrog's own default form is euler
            rc = cli.main(
                ["run", str(case), "--method", "leapfrog", "--step", "0.01", "--out", str(out)]
                + extra
            )
            err = capsys.readouterr().err
            assert rc == 2 and err.count("\n") == 1, err
            assert "theta" in err and "vertical" in err and "body form" in err, err
            assert not out.exists()
    # And the body form runs the same start.
    rc = cli.main(
        ["run", str(case), "--method", "leapfrog", "--step", "0.01", "--form", "body"]
        + ["--out", str(out)]
    )
    assert rc == 0
    capsys.readouterr()


def test_a_step_far_too_large_ends_as_diverged_with_the_time(command_json, tmp_path):
    # The diverged status itself is covered in test_cli_run.py; here: its detail names the time,
    # equal to the stored t_fail, and no non-finite sample is stored.
    case = write_case(tmp_path, "top.toml", TOP_TOML)
    out = tmp_path / "r.h5"
    opts = ["--method", "rk4", "--step", "0.25", "--samples", "5", "--horizon", "10"]
    rc, doc, _ = command_json("run", str(case), *opts, "--form", "body", "--out", str(out))
    (r,) = doc["runs"]
    assert rc == 1 and r["status"] == "diverged"
    t_fail = r["metrics"]["t_fail"]
    assert f"t = {t_fail:.17g}" in r["detail"]
    with h5py.File(out, "r") as f:
        g = f["runs"][r["run_id"]]
        assert np.all(np.isfinite(g["state"][()])) and g["t"][-1] < t_fail


def test_no_exact_solution_says_why_and_stores_no_axis_error(command_json, tmp_path):
    # An asymmetric body (I1 != I2) has no Lagrange-top solution: the run's notes say so, the
    # axis error is null (JSON null, never NaN), and no exact datasets exist.
    case = write_case(tmp_path, "asym.toml", ASYM_TOML)
    out = tmp_path / "r.h5"
    rc, doc, _ = command_json(
        "run", str(case), "--method", "rk45", "--rtol", "1e-8", "--out", str(out)
    )
    (r,) = doc["runs"]
    assert rc == 0 and r["status"] == "ok"
    assert r["metrics"]["axis_angle_max"] is None
    with h5py.File(out, "r") as f:
        g = f["runs"][r["run_id"]]
        assert "exact" not in g
        assert "NaN" not in g.attrs["metrics"]


DEGENERATE = {
    # The degenerate branches DESIGN.md names (u1 = u2, or u2 = 1), started in the body form:
    "planar-swing": ("30 deg", "0.0", "0 rpm"),  # p_phi = p_psi = 0: a plane pendulum
    "sleeping": ("0 deg", "0.0", "600 rpm"),  # spinning on the upward vertical: u1 = u2 = 1
    "balanced-at-rest": ("0 deg", "0.0", "0 rpm"),  # the upright equilibrium: u = 1 for ever
}


@pytest.mark.parametrize("label", list(DEGENERATE))
def test_degenerate_exact_solution_is_compared_or_noted_never_nan(command_json, tmp_path, label):
    # Either the exact module has a branch for the case (then the comparison is finite and as
    # small as dop853 at rtol 1e-10 makes it), or it refuses (then the notes say why and the axis
    # error is null). A NaN anywhere is the failure this guards against.
    theta, phi_rate, spin = DEGENERATE[label]
    text = TOP_TOML.replace("phi_rate = 1.0", f"phi_rate = {phi_rate}")
    case = write_case(tmp_path, "d.toml", text, theta=theta, spin=spin)
    out = tmp_path / "r.h5"
    rc, doc, _ = command_json(
        "run",
        str(case),
        "--method",
        "dop853",
        "--rtol",
        "1e-10",
        "--form",
        "body",
        "--out",
        str(out),
    )
    (r,) = doc["runs"]
    assert rc == 0 and r["status"] == "ok"
    axis = r["metrics"]["axis_angle_max"]
    if axis is None:
        assert any("no exact solution" in n for n in r["notes"]), r["notes"]
    else:
        assert math.isfinite(axis) and axis < 1e-6
    with h5py.File(out, "r") as f:
        g = f["runs"][r["run_id"]]
        assert "NaN" not in g.attrs["metrics"]
        if "exact" in g:
            assert np.all(np.isfinite(g["exact/axis"][()]))


class _UnderflowAtFourthSample(Method):
    """The same method, whose stepper reports ST_STEP_UNDERFLOW when asked for its fourth
    sample (the runner asks once per sample interval for an adaptive method)."""

    def __init__(self, inner: Method):
        self.inner = inner
        self.info = inner.info

    def start(self, form, params, t0, y0, settings):
        s = self.inner.start(form, params, t0, y0, settings)
        real, calls = s.advance_to, []

        def advance_to(t_end):
            calls.append(t_end)
            if len(calls) < 4:
                return real(t_end)
            s.status, s.t_fail = ST_STEP_UNDERFLOW, float(s.t)
            return ST_STEP_UNDERFLOW

        s.advance_to = advance_to
        return s


def test_step_underflow_is_a_failed_run_that_says_so(tmp_path):
    # The kernels stop with ST_STEP_UNDERFLOW when the step falls below 10 ulp of t (see
    # integrators/rk_embedded_kernel.py). A real trigger needs a singular right-hand side the
    # body form does not have, so the stepper is made to report it after a few samples; what is
    # checked is the runner's side: status, time and a detail a user can act on.
    case = parse_case(write_case(tmp_path, "top.toml", TOP_TOML).read_text(), "top.toml")
    plan = plan_run(case, "rk45", rtol=1e-8, form="body")
    plan.method = _UnderflowAtFourthSample(plan.method)
    f = open_writer(tmp_path / "r.h5")
    try:
        result = execute(plan, f)
    finally:
        f.close()
    assert result.status == "failed"
    assert result.detail.startswith("step-underflow at t = ")
    assert "round-off" in result.detail and "--rtol" in result.detail
    t_fail = result.metrics["t_fail"]
    assert t_fail == pytest.approx(plan.sample_time(3)) and f"{t_fail:.17g}" in result.detail
    with h5py.File(tmp_path / "r.h5", "r") as f:
        g = f["runs"][plan.run_id]
        assert g.attrs["status"] == "failed" and g["t"].shape == (4,)


def test_resume_refuses_a_file_that_lost_samples_before_its_checkpoint(tmp_path, capsys, stop_at):
    path = write_case(tmp_path, "top.toml", TOP_TOML)
    case = parse_case(path.read_text(), str(path))
    plan = plan_run(case, "leapfrog", step=0.01)
    out = tmp_path / "r.h5"
    stop, progress = stop_at(5)
    f = open_writer(out)
    try:
        r = execute(plan, f, stop=stop, progress=progress, flush_every=0.0)
    finally:
        f.close()
    assert r.status == "interrupted"
    with h5py.File(out, "r+") as f:  # what a damaged file could hold: rows gone, checkpoint kept
        g = f["runs"][plan.run_id]
        assert g["checkpoint/run"].attrs["sample"] == g["t"].shape[0] == 5
        g["euler"].resize(3, axis=0)
    before = out.read_bytes()
    rc = cli.main(
        ["run", str(path), "--method", "leapfrog", "--step", "0.01", "--out", str(out), "--resume"]
    )
    err = capsys.readouterr().err
    assert rc == 2 and "dataset 'euler' holds 3 rows" in err and "--force" in err
    assert [ln for ln in err.splitlines() if ln.startswith("topdrift: error:")] == [err.strip()]
    assert out.read_bytes() == before
    # The refused resume let go of the file: it opens for writing again in this process.
    open_writer(out).close()
