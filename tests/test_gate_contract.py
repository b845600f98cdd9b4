"""The baseline file refuses what would make the gate blind or crash, in one line with exit 2;
the command line's exit statuses are distinct (0 pass, 1 regression, 2 bad input, 3 internal
error); and the horizon rule is one for every command."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from topdrift.benchmarks.cases.library import load_case
from topdrift.benchmarks.cli import entry
from topdrift.benchmarks.gate import measure as grid_measure
from topdrift.benchmarks.gate.baseline_file import FORMAT_VERSION, read_baseline
from topdrift.benchmarks.run.runner import plan_run
from topdrift.benchmarks.sweep.executor import expand
from topdrift.benchmarks.sweep.spec import parse_sweep

SWEEP = """
name = "contract"
cases = ["looping-nutation"]
methods = ["leapfrog", "rk45"]
horizon = 0.5
samples = 6
steps = [0.005]
rtols = [1e-7]
"""
LEAP = "looping-nutation leapfrog euler step=0.005"


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    d = tmp_path_factory.mktemp("contract")
    (d / "contract.toml").write_text(SWEEP)
    out = d / "baseline.json"
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(grid_measure, "TIMING_TARGET_S", 0.002)
        mp.setattr(grid_measure, "TIMING_ROUNDS", 4)
        mp.setattr(grid_measure, "SCALAR_STEPS", 10_000)
        mp.setattr(grid_measure, "STAGES_STEPS", 10_000)
        rc = entry.main(
            ["baseline", "--out", str(out), "--sweep", str(d / "contract.toml"), "--rounds", "4"]
        )
    assert rc == 0
    return out


def _edit(recorded, tmp_path, text_edit) -> Path:
    p = tmp_path / "edited.json"
    p.write_text(text_edit(recorded.read_text()))
    return p


def _gate_err(capsys, path) -> tuple[int, str]:
    capsys.readouterr()
    rc = entry.main(["gate", "--baseline", str(path)])
    cap = capsys.readouterr()
    assert cap.out == ""
    return rc, cap.err


def _set(key_path, value):
    """A text edit: the JSON value at key_path replaced by `value` (raw JSON text)."""

    def edit(text):
        data = json.loads(text)
        *parents, last = key_path
        d = data
        for k in parents:
            d = d[k]
        d[last] = "@@"
        return json.dumps(data).replace('"@@"', value)

    return edit


@pytest.mark.parametrize(
    ("path", "value", "message"),
    [
        # A NaN compares false with everything: the gate would pass whatever the rerun gives.
        (("runs", LEAP, "energy_rel_max"), '"nan"', "energy_rel_max: unexpected value 'nan'"),
        (("runs", LEAP, "energy_rel_max"), "NaN", "NaN is not a JSON number"),
        (("runs", LEAP, "energy_rel_max"), "-1e-9", "expected a number >= 0"),
        # JSON allows 1e400; Python reads it as infinity
        (("runs", LEAP, "steps"), "1e400", "the number 1e400 is out of the range of a double"),
        (("runs", LEAP, "steps"), "-3", "expected a whole number >= 0"),
        (("runs", LEAP, "steps"), str(2**70), "expected a whole number >= 0"),
        # a timing divides: zero or infinity is no timing
        (("timings", "leapfrog euler", "ns_per_step_norm"), "0", "expected a positive number"),
        (("timings", "leapfrog euler", "ns_per_step_norm"), '"inf"', "expected a number"),
        (("timings", "leapfrog euler", "per_round"), "[1.0, 0.0]", "per_round"),
        (("timings", "leapfrog euler", "horizon"), "Infinity", "Infinity is not a JSON number"),
        (("reference", "scalar_ns"), "-2.0", "reference: scalar_ns"),
        (("sweep", "kind"), '"url"', 'expected "shipped" or "file"'),
        (("machine", "cores"), '"two"', "machine: cores"),
        (("plugins",), '{"x": {"package": 1, "version": "1"}}', "plugins['x']"),
    ],
)
def test_out_of_range_values_exit_2_in_one_line(recorded, tmp_path, capsys, path, value, message):
    p = _edit(recorded, tmp_path, _set(path, value))
    rc, err = _gate_err(capsys, p)
    assert rc == 2, err
    assert err.startswith("topdrift: error:") and err.count("\n") == 1
    assert message in err, err


def test_rounds_must_match_their_list(recorded, tmp_path, capsys):
    p = _edit(recorded, tmp_path, _set(("timings", "leapfrog euler", "rounds"), "99"))
    rc, err = _gate_err(capsys, p)
    assert rc == 2 and "rounds: 99 but per_round holds" in err


def test_an_inf_error_maximum_is_a_value(recorded):
    """A run whose error grew without bound has an infinite maximum: the one non-finite value a
    baseline holds, written as the string "inf"."""
    data = json.loads(recorded.read_text())
    data["runs"][LEAP]["energy_rel_max"] = "inf"
    p = recorded.with_name("inf.json")
    p.write_text(json.dumps(data))
    assert read_baseline(p)["runs"][LEAP]["energy_rel_max"] == float("inf")


def test_an_older_format_says_to_record_again(recorded, tmp_path, capsys):
    p = _edit(recorded, tmp_path, _set(("format_version",), "1"))
    rc, err = _gate_err(capsys, p)
    assert rc == 2 and "reads version 2, got 1; record it again with" in err


def test_the_committed_baseline_is_readable():
    """results/baseline.json is what CI gates against: it must be of this format version."""
    path = Path(__file__).resolve().parents[1] / "results" / "baseline.json"
    data = read_baseline(path)
    assert data["format_version"] == FORMAT_VERSION
    assert data["sweep"] == {**data["sweep"], "kind": "shipped", "source": "quick"}


# ---- exit statuses


def test_an_internal_error_is_status_3_in_one_line(monkeypatch, capsys):
    from topdrift.benchmarks.cli import methods

    def broken(args):
        raise RuntimeError("planted\nover two lines")

    monkeypatch.setattr(methods, "run", broken)
    rc = entry.main(["methods"])
    err = capsys.readouterr().err
    assert rc == entry.EXIT_INTERNAL == 3
    assert err.startswith("topdrift: internal error: RuntimeError: planted over two lines at ")
    assert err.count("\n") == 1


def test_the_gate_statuses_are_distinct(recorded, tmp_path, capsys):
    assert len({entry.EXIT_OK, entry.EXIT_FAILED, entry.EXIT_BAD_INPUT, entry.EXIT_INTERNAL}) == 4
    rc, _ = _gate_err(capsys, tmp_path / "missing.json")
    assert rc == entry.EXIT_BAD_INPUT


# ---- one horizon rule


def test_a_horizon_keeps_the_sample_interval_in_run_and_sweep():
    """A shorter horizon keeps the case's sample interval (and so the step), not its sample
    count: with the count kept, 0.005 s steps in a shorter interval would be rounded."""
    case = load_case("looping-nutation")
    interval = case.horizon / (case.samples - 1)
    full = plan_run(case, "leapfrog", step=interval / 7)
    short = plan_run(case, "leapfrog", step=interval / 7, horizon=10 * interval)
    assert short.samples == 11
    assert short.settings["step"] == full.settings["step"]
    # a sweep's horizon without its own sample count follows the same rule
    sweep = 'name = "h"\ncases = ["looping-nutation"]\nmethods = ["leapfrog"]\n'
    sweep += f"horizon = {10 * interval!r}\nsteps = [{interval / 7!r}]\n"
    (job,), _ = expand(parse_sweep(sweep, "h"))
    assert job.samples == 11
    # an explicit sample count wins
    assert plan_run(case, "leapfrog", step=0.005, horizon=1.0, samples=3).samples == 3


def test_the_gate_times_with_the_grid_runs_step():
    """The timing run stretches a grid run's horizon by a whole factor; its fixed step is the
    grid run's to the bit: 0.005 (0.00511 rounded down to ten steps per 0.05 s sample interval).
    With the sample count kept instead (2 samples over 74 s), it was 74 / 14482 = 0.0051098."""
    spec = parse_sweep(
        'name = "t"\ncases = ["looping-nutation"]\nmethods = ["leapfrog"]\nhorizon = 2.0\n'
        "samples = 41\nsteps = [0.00511]\n",
        "t",
    )
    jobs, _ = grid_measure.grid_jobs(spec)
    (job,) = jobs.values()
    grid = plan_run(
        load_case("looping-nutation"), "leapfrog", step=0.00511, horizon=2.0, samples=41
    )
    timed = grid_measure.timing_plan(job, 2.0 * 37)
    assert timed.settings["step"] == grid.settings["step"]
