"""`topdrift pick` on short horizons: every ranked setting, run again with `topdrift run`, meets the
target, checked here against a trajectory of our own (scipy's DOP853 on the Euler-Poisson
equations); the JSON has its documented keys; a case without an exact solution says what the axis
is measured against; an impossible target ranks nothing and exits 1; bad input exits 2."""

import dataclasses

import h5py
import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.spatial.transform import Rotation
from sweep_grid import ASYM_TOML, SYM_TOML

from topdrift.benchmarks.cases.schema import parse_case
from topdrift.benchmarks.run import case_reference
from topdrift.integrators import FixedStepMethod
from topdrift.integrators import get as get_method

HORIZON = "1.0"
SAMPLES = "11"
TARGET = 1e-6
METHODS = ["leapfrog", "rk4", "dop853"]


@pytest.fixture
def cases(tmp_path):
    """A user's own case files (not library cases)."""
    sym = tmp_path / "my-top.toml"
    sym.write_text(SYM_TOML)
    asym = tmp_path / "my-asym.toml"
    asym.write_text(ASYM_TOML)
    return sym, asym


def rotation(q):
    """Body-to-space rotation matrix of a unit quaternion, scalar first (common practice): the
    transpose of the attitude matrix A(q) of Shuster 1993, A Survey of Attitude Representations,
    eq. 159, which maps space to body with the scalar last (both from memory)."""
    q0, q1, q2, q3 = q
    a, b, c, d = q0 * q0, q1 * q1, q2 * q2, q3 * q3
    return np.array(
        [
            [a + b - c - d, 2 * (q1 * q2 - q0 * q3), 2 * (q1 * q3 + q0 * q2)],
            [2 * (q1 * q2 + q0 * q3), a - b + c - d, 2 * (q2 * q3 - q0 * q1)],
            [2 * (q1 * q3 - q0 * q2), 2 * (q2 * q3 + q0 * q1), a - b - c + d],
        ]
    )


def scipy_axes(case_path, horizon, samples):
    """The figure axis R e3 at the sample times, from scipy_quaternions."""
    return np.array([rotation(q)[:, 2] for q in scipy_quaternions(case_path, horizon, samples)])


def scipy_quaternions(case_path, horizon, samples):
    """The attitude quaternions (normalised) at the sample times, from scipy's DOP853 at rtol
    1e-12 on the Euler-Poisson equations with a quaternion (Goldstein, Classical Mechanics, sec.
    5.6 and 4.9 [from memory] for the equations; the quaternion rate q' = q (0, w) / 2 is common
    practice)."""
    case = parse_case(case_path.read_text(), case_path.name)
    body = case.body
    inertia = np.array(body.inertia)
    mg_chi = body.mass * body.gravity * np.array(body.com)
    y0 = np.array(case.body_state(), dtype=float)  # (q, m): the start, in the body form

    def rhs(_t, y):
        q, m = y[:4], y[4:]
        w = m / inertia
        gamma = rotation(q)[2]  # R^T e_z: the upward vertical in body axes
        dm = np.cross(m, w) + np.cross(gamma, mg_chi)  # gravity -g e_z on the centre of mass
        q0, q1, q2, q3 = q
        dq = 0.5 * np.array(
            [
                -q1 * w[0] - q2 * w[1] - q3 * w[2],
                q0 * w[0] + q2 * w[2] - q3 * w[1],
                q0 * w[1] + q3 * w[0] - q1 * w[2],
                q0 * w[2] + q1 * w[1] - q2 * w[0],
            ]
        )
        return np.concatenate([dq, dm])

    t = np.array([horizon * k / (samples - 1) for k in range(samples)])
    sol = solve_ivp(rhs, (0.0, horizon), y0, method="DOP853", t_eval=t, rtol=1e-12, atol=1e-14)
    assert sol.success
    return np.array([q / np.linalg.norm(q) for q in sol.y[:4].T])


def max_angle(a, b):
    c = np.einsum("ij,ij->i", a, b)
    s = np.linalg.norm(np.cross(a, b), axis=1)
    return float(np.max(np.arctan2(s, c)))


