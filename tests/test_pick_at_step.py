"""`topdrift pick CASE --step H --steps N`: a fixed loop rate. Every fixed-step method runs at
exactly H for N steps (the very double, checked bit for bit), the ranking is by error and then
cost, the errors are what `topdrift run` measures at that step and agree with a trajectory of our
own (scipy's DOP853), they fall with the step at each method's order, adaptive methods are no
candidates (and are said to be none), a target splits the ranking, and bad input is one line with
exit status 2."""

import math

import h5py
import numpy as np
import pytest
from sweep_grid import ASYM_TOML, SYM_TOML
from test_pick import max_angle, rotation, scipy_axes

from topdrift.integrators import all_methods

STEP, STEPS = 0.005, 200  # 1 s, the case's own horizon; the case samples every 0.1 s
H = repr(STEP)
FEW = ["rk4", "leapfrog", "midpoint", "engine-semi-implicit", "engine-implicit-gyro"]


@pytest.fixture
def sym(tmp_path):
    path = tmp_path / "my-top.toml"
    path.write_text(SYM_TOML)
    return path


def test_every_fixed_step_method_runs_at_exactly_the_step(command_json, sym):
    rc, doc, err = command_json("pick", str(sym), "--step", H, "--steps", str(STEPS))
    assert rc == 0, err
    fixed = {m.name for m in all_methods() if m.info.control == "step"}
    adaptive = {m.name for m in all_methods() if m.info.control != "step"}
    seen = {r["method"] for r in doc["ranking"] + doc["failed"]}
    seen |= {u["method"] for u in doc["unreached"]}
    assert seen == fixed
    assert set(doc["not_candidates"]) == adaptive and not seen & adaptive
    assert doc["step_exact"] and doc["steps"] == STEPS and doc["samples"] == 11
    assert doc["horizon"] == pytest.approx(STEP * STEPS, rel=4e-16)
    for r in doc["ranking"] + doc["failed"]:
        assert r["step"] == STEP  # the double given, to the bit
        assert r["force_evals"] > 0 and r["wall_s"] > 0
        assert r["ns_per_step"] == pytest.approx(r["wall_s"] / STEPS * 1e9)
    errors = [r["achieved"] for r in doc["ranking"]]
    assert errors == sorted(errors)
    assert doc["target"] is None and all(r["meets"] is None for r in doc["ranking"])


def test_errors_are_the_runs_own_and_agree_with_scipy(command_json, sym, tmp_path):
    rc, doc, err = command_json(
        "pick", str(sym), "--step", H, "--steps", str(STEPS), "--methods", *FEW
    )
    assert rc == 0, err
    ours = scipy_axes(sym, doc["horizon"], doc["samples"])  # scipy's own error ~1e-10
    for r in doc["ranking"]:
        out = tmp_path / f"{r['method']}.h5"
        rc, run, err = command_json(
            "run",
            str(sym),
            "--method",
            r["method"],
            "--form",
            r["form"],
            "--step",
            H,
            "--horizon",
            repr(doc["horizon"]),
            "--samples",
            str(doc["samples"]),
            "--out",
            str(out),
        )
        assert rc == 0, err
        (row,) = run["runs"]
        assert row["settings"]["step"] == STEP
        assert row["metrics"]["axis_angle_max"] == r["achieved"]  # the same run, the same bits
        with h5py.File(out, "r") as f:
            q = f["runs"][row["run_id"]]["quaternion"][()]
        axes = [rotation(x)[:, 2] for x in q]
        assert max_angle(np.array(axes), ours) == pytest.approx(r["achieved"], rel=1e-4, abs=1e-9)


