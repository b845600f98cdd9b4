"""Case files: the library parses and its cases are what they say; bad files give one line naming
the key, exit 2 and write nothing; units convert as defined."""

from __future__ import annotations

import math
import subprocess

import numpy as np
import pytest
from run_files import topdrift_cmd

from topdrift.benchmarks.cases.library import find_case, library_cases, library_paths, load_case
from topdrift.benchmarks.cases.schema import parse_case, read_case
from topdrift.benchmarks.cases.units import to_si
from topdrift.benchmarks.cli.entry import main
from topdrift.benchmarks.errors import UserError
from topdrift.models import FORM_BODY, FORM_EULER, to_body

EXPECTED = {
    "demo-wheel",
    "looping-nutation",
    "cusped-release",
    "pole-passage",
    "sleeping-above",
    "sleeping-below",
    "kovalevskaya",
    "chaotic-asymmetric",
    "free-asymmetric",
}


# ----------------------------------------------------------------------------- units


@pytest.mark.parametrize(
    ("text", "kind", "si"),
    [
        # 1 rev = 2 pi rad; rpm = rev/min; the degree is pi/180 rad (ISO 80000-3, from memory);
        # common practice.
        ("600 rpm", "rate", 20 * math.pi),
        ("600 rev/min", "rate", 20 * math.pi),
        ("2 rev/s", "rate", 4 * math.pi),
        ("30 deg/s", "rate", math.pi / 6),
        ("3 rad/s", "rate", 3.0),
        ("-1.5e1rad/s", "rate", -15.0),
        ("70 deg", "angle", 70 * math.pi / 180),
        ("0.5 rad", "angle", 0.5),
        ("250 mrad", "angle", 0.25),
        ("0.25 rev", "angle", math.pi / 2),
        (".5 deg", "angle", math.pi / 360),
        (1.25, "angle", 1.25),
        (7, "rate", 7.0),
    ],
)
def test_units_convert_to_si(text, kind, si):
    assert to_si(text, kind) == pytest.approx(si, rel=1e-15)


def test_case_reads_units_on_every_start_key():
    case = parse_case(_case_text(start_extra={"psi_rate": '"600 rpm"', "theta": '"70 deg"'}))
    assert case.start.psi_rate == pytest.approx(20 * math.pi, rel=1e-15)  # common practice
    assert case.start.theta == pytest.approx(math.radians(70), rel=1e-15)
    assert parse_case(_case_text(start_extra={"theta": '"180 deg"'})).start.theta == math.pi


# ----------------------------------------------------------------------------- the library


def test_every_library_case_parses_and_is_named_after_its_file():
    paths = library_paths()
    assert EXPECTED <= set(paths)
    for case in library_cases():
        assert case.name == case.path.stem
        assert len(case.description) > 80  # says what it tests
        assert case.toml_text == case.path.read_text(encoding="utf-8")
        assert case.samples >= 2 and case.horizon > 0
        t = case.times()
        assert t[0] == 0.0 and t[-1] == case.horizon and len(t) == case.samples
        yb = case.state("body")
        assert yb.shape == (7,) and np.all(np.isfinite(yb))
        if case.body.lagrange_top:
            # The two start forms describe one state.
            np.testing.assert_allclose(to_body(case.state(FORM_EULER)), yb, rtol=0, atol=1e-14)
            assert np.array_equal(case.state(FORM_BODY), yb)
        else:
            with pytest.raises(UserError, match="euler form needs"):
                case.state("euler")


def test_library_bodies_are_the_kinds_they_claim():
    c = {case.name: case for case in library_cases()}
    assert c["demo-wheel"].wheel is not None and c["demo-wheel"].body.lagrange_top
    assert c["kovalevskaya"].body.kovalevskaya
    free = c["free-asymmetric"].body
    assert free.com == (0.0, 0.0, 0.0) and len(set(free.inertia)) == 3
    # Spin about the intermediate axis (Euler's equations: unstable there; common practice).
    i1, i2, i3 = free.inertia
    assert sorted(free.inertia)[1] == i2
    chaos = c["chaotic-asymmetric"].body
    assert len(set(chaos.inertia)) == 3 and all(x != 0.0 for x in chaos.com)