def rerun(command_json, case_path, entry, tmp_path):
    """The ranked setting through `topdrift run`; returns (metrics, axes from the quaternions)."""
    s = entry["settings"]
    setting = (
        ["--step", repr(s["step"])]
        if "step" in s
        else ["--rtol", repr(s["rtol"]), "--atol", repr(s["atol"])]
    )
    out = tmp_path / f"rerun-{entry['method']}.h5"
    rc, doc, err = command_json(
        "run",
        str(case_path),
        "--method",
        entry["method"],
        "--form",
        entry["form"],
        *setting,
        "--horizon",
        HORIZON,
        "--samples",
        SAMPLES,
        "--out",
        str(out),
    )
    assert rc == 0, err
    (row,) = doc["runs"]
    if "step" in s:
        # the value given is the step the run used (to the last bit, or one ulp above where the
        # quotient interval / step would round past a whole number of steps)
        assert row["settings"]["step"] == pytest.approx(s["step"], rel=3e-16)
    with h5py.File(out, "r") as f:
        q = f["runs"][row["run_id"]]["quaternion"][()]
    return row["metrics"], np.array([rotation(x)[:, 2] for x in q])


def test_ranked_settings_meet_the_target_when_run_again(command_json, cases, tmp_path):
    sym, _ = cases
    rc, doc, err = command_json(
        "pick",
        str(sym),
        "--target",
        str(TARGET),
        "--methods",
        *METHODS,
        "--horizon",
        HORIZON,
        "--samples",
        SAMPLES,
    )
    assert rc == 0, err
    # The documented keys (README, "Sweeps and recommendations").
    assert {"target", "metric", "horizon", "ranking"} <= set(doc)
    assert doc["target"] == TARGET and doc["metric"] == "axis" and doc["horizon"] == 1.0
    assert doc["reference"] is None  # a Lagrange top: measured against the exact solution
    assert sorted(e["method"] for e in doc["ranking"]) == sorted(METHODS)
    walls = [e["wall_s"] for e in doc["ranking"]]
    assert walls == sorted(walls)  # ranked by wall time
    ours = scipy_axes(sym, 1.0, 11)
    for e in doc["ranking"]:
        assert {"method", "settings", "wall_s", "rhs_evals", "achieved"} <= set(e)
        assert set(e["settings"]) in ({"step"}, {"rtol", "atol"})
        assert e["rhs_evals"] > 0 and e["wall_s"] > 0
        assert 0 < e["achieved"] <= TARGET
        metrics, axes = rerun(command_json, sym, e, tmp_path)
        # the same run again: the same error, to the bit
        assert metrics["axis_angle_max"] == e["achieved"]
        # and against our own trajectory the target is met too (scipy's own error is ~1e-10)
        mine = max_angle(axes, ours)
        assert mine <= TARGET
        assert mine == pytest.approx(e["achieved"], abs=1e-8)


def test_attitude_target_is_met_against_an_independent_attitude(command_json, cases, tmp_path):
    sym, _ = cases
    rc, doc, err = command_json(
        "pick",
        str(sym),
        "--target",
        str(TARGET),
        "--metric",
        "attitude",
        "--methods",
        "leapfrog",
        "rk4",
        "--horizon",
        HORIZON,
        "--samples",
        SAMPLES,
    )
    assert rc == 0, err
    assert doc["metric"] == "attitude" and doc["reference"] is None
    ours = scipy_quaternions(sym, 1.0, 11)
    for e in doc["ranking"]:
        assert 0 < e["achieved"] <= TARGET
        metrics, _ = rerun(command_json, sym, e, tmp_path)
        assert metrics["attitude_angle_max"] == e["achieved"]
        # the axis turns with the attitude: its error is never the larger
        assert metrics["axis_angle_max"] <= metrics["attitude_angle_max"]
        with h5py.File(tmp_path / f"rerun-{e['method']}.h5", "r") as f:
            (g,) = f["runs"].values()
            q = g["quaternion"][()]
        # against our own attitude through scipy.spatial.transform.Rotation: the magnitude of
        # R_ours^-1 R (scipy's own error is ~1e-10)
        r = Rotation.from_quat(np.roll(q, -1, axis=1))
        r_ours = Rotation.from_quat(np.roll(ours, -1, axis=1))
        mine = float(np.max((r_ours.inv() * r).magnitude()))
        assert mine <= TARGET
        assert mine == pytest.approx(e["achieved"], abs=1e-8)