def test_errors_fall_with_the_step_at_each_methods_order(command_json, sym):
    # Halving the loop step divides a method's error by 2^order (common practice, global error
    # of a one-step method): rk4 4, leapfrog and the midpoint rule 2, the implicit gyroscopic
    # engine scheme 1; measured within 0.2 between 200 and 400 steps of 1 s.
    orders = {"rk4": 4, "leapfrog": 2, "midpoint": 2, "engine-implicit-gyro": 1}
    errors = {}
    for steps in (200, 400):
        rc, doc, err = command_json(
            "pick",
            str(sym),
            "--step",
            repr(1.0 / steps),
            "--steps",
            str(steps),
            "--methods",
            *orders,
        )
        assert rc == 0, err
        for r in doc["ranking"]:
            errors.setdefault(r["method"], []).append(r["achieved"])
    for name, p in orders.items():
        coarse, fine = errors[name]
        assert abs(math.log2(coarse / fine) - p) < 0.2, (name, coarse, fine)


def test_a_target_marks_who_meets_it(command_json, command_line, sym):
    rc, doc, _ = command_json(
        "pick", str(sym), "--step", H, "--steps", str(STEPS), "--methods", *FEW, "--target", "1e-4"
    )
    assert rc == 0
    assert doc["target"] == 1e-4
    for r in doc["ranking"]:
        assert r["meets"] == (r["achieved"] <= 1e-4)
    assert doc["meeting"] == [r["method"] for r in doc["ranking"] if r["meets"]]
    assert 0 < len(doc["meeting"]) < len(doc["ranking"])  # the target splits this field
    rc, out, _ = command_line(
        "pick", str(sym), "--step", H, "--steps", str(STEPS), "--methods", *FEW, "--target", "1e-4"
    )
    assert rc == 0
    assert f"meet the target: {len(doc['meeting'])} of {len(doc['ranking'])} ranked" in out
    assert "recommended: " in out
    rc, out, _ = command_line(
        "pick", str(sym), "--step", H, "--steps", str(STEPS), "--methods", *FEW, "--target", "1e-30"
    )
    assert rc == 1
    assert "no candidate met the target at this step" in out


def test_text_says_adaptive_methods_are_no_candidates(command_line, sym):
    rc, out, _ = command_line("pick", str(sym), "--step", H, "--steps", "20", "--methods", "rk4")
    assert rc == 0
    assert "adaptive methods" not in out  # the user chose the candidates
    rc, out, _ = command_line("pick", str(sym), "--step", "0.05", "--steps", "20")
    assert rc == 0
    assert "adaptive methods choose their own steps and are no candidates" in out


def test_a_case_without_exact_solution_is_measured_against_the_reference(command_json, tmp_path):
    path = tmp_path / "my-asym.toml"
    path.write_text(ASYM_TOML)
    rc, doc, err = command_json(
        "pick", str(path), "--step", H, "--steps", str(STEPS), "--methods", "rk4", "engine-euler"
    )
    assert rc == 0, err
    assert "extended-precision reference" in doc["reference"]
    assert {r["method"] for r in doc["ranking"]} == {"rk4", "engine-euler"}


@pytest.mark.parametrize(
    "extra,needle",
    [
        (["--step", "0", "--steps", "10"], "--step: must be a positive"),
        (["--step", "-0.01", "--steps", "10"], "--step: must be a positive"),
        (["--step", "nan", "--steps", "10"], "--step: must be a positive"),
        (["--step", "0.01", "--steps", "1.5"], "--steps: need a whole number"),
        (["--step", "0.01", "--steps", "0"], "--steps: need a whole number"),
        (["--step", "0.01", "--steps", "1e12"], "--steps: need a whole number"),
        (["--step", "0.01"], "--step and --steps go together"),
        (["--steps", "10"], "--step and --steps go together"),
        (["--step", "0.01", "--steps", "10", "--horizon", "2"], "--horizon: at a fixed loop"),
        (
            ["--step", "0.01", "--steps", "10", "--methods", "rk4", "dop853"],
            "dop853 is an adaptive",
        ),
        (["--step", "0.01", "--steps", "10", "--samples", "4"], "--samples 4: 10 steps"),
        (["--step", "0.01", "--steps", "10", "--target", "-1"], "--target: must be a positive"),
        ([], "--target: required"),
    ],
)
def test_bad_input_exits_2_with_one_line(command_line, sym, extra, needle):
    rc, out, err = command_line("pick", str(sym), *extra)
    assert rc == 2
    assert out == ""
    assert len(err.strip().splitlines()) == 1 and needle in err, err
