"""The regression gate: a clean rerun passes, planted regressions fail naming the run and the
metric, bad baseline files exit 2, and the comparison rules hold on hand-made records.

The grid is a sweep file of our own with three short runs, and the timing runs are shrunk (a few
milliseconds, two repeats), so that recording and gating take a second or two each. Timing noise
on a shared machine is not what the end-to-end tests check: they pass a wide --time-band, and the
timing rule itself is tested on hand-made records below.
"""

from __future__ import annotations

import copy
import dataclasses
import json
import math

import pytest

from topdrift.benchmarks.cases.library import load_case
from topdrift.benchmarks.cli.entry import main
from topdrift.benchmarks.gate import measure as grid_measure
from topdrift.benchmarks.gate.baseline_file import read_baseline, validate, write_baseline
from topdrift.benchmarks.gate.compare import Thresholds, compare, format_report
from topdrift.benchmarks.run.in_memory import run_in_memory
from topdrift.benchmarks.run.runner import plan_run
from topdrift.integrators import Method, get

TINY_SWEEP = """
name = "tiny"
description = "three short runs for the gate's tests"
cases = ["looping-nutation"]
methods = ["leapfrog-s4", "rk45", "leapfrog"]
horizon = 1.0
samples = 11
steps = [0.005]
rtols = [1e-8]

[method.leapfrog]
forms = ["body"]
"""
S4_KEY = "looping-nutation leapfrog-s4 euler step=0.005"
RK45_KEY = "looping-nutation rk45 body rtol=1e-08"
WIDE = ["--time-band", "100"]


def _shrink_timings(mp: pytest.MonkeyPatch) -> None:
    # 5 rounds: the fewest for which a 95 % interval of a timing change exists is 4 and 4.
    mp.setattr(grid_measure, "TIMING_TARGET_S", 0.003)
    mp.setattr(grid_measure, "TIMING_ROUNDS", 5)
    mp.setattr(grid_measure, "SCALAR_STEPS", 20_000)
    mp.setattr(grid_measure, "STAGES_STEPS", 20_000)


@pytest.fixture(autouse=True)
def small_timings(monkeypatch):
    _shrink_timings(monkeypatch)


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    """(path of a baseline recorded from the tiny sweep, its sweep file)."""
    d = tmp_path_factory.mktemp("gate")
    sweep = d / "tiny.toml"
    sweep.write_text(TINY_SWEEP, encoding="utf-8")
    out = d / "baseline.json"
    with pytest.MonkeyPatch.context() as mp:
        _shrink_timings(mp)
        assert main(["baseline", "--out", str(out), "--sweep", str(sweep)]) == 0
    return out, sweep


def test_baseline_file_holds_the_contract(recorded):
    path, _ = recorded
    data = read_baseline(path)
    assert data["format"] == "topdrift-baseline" and data["format_version"] == 2
    assert set(data["runs"]) == {
        S4_KEY,
        RK45_KEY,
        "looping-nutation leapfrog body step=0.005",
    }
    s4 = data["runs"][S4_KEY]
    assert s4["status"] == "ok" and s4["steps"] == 200  # 1 s / 0.005 s
    assert s4["rhs_evals"] > s4["steps"] and s4["energy_rel_max"] > 0
    assert set(data["timings"]) == {"leapfrog-s4 euler", "rk45 body", "leapfrog body"}
    for t in data["timings"].values():
        assert t["status"] == "ok" and t["ns_per_step_norm"] > 0
    for k in ("topdrift", "python", "numpy", "scipy", "numba", "h5py", "cpu"):
        assert k in data["versions"]


def test_baseline_refuses_to_overwrite(recorded, capsys):
    path, sweep = recorded
    before = path.read_bytes()
    assert main(["baseline", "--out", str(path), "--sweep", str(sweep)]) == 2
    assert "exists; pass --force" in capsys.readouterr().err
    assert path.read_bytes() == before


def test_clean_rerun_passes(command_line, recorded):
    path, _ = recorded
    rc, out, _ = command_line("gate", "--baseline", path, *WIDE)
    assert rc == 0, out
    assert out.splitlines()[-1].startswith("gate: pass: no regressions (3 runs and 3 timings")
    assert "no differences beyond the tolerances" in out


