"""`topdrift exact CASE --at T [T ...] [--json]`: the JSON contract, the folded ranges, the
values against the case's own start and an independent 40-digit reference
(tests/exact_reference.py, quadrature), and the bad-input exits (status 2, one line naming the
value)."""

from __future__ import annotations

import math

import mpmath as mp
import numpy as np
import pytest
from exact_reference import QuadratureTop

from topdrift.benchmarks.cases.library import load_case

SAMPLE_KEYS = {
    "t",
    "theta",
    "phi",
    "psi",
    "phi_turns",
    "psi_turns",
    "axis",
    "quaternion",
    "momentum",
}


def test_json_contract_and_ranges(command_json):
    times = ["0", "0.37", "1234.5", "1e8", "1e12"]
    rc, doc, err = command_json("exact", "looping-nutation", "--at", *times)
    assert rc == 0 and err == ""
    assert set(doc) == {"case", "samples"} and doc["case"] == "looping-nutation"
    assert [s["t"] for s in doc["samples"]] == [float(t) for t in times]
    for s in doc["samples"]:
        assert set(s) == SAMPLE_KEYS
        assert 0.0 <= s["theta"] <= math.pi
        assert -math.pi <= s["phi"] <= math.pi and -math.pi <= s["psi"] <= math.pi
        assert isinstance(s["phi_turns"], int) and isinstance(s["psi_turns"], int)
        assert len(s["axis"]) == 3 and len(s["quaternion"]) == 4 and len(s["momentum"]) == 3
        assert abs(np.linalg.norm(s["axis"]) - 1.0) < 4e-16
        assert abs(np.linalg.norm(s["quaternion"]) - 1.0) < 4e-16
        # the figure axis from the angles: (sin phi sin theta, -cos phi sin theta, cos theta)
        st = math.sin(s["theta"])
        axis = (math.sin(s["phi"]) * st, -math.cos(s["phi"]) * st, math.cos(s["theta"]))
        assert np.allclose(s["axis"], axis, rtol=0, atol=1e-15)
    # spin about 1570 rad/s: psi has turned some 2.5e11 times at 1e12 s
    assert doc["samples"][-1]["psi_turns"] > 10**11


def test_values_are_the_start_and_the_independent_reference(command_json):
    case = load_case("looping-nutation")
    yb = case.body_state()
    rc, doc, _ = command_json("exact", "looping-nutation", "--at", "0", "3.3e5")
    assert rc == 0
    first, later = doc["samples"]
    q0 = yb[:4] / np.linalg.norm(yb[:4])
    q = np.array(first["quaternion"])
    assert min(np.abs(q - q0).max(), np.abs(q + q0).max()) < 2e-15
    assert np.abs(np.array(first["momentum"]) - yb[4:]).max() < 4e-15 * np.linalg.norm(yb[4:])
    p = case.body.params()
    ref = QuadratureTop(p[0], p[2], p[8], yb, "body")
    theta, phi, kp, psi, ks = ref.folded(later["t"])
    with mp.workdps(ref.digits):
        assert abs(float(mp.mpf(later["theta"]) - theta)) <= 2e-15
        assert abs(float(mp.mpf(later["phi"]) - phi)) <= 2e-15
        assert abs(float(mp.mpf(later["psi"]) - psi)) <= 2e-15
    assert (later["phi_turns"], later["psi_turns"]) == (kp, ks)


def test_table_on_a_terminal(command_line):
    rc, out, err = command_line("exact", "cusped-release", "--at", "0", "2.5")
    assert rc == 0 and err == ""
    assert "case cusped-release: exact cusps motion" in out
    assert out.count("t = ") == 2 and "turns" in out and "quaternion" in out


@pytest.mark.parametrize(
    "value, words",
    [
        ("abc", "'abc' is not a number"),
        ("-1", "'-1' is negative"),
        ("nan", "'nan' is not a finite time"),
        ("inf", "'inf' is not a finite time"),
        ("-inf", "'-inf' is not a finite time"),
        ("-1e3", "'-1e3' is negative"),
        ("2e15", "'2e15' is beyond 1e15 s"),
    ],
)
def test_bad_times_exit_2_naming_the_value(command_line, value, words):
    rc, out, err = command_line("exact", "looping-nutation", "--at", "1", value)
    assert rc == 2 and out == ""
    assert err.count("\n") == 1 and words in err and "Traceback" not in err


def test_a_case_without_a_closed_form_exits_2(command_line):
    rc, out, err = command_line("exact", "kovalevskaya", "--at", "1")
    assert rc == 2 and out == ""
    assert err.count("\n") == 1 and "no closed form" in err


def test_unknown_case_and_missing_times_exit_2(command_line):
    rc, _, err = command_line("exact", "no-such-case", "--at", "1")
    assert rc == 2 and err.count("\n") == 1
    rc, _, err = command_line("exact", "looping-nutation")
    assert rc == 2 and "--at" in err