def test_text_output_names_the_winner(command_line, cases):
    sym, _ = cases
    rc, out, _ = command_line(
        "pick",
        str(sym),
        "--target",
        "1e-5",
        "--methods",
        "leapfrog",
        "dop853",
        "--horizon",
        HORIZON,
        "--samples",
        SAMPLES,
    )
    assert rc == 0
    lines = out.splitlines()
    assert lines[0] == "grid-top: axis error <= 1e-05 rad over 1 s"
    assert lines[1].split() == [
        "rank",
        "method",
        "form",
        "setting",
        "wall",
        "s",
        "forces",
        "evals",
        "achieved",
        "margin",
    ]
    first = lines[2].split()
    assert first[0] == "1" and first[1] in ("leapfrog", "dop853")
    assert lines[-1].startswith(f"recommended: {first[1]} ({first[2]}) at {first[3]}")


def test_no_exact_solution_measures_against_a_reference_run(
    command_line, command_json, cases, tmp_path
):
    _, asym = cases
    args = ["pick", str(asym), "--target", str(TARGET), "--methods", "dop853"]
    args += ["--horizon", HORIZON, "--samples", SAMPLES]
    rc, out, _ = command_line(*args)
    assert rc == 0
    assert (
        "note: no exact solution for grid-asym: the axis error is measured against its "
        "extended-precision reference (Taylor series of order 32 in double-double arithmetic, "
        "checked against order 26), verified accuracy 2.2e-16 rad (figure axis)" in out
    )
    rc, doc, _ = command_json(*args)
    assert rc == 0 and "extended-precision reference" in doc["reference"]
    assert doc["reference_accuracy"]["axis"] == 2.2e-16  # the double floor: both parted less
    (e,) = doc["ranking"]
    _, axes = rerun(command_json, asym, e, tmp_path)
    # Against scipy's trajectory of the same body the achieved error holds up.
    mine = max_angle(axes, scipy_axes(asym, 1.0, 11))
    assert mine <= TARGET and mine == pytest.approx(e["achieved"], abs=1e-8)


def test_impossible_target_ranks_nothing_and_exits_1(command_line, command_json, cases):
    sym, _ = cases
    args = ["pick", str(sym), "--target", "1e-20", "--methods", "dop853", "rk45", "leapfrog-s4"]
    args += ["--horizon", "0.5", "--samples", "6"]
    rc, out, _ = command_line(*args)
    assert rc == 1
    # adaptive: down to the smallest rtol the method accepts, and why it stops there
    assert "not ranked: dop853 (body): target not reached down to rtol 1e-13" in out
    assert "not ranked: rk45 (body): target not reached down to rtol 1e-13" in out
    assert "below 100 machine epsilons" in out
    # fixed step: stops where the error no longer falls, long before 5e7 steps a run
    assert "not ranked: leapfrog-s4 (euler): target not reached down to step" in out
    assert "the error stopped falling with the step (round-off)" in out
    assert out.splitlines()[-1] == "no candidate met the target"
    assert "rank " not in out  # no table over an empty ranking
    rc, doc, _ = command_json(*args)
    assert rc == 1 and doc["ranking"] == []
    assert sorted(u["method"] for u in doc["unreached"]) == ["dop853", "leapfrog-s4", "rk45"]


@pytest.mark.parametrize(
    "extra,needle",
    [
        (["--target", "-1e-6"], "--target"),  # taken for an option: the parser refuses
        (["--target=-1e-6"], "--target: must be a positive"),
        (["--target", "0"], "--target"),
        (["--target", "nan"], "--target"),
        (["--target", "1e-6", "--methods", "rk5"], "rk5"),
        (["--target", "1e-6", "--samples", "1"], "--samples"),
        (["--target", "1e-6", "--horizon", "-2"], "--horizon"),
    ],
)
def test_bad_input_exits_2_with_one_line(command_line, cases, extra, needle):
    sym, _ = cases
    rc, out, err = command_line("pick", str(sym), *extra)
    assert rc == 2 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("topdrift: error: ") and needle in lines[0]


def test_unknown_case_exits_2(command_line):
    rc, _, err = command_line("pick", "no-such-top", "--target", "1e-6")
    assert rc == 2 and "no-such-top" in err and len(err.strip().splitlines()) == 1


