"""Counted and ranked as users count: force (torque) evaluations apart from free flows, shown
beside wall time; a ranking by a quantity that a method keeps by construction in its form leaves
that method out and says so; the report marks such numbers; figures that would mislead say so
(aliasing) or draw the error instead of a filled disc (a long axis path)."""

import math

import numpy as np
import pytest

from topdrift.benchmarks.cases.library import load_case
from topdrift.benchmarks.choose import analysis, plots
from topdrift.benchmarks.choose.recommend import pick
from topdrift.benchmarks.choose.report import KEPT_MARK, write_report
from topdrift.benchmarks.cli.entry import main
from topdrift.benchmarks.store.reader import load_records


@pytest.fixture(scope="module")
def runs_file(tmp_path_factory):
    """leapfrog-s4, rk4 and gauss4 on an asymmetric heavy body (body form), two steps each."""
    path = tmp_path_factory.mktemp("ranked") / "runs.h5"
    for method, steps in (
        ("leapfrog-s4", ("0.02", "0.01")),
        ("rk4", ("0.01", "0.005")),
        ("gauss4", ("0.02", "0.01")),
    ):
        for h in steps:
            rc = main(
                [
                    "run",
                    "chaotic-asymmetric",
                    "--method",
                    method,
                    "--step",
                    h,
                    "--horizon",
                    "2",
                    "--samples",
                    "201",
                    "--out",
                    str(path),
                ]
            )
            assert rc == 0
    return path


def test_force_evaluations_are_the_kicks_of_a_splitting_and_every_rhs_otherwise(runs_file):
    recs = {(r["method"], r["settings"]["step"]): r["metrics"] for r in load_records(runs_file)}
    s4 = recs[("leapfrog-s4", 0.01)]
    # 5 kicks and 5 free flows per step (merged half kicks), one closing kick per sample
    assert s4["steps"] == 200
    assert s4["force_evals"] == 5 * 200 + 200
    assert s4["rhs_evals"] == 10 * 200 + 200
    rk = recs[("rk4", 0.01)]
    assert rk["force_evals"] == rk["rhs_evals"] == 4 * 200


def test_energy_ranking_leaves_out_a_method_that_keeps_the_energy(runs_file, tmp_path):
    records = load_records(runs_file)
    fr = analysis.frontiers(records, "chaotic-asymmetric", "energy", "wall")
    assert analysis.kept_series(fr) == ["gauss4"]  # body form: energy kept to round-off
    rows = analysis.cheapest(fr, analysis.default_targets(fr))
    assert rows and all("gauss4" not in [lab for lab, _, _ in row["ranking"]] for row in rows)
    # the targets come from the ranked methods, not from gauss4's round-off
    assert min(analysis.default_targets(fr)) > 1e-13
    report = write_report(str(runs_file), records, tmp_path / "rep", ["chaotic-asymmetric"])
    text = report.read_text()
    assert "Not ranked by this error: gauss4, which keep the energy by construction" in text
    assert "cheapest by force evaluations" in text
    # the runs table marks gauss4's energy error as kept, and p_psi is no invariant here: "-"
    gauss_rows = [ln for ln in text.splitlines() if ln.startswith("| gauss4 |")]
    header = next(ln for ln in text.splitlines() if ln.startswith("| method |")).split("|")
    energy_col = [c.strip() for c in header].index("energy err")
    p_psi_col = [c.strip() for c in header].index("p_psi err")
    assert gauss_rows and all(KEPT_MARK in ln.split("|")[energy_col] for ln in gauss_rows)
    assert all(ln.split("|")[p_psi_col].strip() == "-" for ln in gauss_rows)
    assert (
        "force evals"
        in text.splitlines()[
            [i for i, ln in enumerate(text.splitlines()) if ln.startswith("| method |")][0]
        ]
    )


def test_pick_by_energy_does_not_rank_a_method_that_keeps_it():
    case = load_case("chaotic-asymmetric")
    result = pick(
        case, 1e-8, metric="energy", horizon=1.0, samples=101, methods=["gauss4", "leapfrog-s4"]
    )
    assert [r["method"] for r in result["ranking"]] == ["leapfrog-s4"]
    assert result["ranking"][0]["force_evals"] > 0
    (gone,) = result["unreached"]
    assert gone["method"] == "gauss4" and "keeps the energy by construction" in gone["reason"]


def test_summary_shows_force_evaluations_beside_wall_time(runs_file, capsys):
    assert main(["summary", str(runs_file)]) == 0
    head = capsys.readouterr().out.splitlines()[0].split()
    assert {"forces", "wall", "dK/K"} <= set(head)


def test_aliasing_warning_names_the_interval_and_the_period():
    t = np.linspace(0.0, 10.0, 11)  # every 1 s
    run = {"t": t, "record": {"metrics": {"fastest_period": 0.5}}}
    text = plots.aliasing_warning([run])
    assert "samples every 1 s" in text and "0.5 s" in text and "aliased" in text
    run["record"]["metrics"]["fastest_period"] = 2.5
    assert plots.aliasing_warning([run]) == ""


def test_error_path_components():
    # An axis on the horizon at azimuth 0 (the exact one), and one turned a little further round
    # the vertical and a little down: the error path shows both, in rad.
    ref = np.array([[1.0, 0.0, 0.0]])
    d_az, d_tilt = 1e-4, 2e-4
    a = np.array(
        [[math.cos(d_az) * math.cos(d_tilt), math.sin(d_az) * math.cos(d_tilt), -math.sin(d_tilt)]]
    )
    ((along, tilt),) = plots.error_path(a, ref)
    assert along == pytest.approx(d_az, rel=1e-3) and tilt == pytest.approx(d_tilt, rel=1e-3)
    # an axis on the vertical has no precession direction: any horizontal one, no NaN
    assert np.all(
        np.isfinite(plots.error_path(np.array([[0.0, 1e-3, 1.0]]), np.array([[0.0, 0.0, 1.0]])))
    )


def test_a_long_axis_path_is_drawn_as_first_turn_and_error_path(tmp_path, capsys):
    path = tmp_path / "long.h5"
    assert (
        main(
            [
                "run",
                "looping-nutation",
                "--method",
                "leapfrog",
                "--step",
                "1e-3",
                "--out",
                str(path),
            ]
        )
        == 0
    )
    (rec,) = load_records(path)
    from topdrift.benchmarks.store.reader import load_series

    s = load_series(str(path), rec["run_id"])
    turns = plots.path_turns(plots.axis_from_euler(s["exact_euler"]))[-1]
    assert turns > plots.LONG_PATH_TURNS  # 20 s of looping-nutation: about 12 turns
    out = tmp_path / "axis.png"
    assert main(["plot", str(path), "--kind", "axis-path", "--out", str(out)]) == 0
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