def _perturbed_s4(monkeypatch, delta: float) -> None:
    """Move the outer four weights of leapfrog-s4's composition by delta and the middle one by
    -4 delta: still symmetric and consistent (weights sum to 1), so still order 2, but the
    order-4 condition sum(gamma^3) = 0 no longer holds (Yoshida, Phys. Lett. A 150 (1990) 262;
    Hairer, Lubich and Wanner, Geometric Numerical Integration, Sec. II.4) [from memory]."""
    m = get("leapfrog-s4")
    g = m.table.coefficients
    assert len(g) == 5
    moved = (g[0] + delta, g[1] + delta, g[2] - 4 * delta, g[3] + delta, g[4] + delta)
    bad = dataclasses.replace(m.table, coefficients=moved)
    kick, drift = bad.sequence()
    monkeypatch.setattr(m, "kick_table", kick)
    monkeypatch.setattr(m, "drift_table", drift)


def _energy_order(h: float) -> float:
    case = load_case("looping-nutation")
    e = [
        run_in_memory(plan_run(case, "leapfrog-s4", step=s, horizon=1.0, samples=11)).metrics[
            "energy_rel_max"
        ]
        for s in (h, h / 2)
    ]
    return math.log2(e[0] / e[1])


def test_planted_coefficient_error_drops_the_order(monkeypatch):
    # The planted fault is what the next test says it is: order 4 measured before, 2 after.
    assert 3.7 < _energy_order(0.005) < 4.4
    _perturbed_s4(monkeypatch, 0.01)
    assert 1.8 < _energy_order(0.005) < 2.5


def test_planted_regression_fails_naming_run_and_metric(command_line, recorded, monkeypatch):
    path, _ = recorded
    _perturbed_s4(monkeypatch, 0.01)
    rc, out, _ = command_line("gate", "--baseline", path, *WIDE)
    assert rc == 1, out
    rows = [ln for ln in out.splitlines() if ln.startswith("REGRESSION")]
    energy = [ln for ln in rows if S4_KEY in ln and "energy_rel_max" in ln]
    assert energy, out
    assert "axis_angle_max" in out
    # the other methods are untouched
    assert not any(RK45_KEY in ln or "leapfrog body" in ln for ln in rows), out
    assert out.splitlines()[-1].startswith("gate: FAIL:")


class _TighterRk45(Method):
    """rk45 run at half the requested rtol: the same name, more steps."""

    def __init__(self, inner: Method):
        self.inner = inner
        self.info = inner.info

    def start(self, form, params, t0, y0, settings):
        s = dict(settings)
        s["rtol"] = s["rtol"] * 0.5
        return self.inner.start(form, params, t0, y0, s)


def test_changed_step_count_is_caught(command_line, recorded, swap_method):
    path, _ = recorded
    swap_method(_TighterRk45(get("rk45")))
    rc, out, _ = command_line("gate", "--baseline", path, *WIDE)
    assert rc == 1, out
    steps = [ln for ln in out.splitlines() if ln.startswith("REGRESSION") and "steps" in ln]
    assert steps and all(RK45_KEY in ln for ln in steps), out
    # a generous tolerance lets the same change through (and the errors only improved)
    rc, out, _ = command_line("gate", "--baseline", path, *WIDE, "--steps-tolerance", "1.0")
    assert rc == 0, out
    assert "improved" in out


def test_json_output(command_line, recorded, monkeypatch):
    path, _ = recorded
    _perturbed_s4(monkeypatch, 0.01)
    rc, out, _ = command_line("gate", "--baseline", path, *WIDE, "--json")
    assert rc == 1
    doc = json.loads(out)
    assert doc["verdict"] == "fail"
    hit = [f for f in doc["findings"] if f["run"] == S4_KEY and f["metric"] == "energy_rel_max"]
    assert hit and hit[0]["kind"] == "regression" and hit[0]["now"] > hit[0]["baseline"]
    # how the machine itself moved: the reference workload's ns per step, both sides
    base = read_baseline(path)
    assert doc["reference_ns"]["baseline"] == [
        base["reference"]["scalar_ns"],
        base["reference"]["stages_ns"],
    ]
    assert len(doc["reference_ns"]["now"]) == 2 and min(doc["reference_ns"]["now"]) > 0.0


