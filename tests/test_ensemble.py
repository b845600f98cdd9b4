"""Ensembles: every member is the same arithmetic as a single run; the round-off study."""

import json

import numpy as np
import pytest

from topdrift.benchmarks.choose.roundoff import (
    energy_precise,
    exact_quaternions,
    fit_exponent,
    member_quaternions,
    phase_references,
    rounded_inverses,
)
from topdrift.benchmarks.cli.entry import main
from topdrift.benchmarks.cli.roundoff import table_rows
from topdrift.integrators import MethodRefused, get
from topdrift.integrators.ensemble import EnsembleStepper
from topdrift.models import RigidBody, body_state, euler_state
from topdrift.models.invariants import invariants_of

TOP = RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1))


def starts(form, n=6):
    make = euler_state if form == 0 else body_state
    return np.array([make(TOP, 0.3, 0.9 + 0.01 * k, 0.2, 1.0, 0.5, 40.0) for k in range(n)])


@pytest.mark.parametrize("form", [0, 1])
@pytest.mark.parametrize(
    "name", ["leapfrog", "leapfrog-s4-kahan", "midpoint", "gauss4", "gauss6-kahan"]
)
def test_members_match_single_runs_bit_for_bit(name, form):
    y0 = starts(form)
    m = get(name)
    # lanes=False: the method's own kernel for every member (the plain splittings would take
    # the SIMD lanes by default, test_lane_ensemble.py)
    ens = EnsembleStepper(m, form, TOP.params(), 0.0, y0, 1e-3, lanes=False)
    assert not ens.uses_lanes
    for t in (0.1, 0.25):
        assert np.all(ens.advance_to(t) == 0)
    for j in (0, 3, 5):
        s = m.start(form, TOP.params(), 0.0, y0[j], {"step": 1e-3})
        s.advance_to(0.1)
        s.advance_to(0.25)
        assert np.array_equal(ens.y[j], s.y)


@pytest.mark.parametrize(
    "name",
    [
        "engine-euler",
        "engine-semi-implicit",
        "engine-implicit-gyro",
        "lie-rkmk4",
        "lie-cg3",
        "lie-cf4",
        "rattle",
    ],
)
def test_engine_and_lie_group_members_match_single_runs_bit_for_bit(name):
    y0 = starts(1)
    m = get(name)
    ens = EnsembleStepper(m, 1, TOP.params(), 0.0, y0, 1e-3)
    for t in (0.1, 0.25):
        assert np.all(ens.advance_to(t) == 0)
    for j in (0, 3, 5):
        s = m.start(1, TOP.params(), 0.0, y0[j], {"step": 1e-3})
        s.advance_to(0.1)
        s.advance_to(0.25)
        assert np.array_equal(ens.y[j], s.y)
        assert np.array_equal(ens.counters[j], s.counters)


def test_methods_without_an_ensemble_kernel_are_refused():
    with pytest.raises(MethodRefused, match="ensembles run on"):
        EnsembleStepper(get("rk4"), 1, TOP.params(), 0.0, starts(1), 1e-3)


def test_precise_energy_agrees_with_the_float_kernel():
    for form in (0, 1):
        y = starts(form, 1)[0]
        e = float(energy_precise(form, y, None, TOP.params()))
        assert e == pytest.approx(invariants_of(form, y, TOP.params())["energy"], rel=1e-14)


def test_fit_recovers_a_known_exponent():
    n = np.geomspace(100, 1e7, 30)
    assert fit_exponent(n, 3e-17 * n**0.5)[0] == pytest.approx(0.5, abs=1e-12)
    assert fit_exponent(n, 1e-18 * n)[0] == pytest.approx(1.0, abs=1e-12)
    assert fit_exponent(n, 2e-19 * n**1.5)[0] == pytest.approx(1.5, abs=1e-12)