def _threshold_ratio(case):
    # Sleeping-top criterion p_psi^2 > 4 I1 M g l (Goldstein, Classical Mechanics, sec. 5.7;
    # Landau and Lifshitz, Mechanics, sec. 35, problem; from memory).
    i1 = case.body.inertia[0]
    p_psi = case.state("body")[6]
    return p_psi**2 / (4 * i1 * case.body.mgl)


def test_sleeping_cases_straddle_the_threshold():
    above = _threshold_ratio(load_case("sleeping-above"))
    below = _threshold_ratio(load_case("sleeping-below"))
    assert 1.0 < above < 1.1
    assert 0.9 < below < 1.0
    for name in ("sleeping-above", "sleeping-below"):
        theta = load_case(name).start.theta
        assert 0.0 < theta < math.radians(2)  # a small tilt off the vertical


def _scipy_motion(case, horizon, n=40001):
    """Integrate the Euler-Poisson equations with scipy's DOP853 (a plain Python right-hand side
    written here, independent of the project's kernels); return t, theta(t), axis azimuth(t)."""
    from scipy.integrate import solve_ivp

    p = case.body.params()
    i1, i2, i3 = p[0], p[1], p[2]
    cx, cy, cz = p[6], p[7], p[8]

    def f(t, y):
        q0, q1, q2, q3, m1, m2, m3 = y
        w1, w2, w3 = m1 / i1, m2 / i2, m3 / i3
        g1 = 2 * (q1 * q3 - q0 * q2)
        g2 = 2 * (q2 * q3 + q0 * q1)
        g3 = q0 * q0 - q1 * q1 - q2 * q2 + q3 * q3
        return [
            0.5 * (-q1 * w1 - q2 * w2 - q3 * w3),
            0.5 * (q0 * w1 + q2 * w3 - q3 * w2),
            0.5 * (q0 * w2 - q1 * w3 + q3 * w1),
            0.5 * (q0 * w3 + q1 * w2 - q2 * w1),
            m2 * w3 - m3 * w2 + (g2 * cz - g3 * cy),
            m3 * w1 - m1 * w3 + (g3 * cx - g1 * cz),
            m1 * w2 - m2 * w1 + (g1 * cy - g2 * cx),
        ]

    t = np.linspace(0, horizon, n)
    sol = solve_ivp(f, (0, horizon), case.state("body"), "DOP853", t, rtol=1e-11, atol=1e-13)
    q = sol.y[:4] / np.linalg.norm(sol.y[:4], axis=0)
    theta = np.arccos(np.clip(q[0] ** 2 - q[1] ** 2 - q[2] ** 2 + q[3] ** 2, -1, 1))
    ax = 2 * (q[1] * q[3] + q[0] * q[2])
    ay = 2 * (q[2] * q[3] - q[0] * q[1])
    return t, theta, np.unwrap(np.arctan2(ay, ax)), sol


def test_pole_case_passes_within_two_degrees_of_the_vertical():
    case = load_case("pole-passage")
    _, theta, _, _ = _scipy_motion(case, 0.3)
    theta_min = math.degrees(theta.min())
    assert theta_min < 2.0  # measured: 1.0033 deg
    # The Euler-angle roots of the cubic f(u) (Goldstein sec. 5.7) give the same turning point.
    u2 = _cubic_roots(case)[1]
    assert math.degrees(math.acos(u2)) == pytest.approx(theta_min, abs=1e-3)


def _cubic_roots(case):
    """Roots of f(u) = (alpha - beta u)(1 - u^2) - (b - a u)^2 (Goldstein, Classical Mechanics,
    sec. 5.7), from the start's energy and momenta computed here from the Euler rates."""
    s = case.start
    i1, _, i3 = case.body.inertia
    mgl = case.body.mgl
    w3 = s.psi_rate + s.phi_rate * math.cos(s.theta)
    p_psi = i3 * w3
    p_phi = i1 * s.phi_rate * math.sin(s.theta) ** 2 + p_psi * math.cos(s.theta)
    e_prime = 0.5 * i1 * (s.theta_rate**2 + (s.phi_rate * math.sin(s.theta)) ** 2)
    e_prime += mgl * math.cos(s.theta)
    alpha, beta, a, b = 2 * e_prime / i1, 2 * mgl / i1, p_psi / i1, p_phi / i1
    r = np.roots([beta, -(alpha + a * a), 2 * a * b - beta, alpha - b * b])
    return np.sort(r.real)


