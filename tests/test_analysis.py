"""Analysis of run records: Pareto fronts, drift-law classes, the cheapest method per target."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from handmade_store import build

from topdrift.benchmarks.choose import analysis
from topdrift.benchmarks.run.metrics import drift_exponent
from topdrift.benchmarks.store.reader import load_records


def rec(run_id, method, error, cost, status="ok", evals=None, case="c", **settings):
    return {
        "run_id": run_id,
        "case": case,
        "method": method,
        "settings": settings or {"step": 0.1},
        "status": status,
        "metrics": {
            "axis_angle_max": error,
            "energy_rel_max": error,
            "wall_s": cost,
            "rhs_evals": evals if evals is not None else int(cost * 1000),
        },
    }


def dominates(a, b):
    return a.cost <= b.cost and a.error <= b.error and (a.cost < b.cost or a.error < b.error)


def test_front_is_exactly_the_set_of_non_dominated_points():
    # Definition of Pareto optimality (common practice), checked by brute force on random sets.
    rng = np.random.default_rng(7)
    for trial in range(40):
        n = int(rng.integers(1, 30))
        costs = rng.choice([1.0, 2.0, 3.0, 5.0, 8.0], n) if trial % 2 else rng.lognormal(0, 1, n)
        errs = rng.choice([1e-3, 1e-4, 1e-5], n) if trial % 3 == 0 else rng.lognormal(-9, 2, n)
        pts = [
            analysis.Point(float(c), float(e), f"r{i}", ("m", ()), {})
            for i, (c, e) in enumerate(zip(costs, errs, strict=True))
        ]
        front = analysis.pareto(pts)
        for p in front:
            assert not any(dominates(q, p) for q in pts)
        on = {(p.cost, p.error) for p in front}
        for p in pts:
            if (p.cost, p.error) not in on:
                assert any(dominates(q, p) for q in front)
        assert len(on) == len(front)  # duplicates kept once
        for a, b in itertools.pairwise(front):
            assert a.cost < b.cost and a.error > b.error


def test_frontiers_per_method_and_across_methods_skip_bad_runs():
    records = [
        rec("a1", "alpha", 1e-2, 1.0),
        rec("a2", "alpha", 1e-4, 2.0),
        rec("a3", "alpha", 1e-3, 3.0),  # dominated by a2
        rec("b1", "beta", 1e-3, 0.5),
        rec("b2", "beta", 1e-6, 4.0),
        rec("b3", "beta", 1e-9, 0.1, status="diverged"),  # not ok: never on a front
        rec("b4", "beta", None, 0.2),  # no axis error (no exact solution): left out
        rec("x1", "alpha", 1e-12, 0.01, case="other"),  # other case
    ]
    fr = analysis.frontiers(records, "c", "axis", "wall")
    alpha = ("alpha", ())
    beta = ("beta", ())
    assert [p.run_id for p in fr.per_series[alpha]] == ["a1", "a2"]
    assert [p.run_id for p in fr.points[alpha]] == ["a1", "a2", "a3"]
    assert [p.run_id for p in fr.per_series[beta]] == ["b1", "b2"]
    assert [p.run_id for p in fr.overall] == ["b1", "a2", "b2"]


def test_series_split_by_form_and_labelled_by_it():
    records = [
        rec("e", "leap", 1e-3, 1.0, step=0.1, form="euler"),
        rec("b", "leap", 1e-4, 1.0, step=0.1, form="body"),
        rec("r", "rk4", 1e-4, 1.0, step=0.1, form="body"),
    ]
    labels = analysis.series_labels(records)
    assert sorted(labels.values()) == ["leap [body]", "leap [euler]", "rk4"]
    fr = analysis.frontiers(records, "c")
    assert len(fr.per_series) == 3


@pytest.mark.parametrize(
    ("p", "law"),
    [
        (0.0, "bounded"),
        (0.249, "bounded"),
        (0.25, "random walk"),
        (0.5, "random walk"),
        (0.749, "random walk"),
        (0.75, "linear"),
        (1.0, "linear"),
        (1.499, "linear"),
        (1.5, "faster than linear"),
        (2.0, "faster than linear"),
        (None, "unknown"),
        (float("nan"), "unknown"),
        ("x", "unknown"),
    ],
)
def test_drift_law_thresholds(p, law):
    assert analysis.drift_law(p) == law


def test_drift_laws_of_known_growths():
    # Through the runner's own exponent fit: a bounded oscillation, a random walk (its running
    # maximum grows like sqrt(n), Feller, An Introduction to Probability Theory, vol. 1, ch. III,
    # from memory) and a linear drift must land in their classes.
    t = np.linspace(0.0, 1e4, 20001)
    rng = np.random.default_rng(3)
    walk = np.abs(np.concatenate(([0.0], np.cumsum(rng.standard_normal(t.size - 1)))))
    cases = {
        "bounded": 1e-6 * np.abs(np.sin(t)),
        "random walk": 1e-16 * walk,
        "linear": 1e-9 * t * (1.0 + 0.1 * np.sin(t)),
    }
    for law, e in cases.items():
        assert analysis.drift_law(drift_exponent(t, e)) == law, law
    assert analysis.drift_law(drift_exponent(t[:2], cases["linear"][:2])) == "unknown"


def power_law_records(c_a, p_a, c_b, p_b):
    # A method of fixed order p in its asymptotic range: error = C * cost^-p (common practice).
    out = []
    for name, c, p in (("lo", c_a, p_a), ("hi", c_b, p_b)):
        for k, cost in enumerate((1.0, 10.0, 100.0, 1000.0)):
            out.append(rec(f"{name}{k}", name, c * cost**-p, cost))
    return out


def test_cost_to_reach_is_exact_for_a_power_law():
    records = power_law_records(1e-1, 2.0, 1e-1, 4.0)
    fr = analysis.frontiers(records, "c")
    for target in (3e-3, 1e-5, 4.4e-7):
        for key, (c, p) in {("lo", ()): (1e-1, 2.0), ("hi", ()): (1e-1, 4.0)}.items():
            got = analysis.cost_to_reach(fr.per_series[key], target)
            if c * 1000.0**-p > target:
                assert got is None
            else:
                assert got[1] in ("interpolated", "at run")
                assert got[0] == pytest.approx((c / target) ** (1.0 / p), rel=1e-12)


def test_cost_to_reach_edges():
    front = analysis.pareto(
        [
            analysis.Point(1.0, 1e-3, "a", ("m", ()), {}),
            analysis.Point(2.0, 1e-5, "b", ("m", ()), {}),
            analysis.Point(4.0, 0.0, "c", ("m", ()), {}),
        ]
    )
    assert analysis.cost_to_reach(front, 1e-2) == (1.0, "at most")
    assert analysis.cost_to_reach(front, 1e-3) == (1.0, "at run")
    assert analysis.cost_to_reach(front, 1e-5) == (2.0, "at run")
    assert analysis.cost_to_reach(front, 1e-9) == (4.0, "at most")  # next error is exactly 0
    assert analysis.cost_to_reach(front[:2], 1e-9) is None
    wide = [
        analysis.Point(1.0, 1e-2, "a", ("m", ()), {}),
        analysis.Point(1000.0, 1e-8, "b", ("m", ()), {}),
    ]
    assert analysis.cost_to_reach(wide, 1e-5) == (
        pytest.approx(10.0**1.5, rel=1e-12),
        "interpolated over 3.0 decades",
    )
    assert analysis.cost_to_reach([], 1.0) is None


def test_cheapest_switches_where_the_power_laws_cross():
    # lo: e = 1e-2 / cost^2, hi: e = 1 / cost^4. They cross at cost^2 = 100, cost = 10,
    # error 1e-4: above that error lo is cheaper, below it hi.
    records = power_law_records(1e-2, 2.0, 1.0, 4.0)
    fr = analysis.frontiers(records, "c")
    rows = analysis.cheapest(fr, [1e-3, 1e-6, 1e-11, 1e-20])
    assert rows[0]["label"] == "lo"
    assert rows[0]["cost"] == pytest.approx(math.sqrt(10.0), rel=1e-12)
    assert rows[1]["label"] == "hi"
    assert rows[1]["cost"] == pytest.approx(1e6**0.25, rel=1e-12)
    assert [lab for lab, _, _ in rows[1]["ranking"]] == ["hi", "lo"]
    assert rows[2]["label"] == "hi" and rows[2]["ranking"][0][0] == "hi"
    assert len(rows[2]["ranking"]) == 1  # lo stops at 1e-8
    assert rows[3]["label"] is None and rows[3]["ranking"] == []


def test_default_targets_are_decades_inside_the_front():
    records = power_law_records(1e-2, 2.0, 1.0, 4.0)
    fr = analysis.frontiers(records, "c")
    targets = analysis.default_targets(fr)
    errs = [p.error for p in fr.overall]
    assert targets == [10.0**k for k in range(-2, -13, -1)]
    assert max(targets) <= max(errs) and min(targets) >= min(errs)
    assert all(r["label"] is not None for r in analysis.cheapest(fr, targets))


def test_records_from_a_handmade_store(tmp_path):
    path = build(tmp_path / "runs.h5", cases=("one", "two"))
    records = load_records(path)
    assert analysis.cases(records) == ["one", "two"]
    one = analysis.case_records(records, "one")
    assert len(one) == 6
    assert {r["status"] for r in one} == {"ok", "diverged"}
    assert one[0]["settings"]["form"] == "euler"  # the form attribute joins the settings
    fr = analysis.frontiers(records, "one", "axis", "evals")
    assert sum(len(v) for v in fr.points.values()) == 5  # the diverged run is left out
    assert analysis.default_error(records, "one") == "axis"