class _SlowStepper:
    """Advances three shadow copies of the same run beside the real one: the same steps and
    numbers, four times the kernel work per step."""

    def __init__(self, real, shadows):
        self.real, self.shadows = real, shadows

    def advance_to(self, t_end):
        for s in self.shadows:
            s.advance_to(t_end)
        return self.real.advance_to(t_end)

    def __getattr__(self, name):
        return getattr(self.real, name)


class _SlowLeapfrog(Method):
    def __init__(self, inner: Method):
        self.inner = inner
        self.info = inner.info

    def start(self, form, params, t0, y0, settings):
        def one():
            return self.inner.start(form, params.copy(), t0, y0.copy(), dict(settings))

        return _SlowStepper(one(), [one() for _ in range(3)])


def test_slower_kernel_fails_the_timing(command_line, recorded, swap_method):
    path, _ = recorded
    swap_method(_SlowLeapfrog(get("leapfrog")))
    # four times the work against a band of +100 %: a margin of 2 x for machine noise
    rc, out, _ = command_line("gate", "--baseline", path, "--time-band", "1.0")
    assert rc == 1, out
    rows = [ln for ln in out.splitlines() if ln.startswith("REGRESSION")]
    assert any("timing leapfrog body" in ln and "slower" in ln for ln in rows), out
    # the numbers are the same: only the timing moved
    assert all("timing" in ln for ln in rows), out


def test_nonfinite_numbers_round_trip(recorded, tmp_path):
    data = read_baseline(recorded[0])
    data["runs"][S4_KEY]["energy_rel_max"] = math.inf
    p = tmp_path / "inf.json"
    write_baseline(data, p)
    assert '"inf"' in p.read_text()
    assert read_baseline(p)["runs"][S4_KEY]["energy_rel_max"] == math.inf


# ---- bad input: exit 2, one line naming what is wrong


def _edited(recorded, tmp_path, edit) -> str:
    data = json.loads(recorded[0].read_text())
    edit(data)
    p = tmp_path / "edited.json"
    p.write_text(json.dumps(data))
    return str(p)


@pytest.mark.parametrize(
    ("edit", "message"),
    [
        (lambda d: d.update(extra=1), "unknown key 'extra'"),
        (lambda d: d["runs"][S4_KEY].update(colour="red"), "unknown key 'colour'"),
        (lambda d: d.update(format_version=3), "format_version"),
        (lambda d: d.pop("reference"), "reference: missing"),
        (lambda d: d["runs"][S4_KEY].update(steps="many"), "steps: unexpected value"),
        (lambda d: d["timings"]["rk45 body"].update(run="nowhere"), "'nowhere' is not in runs"),
    ],
)
def test_invalid_baseline_exits_2(command_line, recorded, tmp_path, edit, message):
    p = _edited(recorded, tmp_path, edit)
    rc, out, err = command_line("gate", "--baseline", p)
    assert rc == 2 and out == ""
    assert err.startswith("topdrift: error:") and message in err and err.count("\n") == 1


def test_missing_and_unreadable_baselines_exit_2(command_line, tmp_path):
    rc, _, err = command_line("gate", "--baseline", tmp_path / "none.json")
    assert rc == 2 and "no baseline file" in err
    bad = tmp_path / "bad.json"
    bad.write_text("{not json")
    rc, _, err = command_line("gate", "--baseline", bad)
    assert rc == 2 and "not valid JSON" in err
    rc, _, err = command_line("gate", "--baseline", tmp_path / "none.json", "--error-factor", "0.5")
    assert rc == 2 and "--error-factor" in err


# ---- the rules, on hand-made records


@pytest.fixture
def pair(recorded):
    base = read_baseline(recorded[0])
    return base, copy.deepcopy(base)


def _kinds(result) -> dict:
    return {(f.run, f.metric): f.kind for f in result.findings}