def test_looping_case_loops_and_cusped_case_has_cusps():
    # Looping: phidot = (b - a u) / (1 - u^2) changes sign inside [u1, u2] (Goldstein sec. 5.7).
    loop = load_case("looping-nutation")
    u1, u2, _ = _cubic_roots(loop)
    i1, _, i3 = loop.body.inertia
    y = loop.state("euler")
    b_over_a = y[3] / y[5]
    assert u1 < b_over_a < u2
    _, _, az, _ = _scipy_motion(loop, 0.2, n=4001)
    d = np.diff(az)
    assert (d > 0).any() and (d < 0).any()
    # Cusps: the start is the upper turning point u2 = b/a (no precession, no nutation rate).
    cusp = load_case("cusped-release")
    u1, u2, _ = _cubic_roots(cusp)
    assert u2 == pytest.approx(math.cos(cusp.start.theta), rel=1e-9) and u1 < u2


def test_chaotic_case_separates_exponentially():
    # Two starts 1e-9 rad apart: in a regular motion the gap grows about linearly; here it grows
    # by orders of magnitude (measured: 5e-10 -> 4e-4 in 12 s, about e^1.1 per second).
    case = load_case("chaotic-asymmetric")
    other = parse_case(
        case.toml_text.replace('theta = "70 deg"', 'theta = "70.0000000573 deg"'), "x.toml"
    )
    assert other.start.theta - case.start.theta == pytest.approx(1e-9, rel=1e-2)
    _, _, _, a = _scipy_motion(case, 12.0, n=7)
    _, _, _, b = _scipy_motion(other, 12.0, n=7)
    gap = np.linalg.norm(a.y - b.y, axis=0)
    assert gap[-1] > 1e4 * gap[0]
    assert np.all(np.diff(np.log(gap[1:])) > 0)  # growing at each sample


def test_path_wins_over_library_name(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "demo-wheel").write_text(_case_text(name="local"), encoding="utf-8")
    assert load_case("demo-wheel").name == "local"
    path, label = find_case("demo-wheel")
    assert label == "demo-wheel"
    assert load_case("demo-wheel.toml").name == "demo-wheel"  # library name with its suffix


def test_unknown_name_lists_the_library():
    with pytest.raises(UserError) as err:
        load_case("no-such-case")
    msg = str(err.value)
    assert "no-such-case" in msg and "demo-wheel" in msg and "pole-passage" in msg


def test_wheel_demo_defaults_and_overrides():
    base = parse_case(_case_text(body=False, wheel="demo = true"))
    heavier = parse_case(_case_text(body=False, wheel="demo = true\nrim_mass = 0.60"))
    assert heavier.body.mass - base.body.mass == pytest.approx(0.60 - 0.48, rel=1e-12)
    assert base.body == load_case("demo-wheel").body


# ----------------------------------------------------------------------------- bad files


def _case_text(name="t", body=True, wheel=None, start_extra=None, top_extra=""):
    start = {
        "theta": "0.5",
        "phi": "0.0",
        "psi": "0.0",
        "theta_rate": "0.0",
        "phi_rate": "0.0",
        "psi_rate": "100.0",
    }
    start.update(start_extra or {})
    lines = [
        f'name = "{name}"',
        'description = "a test case"',
        "horizon = 1.0",
        "samples = 11",
        top_extra,
    ]
    if body:
        lines += ["[body]", "mass = 1.0", "inertia = [0.02, 0.02, 0.01]", "com = [0, 0, 0.05]"]
    if wheel is not None:
        lines += ["[wheel]", wheel]
    lines += ["[start]"] + [f"{k} = {v}" for k, v in start.items() if v is not None]
    return "\n".join(lines) + "\n"