@pytest.mark.parametrize("exponent", [0.5, 1.5])
def test_fit_recovers_known_exponents_through_noise_and_an_early_floor(exponent):
    # Synthetic data of known exponents: the law times log-normal scatter of 10 per cent, over
    # a floor that the law outgrows in the first decade; the fit over the last two decades
    # must find the exponent.
    rng = np.random.default_rng(11)
    n = np.unique(np.round(np.geomspace(100, 1e7, 40)))
    law = 1e-20 * n**exponent * np.exp(0.1 * rng.standard_normal(n.size))
    rms = np.maximum(law, law[n >= 1e5][0] * 1e-2)
    slope, (lo, hi) = fit_exponent(n, rms)
    assert lo >= 1e5 and hi == 1e7
    # within four standard errors of a least-squares slope with that scatter (common practice:
    # sigma / sqrt(sum (x - mean x)^2), here with x = log10 n as the fit takes it)
    x = np.log10(n[n >= lo])
    se = 0.1 / np.log(10) / np.sqrt(np.sum((x - x.mean()) ** 2))
    assert abs(slope - exponent) < 4 * se
    assert 4 * se < 0.1  # fine enough to tell 0.5 from 1 and 1.5 from 1


def test_table_rows_end_at_the_last_point():
    # 40 points (today's study): the last printed row is the last step count, which the fit uses
    assert table_rows(40)[-1] == 39 and table_rows(40)[0] == 0
    assert 8 <= len(table_rows(40)) <= 10
    assert table_rows(3) == [0, 1, 2]
    assert table_rows(17)[-1] == 16


def test_phase_is_measured_against_each_members_own_exact_solution():
    # A member's start is its own exact solution at step 0: the attitude error is 0 to rounding
    # there, and the exact time k h is taken as a double-double (k h - fl(k h) exact).
    y0 = starts(1, 3)
    case = _CaseLike(TOP)
    tops, why = phase_references(case, "body", y0)
    assert why is None and len(tops) == 3
    q = member_quaternions(1, y0, None)
    qe = exact_quaternions(tops, 0, 1e-3)
    assert np.allclose(np.abs(np.einsum("ij,ij->i", q, qe)), 1.0, atol=1e-15)
    # the Euler form gives the same attitude from its angles
    ye = starts(0, 3)
    assert np.allclose(
        np.abs(np.einsum("ij,ij->i", member_quaternions(0, ye, None), q)), 1.0, atol=1e-15
    )
    asym = _CaseLike(RigidBody(1.0, (0.05, 0.06, 0.02), com=(0.0, 0.0, 0.1)))
    tops, why = phase_references(asym, "body", y0)
    assert tops is None and "no Lagrange top" in why
    # 1/0.05 and 1/0.02 are no doubles; 1/0.25 and 1/0.125 are
    assert rounded_inverses(TOP) == ["I1", "I3"]
    assert rounded_inverses(RigidBody(1.0, (0.25, 0.25, 0.125), com=(0.0, 0.0, 0.1))) == []


class _CaseLike:
    """What phase_references reads of a case: its name and body."""

    def __init__(self, body):
        self.name = "test-top"
        self.body = body


def test_roundoff_command(capsys, tmp_path):
    png = tmp_path / "ro.png"
    rc = main(
        [
            "roundoff",
            "looping-nutation",
            "--method",
            "gauss4-kahan",
            "--form",
            "body",
            "--step",
            "2e-3",
            "--steps",
            "5000",
            "--starts",
            "4",
            "--json",
            "--plot",
            str(png),
        ]
    )
    assert rc == 0
    r = json.loads(capsys.readouterr().out)
    assert r["starts"] == 4 and r["n"][-1] == 5000 and r["exponent"] is not None
    # Gauss-Legendre keeps the body-form energy (a quadratic invariant, Cooper 1987) up to
    # round-off: after 5000 steps the error is far below any truncation error of this step.
    assert max(r["rms_energy_error"]) < 1e-14
    # the phase beside it, at every point, from each start's exact solution
    assert len(r["rms_phase_error"]) == len(r["n"]) and r["phase_exponent"] is not None
    assert r["phase_fit_range"][1] == r["n"][-1] == 5000
    assert "1/I1" in r["phase_note"]  # looping-nutation's moments have no exact inverse
    # At this step the phase error is truncation (exponent about 1), nearly the same for starts
    # 1e-6 apart: the spread about the members' mean keeps only what differs between them.
    spread = r["rms_phase_spread"]
    assert len(spread) == len(r["n"]) and r["phase_spread_exponent"] is not None
    assert spread[-1] < 1e-4 * r["rms_phase_error"][-1]
    assert png.stat().st_size > 10_000