def test_round_off_floor(pair):
    base, now = pair
    base["runs"][S4_KEY]["energy_rel_max"] = 1e-16
    now["runs"][S4_KEY]["energy_rel_max"] = 3e-16  # the same error, at round-off
    assert _kinds(compare(base, now, Thresholds())) == {}
    now["runs"][S4_KEY]["energy_rel_max"] = 1e-12  # well above the floor of 1e-13
    assert _kinds(compare(base, now, Thresholds()))[(S4_KEY, "energy_rel_max")] == "regression"


def test_error_factor_both_ways(pair):
    base, now = pair
    e = base["runs"][S4_KEY]["energy_rel_max"]
    now["runs"][S4_KEY]["energy_rel_max"] = e * 1.4
    assert _kinds(compare(base, now, Thresholds(error_factor=1.5))) == {}
    now["runs"][S4_KEY]["energy_rel_max"] = e * 1.6
    assert _kinds(compare(base, now, Thresholds(error_factor=1.5))) == {
        (S4_KEY, "energy_rel_max"): "regression"
    }
    now["runs"][S4_KEY]["energy_rel_max"] = e / 2
    assert _kinds(compare(base, now, Thresholds(error_factor=1.5))) == {
        (S4_KEY, "energy_rel_max"): "improvement"
    }


def test_status_and_counts(pair):
    base, now = pair
    n = base["runs"][RK45_KEY]["steps"]
    now["runs"][RK45_KEY]["steps"] = n + int(0.01 * n)  # within 2 %
    assert _kinds(compare(base, now, Thresholds())) == {}
    now["runs"][RK45_KEY]["steps"] = n - int(0.05 * n) - 1  # fewer is a change too
    assert _kinds(compare(base, now, Thresholds()))[(RK45_KEY, "steps")] == "regression"
    now["runs"][RK45_KEY]["status"] = "diverged"
    k = _kinds(compare(base, now, Thresholds()))
    assert k == {(RK45_KEY, "status"): "regression"}  # compared no further


def _tight_rounds(*records) -> None:
    """Rounds spread by +-1 %: a timing the band can judge, whatever the machine did while the
    fixture was recorded (the spread rule has its own test, test_gate_timing.py)."""
    for r in records:
        r["per_round"] = [0.99, 1.0, 1.01, 0.995, 1.005]
        r["rounds"] = 5


def test_timing_band(pair):
    base, now = pair
    _tight_rounds(base["timings"]["rk45 body"], now["timings"]["rk45 body"])
    x = base["timings"]["rk45 body"]["ns_per_step_norm"]
    now["timings"]["rk45 body"]["ns_per_step_norm"] = x * 1.3
    assert _kinds(compare(base, now, Thresholds(time_band=0.35))) == {}
    now["timings"]["rk45 body"]["ns_per_step_norm"] = x * 1.4
    r = compare(base, now, Thresholds(time_band=0.35))
    assert _kinds(r) == {("timing rk45 body", "ns_per_step_norm"): "regression"}
    assert r.failed
    now["timings"]["rk45 body"]["ns_per_step_norm"] = x / 1.4
    r = compare(base, now, Thresholds(time_band=0.35))
    assert _kinds(r) == {("timing rk45 body", "ns_per_step_norm"): "improvement"}
    assert not r.failed


def test_versions_missing_and_new_runs_are_reported(pair):
    base, now = pair
    now["versions"]["numba"] = "0.69.0"
    base["versions"]["numba"] = "0.68.1"
    now["runs"][RK45_KEY]["energy_rel_max"] *= 10
    moved = now["runs"].pop(S4_KEY)
    now["runs"]["looping-nutation leapfrog-s4 euler step=0.0025"] = moved
    r = compare(base, now, Thresholds())
    text = format_report(r, "header")
    assert r.missing_runs == [S4_KEY]
    assert r.new_runs == ["looping-nutation leapfrog-s4 euler step=0.0025"]
    assert "numba 0.68.1 -> 0.69.0: the change may be explained by a version change" in text
    lines = text.splitlines()
    # the version line sits right under the table of differences
    assert lines.index(next(ln for ln in lines if ln.startswith("numba"))) < lines.index(
        next(ln for ln in lines if "missing from the rerun" in ln)
    )
    assert r.failed and (RK45_KEY, "energy_rel_max") in _kinds(r)
    assert "1 missing" in r.verdict() and "1 new" in r.verdict()