def test_a_shorter_horizon_keeps_the_sample_interval_and_a_capped_step_says_so(
    command_line, command_json, cases
):
    """The case samples every 0.1 s (1 s, 11 samples): over 0.5 s that is 6 samples. With a
    sample every 0.01 s a loose target lets leapfrog's step reach the sample interval (the
    longest step the runner takes), where the search stops and says so."""
    sym, _ = cases
    args = ["pick", str(sym), "--target", "1e-2", "--methods", "leapfrog", "--horizon", "0.5"]
    rc, doc, _ = command_json(*args)
    assert rc == 0 and doc["samples"] == 6
    assert not doc["ranking"][0]["capped"]  # h = 0.1 s diverges: the target stops the search
    args += ["--samples", "51"]
    rc, doc, _ = command_json(*args)
    (e,) = doc["ranking"]
    assert e["capped"] and e["settings"]["step"] == 0.5 / 50
    rc, out, _ = command_line(*args)
    assert "note: leapfrog stopped at the sample interval (0.01 s), not at the target" in out


def test_a_target_below_the_reference_accuracy_is_refused_in_one_line(command_line):
    """The chaotic library top over its 40 s: round-off grows about 1e20 there (nearby starts
    part a hundredfold every 4 s, its description), and the double-double reference is verified
    only to about 6e-14 rad (docs/references.md)."""
    rc, out, err = command_line(
        "pick", "chaotic-asymmetric", "--target", "1e-14", "--methods", "dop853"
    )
    assert rc == 2 and out == ""
    (line,) = [x for x in err.strip().splitlines() if x.startswith("topdrift: error:")]
    assert "--target 1e-14: below this case's verified reference accuracy of 6.3e-14 rad" in line
    assert err.strip().splitlines()[-1] == line  # the refusal is the last word, one line


def _coarse_provider(accuracy, family=""):
    """A stand-in reference provider: the real reference, claiming a coarser accuracy."""
    real = case_reference.TAYLOR_DD

    def build(body, y0, times, progress):
        ref = real.build(body, y0, times, progress)
        ref.accuracy = {k: accuracy for k in ref.accuracy}
        return ref

    return case_reference.Provider(
        name="coarse-test",
        settings={"name": "coarse-test", "accuracy": accuracy},
        refuses=lambda body: None,
        build=build,
        family=family,
    )


def test_errors_below_the_reference_accuracy_are_marked(command_line, command_json, cases,
                                                         monkeypatch):  # fmt: skip
    _, asym = cases
    monkeypatch.setattr(case_reference, "PROVIDERS", [_coarse_provider(1e-5)])
    args = ["pick", str(asym), "--methods", "dop853", "--horizon", HORIZON, "--samples", SAMPLES]
    # a target at the accuracy is taken; every error that meets it is below the accuracy
    rc, out, _ = command_line(*args, "--target", "1e-5")
    assert rc == 0
    rc, doc, _ = command_json(*args, "--target", "1e-5")
    (e,) = doc["ranking"]
    assert e["achieved"] < 1e-5 and e["unresolved"] is True
    assert f"{e['achieved']:.3g}*" in out
    assert "note: * below this case's verified reference accuracy of 1e-05 rad" in out
    # and a looser target ranks errors above it, unmarked
    rc, doc, _ = command_json(*args, "--target", "1e-3")
    (e,) = doc["ranking"]
    assert e["unresolved"] == (e["achieved"] < 1e-5)
    # a target the reference cannot check is refused, with the provider's accuracy
    rc, _, err = command_line(*args, "--target", "1e-6")
    assert rc == 2 and "below this case's verified reference accuracy of 1e-05 rad" in err


def test_a_candidate_of_the_reference_family_is_not_judged_against_itself(
    command_json, cases, swap_method, monkeypatch
):
    """No built-in family is the reference's (a Taylor family would be): a stand-in provider of
    the plug-ins' family and a plug-in candidate show the rule."""
    _, asym = cases
    monkeypatch.setattr(case_reference, "PROVIDERS", [_coarse_provider(2.2e-16, family="external")])
    info = get_method("rk4").info
    twin = swap_method(
        FixedStepMethod(
            dataclasses.replace(info, name="taylor-twin", family="external"),
            lambda f, t, y, h: y + h * f(y + 0.5 * h * f(y)),  # the midpoint rule (common practice)
        )
    )
    rc, doc, _ = command_json(
        "pick", str(asym), "--target", "1e-3", "--methods", twin.info.name, "dop853",
        "--horizon", HORIZON, "--samples", SAMPLES,
    )  # fmt: skip
    assert rc == 0
    (u,) = doc["unreached"]
    assert u["method"] == "taylor-twin" and "reference's own family" in u["reason"]