def test_roundoff_bad_input_exits_2(capsys):
    assert (
        main(
            ["roundoff", "looping-nutation", "--method", "rk4", "--step", "1e-3", "--steps", "5000"]
        )
        == 2
    )
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "ensembles run on" in err[0]
    assert (
        main(
            [
                "roundoff",
                "looping-nutation",
                "--method",
                "leapfrog",
                "--step",
                "-1",
                "--steps",
                "5000",
            ]
        )
        == 2
    )


def test_run_with_an_ensemble(tmp_path, capsys):
    import h5py

    out = tmp_path / "e.h5"
    args = [
        "run",
        "looping-nutation",
        "--method",
        "leapfrog",
        "--step",
        "1e-3",
        "--horizon",
        "0.5",
        "--samples",
        "11",
        "--out",
        str(out),
        "--json",
    ]
    assert main([*args, "--ensemble", "6", "--spread", "1e-6"]) == 0
    r = json.loads(capsys.readouterr().out)["runs"][0]
    assert r["status"] == "ok" and r["metrics"]["members"] == 6
    assert main(args) == 0  # the same case as a plain run, into the same file
    plain = json.loads(capsys.readouterr().out)["runs"][0]
    assert plain["run_id"] != r["run_id"]
    with h5py.File(out, "r") as f:
        g = f["runs"][r["run_id"]]
        assert g["ensemble/energy"].shape == (11, 6)
        assert g["ensemble/axis"].shape == (11, 6, 3)
        assert g["ensemble/axis_spread"].shape == (11,)
        # Member 0 is the case's own start. The leapfrog's members go in SIMD lanes: within a
        # few ulps of the plain run (the lane sine and cosine), recorded in the settings.
        assert r["settings"]["lanes"] == 1
        own = f["runs"][plain["run_id"]]["state"][()]
        assert np.max(np.abs(g["state"][()] - own)) <= 64 * np.spacing(np.max(np.abs(own)))
        spread = g["ensemble/axis_spread"][()]
        assert spread[0] > 0 and np.all(np.isfinite(spread))
    # With --scalar-members, member by member on the method's own kernel: the same bits.
    assert main([*args, "--ensemble", "6", "--spread", "1e-6", "--scalar-members"]) == 0
    s = json.loads(capsys.readouterr().out)["runs"][0]
    assert "lanes" not in s["settings"] and s["run_id"] not in (r["run_id"], plain["run_id"])
    with h5py.File(out, "r") as f:
        g = f["runs"][s["run_id"]]
        assert g["state"][()].tobytes() == f["runs"][plain["run_id"]]["state"][()].tobytes()


def test_ensemble_refused_for_an_adaptive_method(tmp_path, capsys):
    out = tmp_path / "e.h5"
    assert (
        main(
            [
                "run",
                "looping-nutation",
                "--method",
                "dop853",
                "--rtol",
                "1e-8",
                "--ensemble",
                "4",
                "--out",
                str(out),
            ]
        )
        == 2
    )
    assert "fixed-step" in capsys.readouterr().err
    assert not out.exists()


def _ensemble(tmp_path, text, members, method="leapfrog", step=0.01, **run):
    """plan_run + plan_ensemble on a tiny case file, with an open writer for execute_ensemble."""
    from tiny_cases import write_case

    from topdrift.benchmarks.cases.schema import read_case
    from topdrift.benchmarks.run.ensemble import plan_ensemble
    from topdrift.benchmarks.run.runner import plan_run
    from topdrift.benchmarks.store.writer import open_writer

    path = write_case(tmp_path, "top.toml", text, **run.pop("fmt", {}))
    plan = plan_run(read_case(path), method, step=step, **run)
    return plan_ensemble(plan, members, 1e-6), open_writer(tmp_path / "e.h5")