def test_validate_accepts_what_it_writes(recorded):
    data = json.loads(recorded[0].read_text())
    assert validate(data, "x") is data


def test_changed_sweep_and_run_id_are_noted_not_failed(pair):
    base, now = pair
    now["sweep"]["sha256"] = "0" * 64
    now["runs"][S4_KEY]["run_id"] = "feedfacefeedface"
    r = compare(base, now, Thresholds())
    assert not r.failed
    assert _kinds(r) == {(S4_KEY, "run_id"): "note"}
    assert any("changed since the baseline was recorded" in n for n in r.notes)


KOV_SWEEP = """
name = "kov"
description = "a Kovalevskaya top through the gate: its integral is measured and gated"
cases = ["kovalevskaya"]
methods = ["leapfrog-s4"]
horizon = 1.0
samples = 11
steps = [0.005]
"""


def test_the_kovalevskaya_integral_and_force_evaluations_are_gated(tmp_path, command_line):
    sweep = tmp_path / "kov.toml"
    sweep.write_text(KOV_SWEEP, encoding="utf-8")
    out = tmp_path / "baseline.json"
    assert main(["baseline", "--out", str(out), "--sweep", str(sweep)]) == 0
    data = json.loads(out.read_text())
    (key,) = data["runs"]
    rec = data["runs"][key]
    assert rec["kovalevskaya_rel_max"] > 0 and rec["p_psi_rel_max"] is None
    assert rec["force_evals"] == 5 * 200 + 10  # 5 kicks a step, one closing kick per sample
    rc, text, _ = command_line("gate", "--baseline", out, *WIDE)
    assert rc == 0, text
    # A baseline whose integral was 100 times smaller, and one that counted fewer kicks: both
    # are regressions of this run, named by metric.
    for name, value in (
        ("kovalevskaya_rel_max", rec["kovalevskaya_rel_max"] / 100),
        ("force_evals", rec["force_evals"] // 2),
    ):
        tampered = copy.deepcopy(data)
        tampered["runs"][key][name] = value
        path = tmp_path / f"{name}.json"
        path.write_text(json.dumps(tampered), encoding="utf-8")
        rc, text, _ = command_line("gate", "--baseline", path, *WIDE)
        assert rc == 1 and key in text and name in text, text
    # A baseline from before these keys is still read, and compared without them.
    older = copy.deepcopy(data)
    for name in ("kovalevskaya_rel_max", "force_evals"):
        del older["runs"][key][name]
    path = tmp_path / "older.json"
    path.write_text(json.dumps(older), encoding="utf-8")
    rc, text, _ = command_line("gate", "--baseline", path, *WIDE)
    assert rc == 0, text


def test_attitude_error_is_gated_and_an_older_baseline_reports_it_as_new(pair):
    base, now = pair
    with_attitude = [k for k, r in base["runs"].items() if r.get("attitude_angle_max")]
    assert S4_KEY in with_attitude  # a case with an exact solution records it
    now["runs"][S4_KEY]["attitude_angle_max"] = base["runs"][S4_KEY]["attitude_angle_max"] * 100
    r = compare(base, now, Thresholds())
    assert _kinds(r) == {(S4_KEY, "attitude_angle_max"): "regression"}
    # A baseline recorded before the metric existed: read, not failed, the metric reported new.
    older = copy.deepcopy(base)
    for rec in older["runs"].values():
        del rec["attitude_angle_max"]
    r = compare(older, now, Thresholds())
    assert not r.failed and _kinds(r) == {}
    assert r.new_metrics == {"attitude_angle_max": len(with_attitude)}
    text = format_report(r, "header")
    assert (
        f"metric attitude_angle_max is new since the baseline: measured in {len(with_attitude)}"
        in text
    )
    assert r.as_json()["new_metrics"] == {"attitude_angle_max": len(with_attitude)}