BAD = [
    ("broken-toml", b'name = "x\nhorizon = 1\n', "not valid TOML"),
    ("unknown-top-key", _case_text(top_extra="colour = 3").encode(), "colour: unknown key"),
    (
        "unknown-start-key",
        _case_text(start_extra={"spin": "3"}).encode(),
        "start.spin: unknown key",
    ),
    ("missing-key", _case_text(start_extra={"psi": None}).encode(), "start.psi: missing"),
    ("missing-top", _case_text().replace("horizon = 1.0\n", "").encode(), "horizon: missing"),
    ("negative-mass", _case_text().replace("mass = 1.0", "mass = -1.0").encode(), "body.mass:"),
    (
        "triangle",
        _case_text().replace("[0.02, 0.02, 0.01]", "[0.01, 0.01, 0.05]").encode(),
        "body.inertia[2]: 0.05 exceeds the sum of the other two",
    ),
    (
        "unknown-unit",
        _case_text(start_extra={"theta_rate": '"3 furlong/s"'}).encode(),
        "start.theta_rate: unknown unit 'furlong/s'",
    ),
    (
        "rate-unit-on-angle",
        _case_text(start_extra={"theta": '"3 rpm"'}).encode(),
        "start.theta: 'rpm' is a unit of rate",
    ),
    ("not-utf8", b'name = "caf\xe9"\n', "not UTF-8"),
    ("empty", b"", "empty file"),
    ("blank", b"  \n\n", "empty file"),
    ("samples-one", _case_text().replace("samples = 11", "samples = 1").encode(), "samples:"),
    ("samples-float", _case_text().replace("samples = 11", "samples = 10.0").encode(), "samples:"),
    ("nan-horizon", _case_text().replace("horizon = 1.0", "horizon = nan").encode(), "horizon:"),
    ("theta-range", _case_text(start_extra={"theta": "4.0"}).encode(), "start.theta: must be"),
    (
        "short-inertia",
        _case_text().replace("[0.02, 0.02, 0.01]", "[0.02, 0.02]").encode(),
        "body.inertia: expected an array of 3",
    ),
    ("both-body-and-wheel", _case_text(wheel="demo = true").encode(), "body: give exactly one"),
    ("neither", _case_text(body=False).encode(), "body: give exactly one"),
    (
        "wheel-field",
        _case_text(body=False, wheel="demo = true\nspoke_count = 31").encode(),
        "wheel.spoke_count: must be an even number",
    ),
    (
        "wheel-missing",
        _case_text(body=False, wheel="rim_mass = 0.5").encode(),
        "wheel.rim_radius: missing",
    ),
    (
        "run-rtol",
        (_case_text() + "[run]\nrtol = 2.0\n").encode(),
        "run.rtol: must be below 1",
    ),
    (
        "version",
        _case_text(top_extra="format_version = 2").encode(),
        "format_version: this topdrift reads case format 1",
    ),
]


@pytest.mark.parametrize(("label", "content", "words"), BAD, ids=[b[0] for b in BAD])
def test_bad_file_exits_2_with_one_line_naming_the_key(tmp_path, capsys, label, content, words):
    path = tmp_path / "case.toml"
    path.write_bytes(content)
    before = sorted(p.name for p in tmp_path.iterdir())
    assert main(["describe", str(path)]) == 2
    out, err = capsys.readouterr()
    assert out == ""
    assert err.count("\n") == 1 and err.startswith(f"topdrift: error: {path}: ")
    assert words in err
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # wrote nothing
    with pytest.raises(UserError):  # and the library call refuses it the same way
        read_case(path)


def test_installed_command_prints_no_traceback(tmp_path):
    path = tmp_path / "case.toml"
    path.write_text(_case_text(start_extra={"theta_rate": '"3 furlong/s"'}), encoding="utf-8")
    proc = subprocess.run(
        topdrift_cmd("describe", str(path)),
        capture_output=True,
        text=True,
        cwd=tmp_path,
        timeout=120,
    )
    assert proc.returncode == 2 and proc.stdout == ""
    assert proc.stderr == (
        f"topdrift: error: {path}: start.theta_rate: unknown unit 'furlong/s'; "
        "use one of rad/s, deg/s, rev/s, rpm, rev/min\n"
    )
    assert sorted(p.name for p in tmp_path.iterdir()) == ["case.toml"]


def test_readme_example_case_parses():
    # The full example in docs/case-files.md is part of the contract.
    import re
    from pathlib import Path

    page = Path(__file__).resolve().parents[1] / "docs" / "case-files.md"
    section = page.read_text(encoding="utf-8").split("# Case files", 1)[1]
    example = re.search(r"```toml\n(.*?)```", section, re.S).group(1)
    case = parse_case(example, "README example")
    assert case.name == "brass-top"
    assert case.start.psi_rate == pytest.approx(40 * math.pi, rel=1e-15)  # 1200 rpm
    assert case.run == {"method": "dop853", "rtol": 1e-10, "atol": 1e-12}