def test_an_ensemble_that_reaches_the_pole_ends_singular_with_its_last_sample(tmp_path):
    # The planar swing of test_cli_run.py (no spin, no precession, from 3 deg): every member
    # falls through the downward vertical, where the Euler form is singular, within 2 s.
    import h5py
    from tiny_cases import TOP_TOML

    from topdrift.benchmarks.run.ensemble import execute_ensemble

    swing = TOP_TOML.replace("phi_rate = 1.0", "phi_rate = 0.0")
    ep, f = _ensemble(
        tmp_path, swing, 4, horizon=2.0, samples=21, fmt={"theta": "3 deg", "spin": "0 rpm"}
    )
    try:
        r = execute_ensemble(ep, f)
    finally:
        f.close()
    assert r.status == "singular"
    t_fail = r.metrics["t_fail"]
    assert 0.0 < t_fail < 2.0 and f"by t = {t_fail:.17g}" in r.detail
    assert r.detail.split(" of ")[1].startswith("4 members stopped")
    with h5py.File(tmp_path / "e.h5", "r") as g5:
        g = g5["runs"][r.run_id]
        assert g.attrs["status"] == "singular" and g.attrs["detail"] == r.detail
        t = g["t"][()]
        # The sample at which the members stopped is stored, and nothing after it.
        assert t[-1] == t_fail and len(t) == round(t_fail / 0.1) + 1
        assert g["ensemble/energy"].shape == (len(t), 4)


def test_a_stopped_ensemble_is_interrupted_with_every_sample_it_took(tmp_path, stop_at):
    import h5py
    from tiny_cases import TOP_TOML

    from topdrift.benchmarks.run.ensemble import execute_ensemble

    ep, f = _ensemble(tmp_path, TOP_TOML, 3, step=0.001)
    stop, progress = stop_at(4)
    try:
        r = execute_ensemble(ep, f, stop=stop, progress=progress, flush_every=3600.0)
    finally:
        f.close()
    assert r.status == "interrupted" and r.detail == "" and r.metrics["t_fail"] is None
    with h5py.File(tmp_path / "e.h5", "r") as g5:
        g = g5["runs"][r.run_id]
        assert g.attrs["status"] == "interrupted"
        assert g["t"].shape == (4,) and g["ensemble/axis"].shape == (4, 3, 3)
        assert g["state"].shape == (4, 6)  # member 0's samples, the Euler form of a Lagrange top


def test_run_statuses_are_the_documented_ones():
    # The run-file contract (docs/run-files.md, "status") against the labels the store writes
    # and the sample loop ends runs with.
    from pathlib import Path

    from topdrift.benchmarks.run.loop import RUN_STATUS, STOPPED, stepper_outcome
    from topdrift.benchmarks.store.format import STATUSES
    from topdrift.integrators import ST_FAILED, ST_NO_CONVERGENCE, ST_STEP_UNDERFLOW, STATUS_NAMES

    doc = Path(__file__).resolve().parents[1] / "docs" / "run-files.md"
    line = next(ln for ln in doc.read_text().splitlines() if ln.strip().startswith("status "))
    assert tuple(w for w in line.split()[1:] if w != "|") == STATUSES
    assert STOPPED.status in STATUSES and set(RUN_STATUS.values()) <= set(STATUSES)
    for code in range(len(STATUS_NAMES)):
        if code == 0:
            continue
        end = stepper_outcome(code, 1.5)
        assert end.status in STATUSES and end.t_fail == 1.5
        assert end.detail.startswith(f"{STATUS_NAMES[code]} at t = 1.5")
    for code in (ST_FAILED, ST_NO_CONVERGENCE, ST_STEP_UNDERFLOW):
        assert stepper_outcome(code, 0.0).status == "failed"
