"""`topdrift describe` and `topdrift cases`: the JSON contracts, the text report, and the numbers
against formulas computed here from the start's Euler angles and rates."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from topdrift.benchmarks.cases.library import library_paths, load_case
from topdrift.benchmarks.cli.entry import main


def _json(capsys, argv):
    assert main(argv) == 0
    out, err = capsys.readouterr()
    assert err == ""
    return json.loads(out)


def test_describe_demo_json_has_the_documented_keys(capsys):
    info = _json(capsys, ["describe", "--demo", "--json"])
    assert {"case", "body", "start", "invariants", "exact"} <= set(info)
    assert info["case"]["name"] == "demo-wheel"
    assert set(info["body"]) == {"mass", "inertia", "com", "gravity"}
    assert len(info["body"]["inertia"]) == 3 and len(info["body"]["com"]) == 3
    start = info["start"]
    assert set(start["angles"]) == {"theta", "phi", "psi"}
    assert set(start["rates"]) == {"theta_rate", "phi_rate", "psi_rate"}
    assert len(start["body"]["q"]) == 4 and len(start["body"]["m"]) == 3
    assert set(start["euler"]) == {"phi", "theta", "psi", "p_phi", "p_theta", "p_psi"}
    assert {"energy", "p_phi", "p_psi"} <= set(info["invariants"])
    assert [p["name"] for p in info["wheel"]["parts"]] == ["rim", "tyre", "hub", "spokes", "axle"]
    assert info["start"]["rates"]["psi_rate"] == pytest.approx(20 * math.pi)  # 600 rpm
    keys = {"theta_min", "theta_max", "nutation_period", "precession_per_period"}
    assert keys | {"mean_precession_rate", "motion"} <= set(info["exact"])
    assert "exact_unavailable" not in info


def test_describe_by_name_and_by_path_agree(capsys):
    by_name = _json(capsys, ["describe", "looping-nutation", "--json"])
    by_path = _json(capsys, ["describe", str(library_paths()["looping-nutation"]), "--json"])
    by_name["case"].pop("path")
    by_path["case"].pop("path")
    assert by_name == by_path


@pytest.mark.parametrize("name", ["demo-wheel", "looping-nutation", "sleeping-above"])
def test_invariants_match_the_lagrange_formulas(capsys, name):
    # H = I1/2 (thetadot^2 + phidot^2 sin^2) + I3/2 (psidot + phidot cos)^2 + M g l cos theta,
    # p_psi = I3 (psidot + phidot cos theta), p_phi = I1 phidot sin^2 theta + p_psi cos theta
    # (Goldstein, Classical Mechanics, sec. 5.7) [from memory], evaluated here from the case's
    # Euler rates.
    info = _json(capsys, ["describe", name, "--json"])
    i1, _, i3 = info["body"]["inertia"]
    mgl = info["body"]["mass"] * info["body"]["gravity"] * info["body"]["com"][2]
    a, r = info["start"]["angles"], info["start"]["rates"]
    th, phid, thd, psid = a["theta"], r["phi_rate"], r["theta_rate"], r["psi_rate"]
    w3 = psid + phid * math.cos(th)
    energy = 0.5 * i1 * (thd**2 + (phid * math.sin(th)) ** 2) + 0.5 * i3 * w3**2
    energy += mgl * math.cos(th)
    p_psi = i3 * w3
    p_phi = i1 * phid * math.sin(th) ** 2 + p_psi * math.cos(th)
    inv = info["invariants"]
    assert inv["energy"] == pytest.approx(energy, rel=1e-13)
    assert inv["p_psi"] == pytest.approx(p_psi, rel=1e-13)
    assert inv["p_phi"] == pytest.approx(p_phi, rel=1e-12)
    e = info["start"]["euler"]
    assert e["p_phi"] == pytest.approx(p_phi, rel=1e-12)
    assert e["p_theta"] == pytest.approx(i1 * thd, abs=1e-15)


def test_non_lagrange_case_has_no_exact_motion(capsys):
    info = _json(capsys, ["describe", "kovalevskaya", "--json"])
    assert info["exact"] is None and "exact_unavailable" not in info
    assert info["start"]["euler"] is None and info["start"]["euler_unavailable"]
    assert info["kind"] == "kovalevskaya"
    assert info["invariants"]["kovalevskaya"] > 0


def _cubic(info):
    """Turning points and nutation period from f(u) = (alpha - beta u)(1 - u^2) - (b - a u)^2
    (Goldstein, Classical Mechanics, sec. 5.7) [from memory]: roots by numpy, period 2 int du /
    sqrt(f) by scipy quadrature with the endpoint singularities as weights."""
    from scipy.integrate import quad

    i1, _, i3 = info["body"]["inertia"]
    mgl = info["body"]["mass"] * info["body"]["gravity"] * info["body"]["com"][2]
    inv = info["invariants"]
    alpha = 2 * (inv["energy"] - inv["p_psi"] ** 2 / (2 * i3)) / i1
    beta, a, b = 2 * mgl / i1, inv["p_psi"] / i1, inv["p_phi"] / i1
    u1, u2, u3 = np.sort(np.roots([beta, -(alpha + a * a), 2 * a * b - beta, alpha - b * b]).real)
    # f = beta (u - u1)(u2 - u)(u3 - u): integrate 1/sqrt(beta (u3 - u)) with weight
    # (u - u1)^-1/2 (u2 - u)^-1/2.
    half, _ = quad(
        lambda u: 1 / math.sqrt(beta * (u3 - u)), u1, u2, weight="alg", wvar=(-0.5, -0.5)
    )
    return math.acos(u2), math.acos(u1), 2 * half


@pytest.mark.parametrize(
    "name", ["demo-wheel", "looping-nutation", "cusped-release", "pole-passage", "sleeping-below"]
)
def test_exact_summary_against_the_cubic(capsys, name):
    info = _json(capsys, ["describe", name, "--json"])
    theta_min, theta_max, period = _cubic(info)
    x = info["exact"]
    assert x["theta_min"] == pytest.approx(theta_min, abs=1e-9)
    assert x["theta_max"] == pytest.approx(theta_max, abs=1e-9)
    assert x["nutation_period"] == pytest.approx(period, rel=1e-8)
    if name == "pole-passage":
        assert math.degrees(x["theta_min"]) < 2.0  # measured 1.0033 deg


def test_describe_text_is_readable(capsys):
    assert main(["describe", "--demo"]) == 0
    out, _ = capsys.readouterr()
    for words in (
        "case demo-wheel",
        "I1",
        "kg m^2",
        "wheel parts",
        "spokes",
        "body form",
        "euler form",
        "invariants",
        "energy",
        "600 rpm",
    ):
        assert words in out
    assert "exact motion" in out


def test_describe_start_on_the_vertical(tmp_path, capsys):
    # theta = 0 exactly: no Euler form, still a valid body-form start and valid JSON (no NaN).
    text = load_case("sleeping-above").toml_text.replace('theta = "1 deg"', "theta = 0.0")
    path = tmp_path / "upright.toml"
    path.write_text(text, encoding="utf-8")
    info = _json(capsys, ["describe", str(path), "--json"])
    assert info["start"]["euler"] is None and "vertical" in info["start"]["euler_unavailable"]
    assert info["invariants"]["p_phi"] == pytest.approx(info["invariants"]["p_psi"], rel=1e-15)


@pytest.mark.parametrize("argv", [["describe"], ["describe", "demo-wheel", "--demo"]])
def test_describe_needs_one_case(capsys, argv):
    assert main(argv) == 2
    out, err = capsys.readouterr()
    assert out == "" and err.count("\n") == 1


def test_cases_json_lists_the_library(capsys):
    info = _json(capsys, ["cases", "--json"])
    rows = {r["name"]: r for r in info["cases"]}
    assert set(rows) == set(library_paths())
    for r in rows.values():
        assert set(r) == {"name", "description", "path", "exact", "field"}
        assert isinstance(r["exact"], bool)
    assert rows["demo-wheel"]["exact"] and rows["pole-passage"]["exact"]
    assert not rows["kovalevskaya"]["exact"] and not rows["free-asymmetric"]["exact"]
    assert main(["cases"]) == 0
    out, _ = capsys.readouterr()
    assert "demo-wheel" in out and "chaotic-asymmetric" in out


def test_exact_refusal_is_reported(capsys, monkeypatch):
    from topdrift.models import exact

    def refuse(*args, **kwargs):
        raise exact.ExactUnavailable("theta: a test refusal")

    monkeypatch.setattr(exact.LagrangeTop, "from_state", classmethod(refuse))
    info = _json(capsys, ["describe", "--demo", "--json"])
    assert info["exact"] is None and info["exact_unavailable"] == "theta: a test refusal"
    assert main(["describe", "--demo"]) == 0
    out, _ = capsys.readouterr()
    assert "exact motion  unavailable: theta: a test refusal" in out


def test_describe_states_the_reference_of_a_case_with_no_exact_solution(
    capsys, tmp_path, monkeypatch
):
    from topdrift.benchmarks.run.reference_cache import CACHE_ENV

    monkeypatch.setenv(CACHE_ENV, str(tmp_path))
    info = _json(capsys, ["describe", "chaotic-asymmetric", "--json"])
    assert info["exact"] is None
    assert info["reference"] == {
        "built": False,
        "exact": False,  # its provider integrates (taylor-dd): no closed form for this top
        "cache": str(tmp_path),
        "how": "built on first use by `topdrift pick`, or by `topdrift describe CASE --reference`",
    }
    info = _json(capsys, ["describe", "chaotic-asymmetric", "--json", "--reference"])
    r = info["reference"]
    assert r["built"] and not r["cached"] and r["provider"] == "taylor-dd"
    assert (r["horizon"], r["samples"]) == (40.0, 4001)  # the case's own
    assert set(r["accuracy"]) == {"axis", "attitude", "momentum"}
    # the chaotic top amplifies round-off ~1e20 over 40 s: measured 6.3e-14 (docs/references.md)
    assert 1e-14 < r["accuracy"]["axis"] < 1e-12
    assert main(["describe", "chaotic-asymmetric"]) == 0
    out = capsys.readouterr().out
    assert "reference (no exact solution)" in out
    assert f"verified accuracy, figure axis   {r['accuracy']['axis']:.2g}" in out
    assert "(read)" in out
    # a Lagrange top has its exact solution and no such section
    assert main(["describe", "looping-nutation"]) == 0
    assert "reference (no exact solution)" not in capsys.readouterr().out
