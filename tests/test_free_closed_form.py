"""The exact free motion in multiprecision (models/free_exact_mp.py) and the reference built from
it (integrators/extended/free_closed_form.py, first of the providers in
benchmarks/run/case_reference.py), against sources outside it:

- a Taylor-series integration of the Euler-Poisson equations in mpmath
  (tests/independent_references.py, itself checked against mpmath.odefun in
  test_independent_references.py), after several flips of the free-asymmetric case;
- mpmath.odefun (mpmath's own Taylor integrator) for the branches: two equal moments, the
  separatrix, a steady rotation;
- mpmath.ellipfun (sn, cn) for the amplitude;
- the compiled double-precision flow models/free_asymmetric.py within its ulps;
- the double-double Taylor reference (taylor-dd) within its own verified accuracy;
- the invariants of a free body (energy, |L|, L fixed in space; common practice).
"""

import math
import sys

import mpmath as mp
import numpy as np
import pytest
from independent_references import odefun_solution, taylor_states_mp

from topdrift.benchmarks.cases.library import load_case
from topdrift.benchmarks.run import case_reference as cr
from topdrift.integrators import registry
from topdrift.integrators.extended import free_closed_form as fc
from topdrift.integrators.extended import reference as extended
from topdrift.models import RigidBody
from topdrift.models.free_asymmetric import free_asymmetric
from topdrift.models.free_body import free_body_period
from topdrift.models.free_exact_mp import FreeMotion, amplitude

EPS = sys.float_info.epsilon
Q0 = np.array([0.9, 0.1, -0.3, 0.2]) / math.sqrt(0.95)


def worst(a, b):
    """Largest difference of two state rows lists: q absolute, m relative to |m| (mpf)."""
    out = mp.mpf(0)
    for ra, rb in zip(a, b, strict=True):
        mnorm = mp.sqrt(sum(v * v for v in rb[4:])) or 1
        out = max(out, max(abs(x - y) for x, y in zip(ra[:4], rb[:4], strict=True)))
        out = max(out, max(abs(x - y) for x, y in zip(ra[4:], rb[4:], strict=True)) / mnorm)
    return out


def test_free_asymmetric_after_three_flips_against_a_taylor_integration():
    """The case flips every 7.5 s (its description); at 23.25 s it has flipped three times.
    Measured: 1e-41 .. 8e-37 against a 40-digit Taylor integration (27 s of mpmath); here 34
    digits, to about 30 digits (the Taylor's own rounding over 2e3 steps)."""
    case = load_case("free-asymmetric")
    y0 = case.body_state()
    times = (1.0, 7.5, 16.0, 23.25)
    ref = taylor_states_mp(case.body, y0, times, dps=34, order=40)
    motion = FreeMotion(case.body, y0, 40)
    with mp.workdps(40):
        ours = [motion.state(t) for t in times]
        assert worst(ours, ref) < 1e-25, mp.nstr(worst(ours, ref), 3)


# a body with the middle moment first (the formulas sort the axes), both sides of the separatrix
BODY = RigidBody(1.0, (0.046, 0.02, 0.05))
STARTS = {
    "round-largest": np.array([0.3, 0.1, 0.9]),  # L^2 > 2 E I_mid
    "round-smallest": np.array([0.2, 0.9, 0.3]),  # L^2 < 2 E I_mid
}


@pytest.mark.parametrize("side", list(STARTS))
def test_both_sides_of_the_separatrix_against_a_taylor_integration(side):
    m = STARTS[side]
    period = free_body_period(BODY.inertia, m)
    y0 = np.concatenate([Q0, m])
    times = (0.3 * period, 1.7 * period, 3.2 * period)  # past several half-periods of tau
    ref = taylor_states_mp(BODY, y0, times, dps=34, order=40)
    motion = FreeMotion(BODY, y0, 40)
    with mp.workdps(40):
        ours = [motion.state(t) for t in times]
        assert worst(ours, ref) < 1e-25, mp.nstr(worst(ours, ref), 3)


def odefun_rows(body, y0, times, dps=30):
    with mp.workdps(dps):
        sol = odefun_solution(body, y0, dps, binary=True)
        return [list(sol(mp.mpf(float(t)))) for t in times]


BRANCHES = {
    # two equal moments (a symmetric free body), the odd one first
    "symmetric": (RigidBody(1.0, (0.01, 0.02, 0.02)), [0.4, 0.3, -0.2]),
    # all three equal: L and w fixed
    "spherical": (RigidBody(1.0, (0.02, 0.02, 0.02)), [0.4, 0.3, -0.2]),
    # on the separatrix exactly: (I_mid - I_lo) I_hi = (I_hi - I_mid) I_lo and |m_lo| = |m_hi|
    "separatrix": (RigidBody(1.0, (3.0, 4.0, 6.0)), [1.0, 0.5, 1.0]),
    # along a principal axis: a steady rotation
    "steady": (RigidBody(1.0, (0.01, 0.015, 0.02)), [0.0, 0.0, 0.3]),
}


@pytest.mark.parametrize("name", list(BRANCHES))
def test_the_other_branches_against_mpmath_odefun(name):
    body, m = BRANCHES[name]
    y0 = np.concatenate([Q0, m])
    times = (0.25, 1.0)
    ref = odefun_rows(body, y0, times)
    motion = FreeMotion(body, y0, 40)
    kind = {"separatrix": "asymmetric", "spherical": "symmetric"}.get(name, name)
    assert motion.kind == kind and (name != "separatrix" or motion.separatrix)
    with mp.workdps(40):
        ours = [motion.state(t) for t in times]
        # odefun at 30 digits: agreement to its precision
        assert worst(ours, ref) < 1e-27, mp.nstr(worst(ours, ref), 3)


@pytest.mark.parametrize("m", ["0.3", "0.9", "0.999999", "0.999999999999"])
def test_the_amplitude_against_mpmath_ellipfun(m):
    with mp.workdps(40):
        m = mp.mpf(m)
        k = mp.ellipk(m)
        for u in (-k, -0.7 * k, 0.1, 0.5 * k, k):
            phi = amplitude(mp.mpf(u), m, 1 - m)
            assert abs(mp.sin(phi) - mp.ellipfun("sn", u, m)) < mp.mpf(10) ** -36
            assert abs(mp.cos(phi) - mp.ellipfun("cn", u, m)) < mp.mpf(10) ** -36


@pytest.mark.parametrize("side", list(STARTS))
def test_the_double_flow_agrees_within_its_ulps(side):
    """models/free_asymmetric.py in one flow over up to two periods: within the bounds its own
    test file holds it to there against odefun at 30 digits (24 ulps of q, 12 of m relative to
    |m|: the angle about L, some 20 rad here, rounded once). Measured here up to 22 and 3.9."""
    m = STARTS[side]
    period = free_body_period(BODY.inertia, m)
    y0 = np.concatenate([Q0, m])
    motion = FreeMotion(BODY, y0, 40)
    for k in (0.6, 1.0, 1.5, 2.0):
        y = y0.copy()
        free_asymmetric(k * period, y, BODY.params())
        ref = np.array([float(v) for v in motion.state(k * period)])
        dq = np.abs(y[:4] - ref[:4]).max() / EPS
        dm = np.abs(y[4:] - ref[4:]).max() / np.linalg.norm(ref[4:]) / EPS
        assert dq < 24 and dm < 12, (k, dq, dm)


def test_invariants_to_the_working_precision():
    """Energy, |L| and L = q m conj(q) in space (common practice) at 45 digits, after many
    half-periods of the free-asymmetric case."""
    case = load_case("free-asymmetric")
    motion = FreeMotion(case.body, case.body_state(), 45)
    with mp.workdps(45):
        inertia = [mp.mpf(v) for v in case.body.inertia]

        def invariants(row):
            q, m = row[:4], row[4:]
            e = sum(x * x / i for x, i in zip(m, inertia, strict=True))
            q0, q1, q2, q3 = q
            # q (0, m) conj(q), written out
            t = (
                -q1 * m[0] - q2 * m[1] - q3 * m[2],
                q0 * m[0] + q2 * m[2] - q3 * m[1],
                q0 * m[1] - q1 * m[2] + q3 * m[0],
                q0 * m[2] + q1 * m[1] - q2 * m[0],
            )
            space = (
                -t[0] * q1 + t[1] * q0 - t[2] * q3 + t[3] * q2,
                -t[0] * q2 + t[1] * q3 + t[2] * q0 - t[3] * q1,
                -t[0] * q3 - t[1] * q2 + t[2] * q1 + t[3] * q0,
            )
            return e, mp.sqrt(sum(x * x for x in m)), space

        e0, l0, s0 = invariants(motion.state(0.0))
        for t in (3.1, 77.7, 299.0):
            e, ln, s = invariants(motion.state(t))
            assert abs(e - e0) / e0 < mp.mpf(10) ** -40
            assert abs(ln - l0) / l0 < mp.mpf(10) ** -40
            assert max(abs(a - b) for a, b in zip(s, s0, strict=True)) / l0 < mp.mpf(10) ** -38


def test_the_taylor_reference_agrees_within_its_verified_accuracy():
    """taylor-dd's own estimate (twice its parting, before the double floor) bounds its
    distance from the closed form; measured over 300 s: 6.7e-24 (axis) against a parting of
    4.1e-23 (docs/references.md)."""
    case = load_case("free-asymmetric")
    times = cr.sample_times(30.0, 61)
    y0 = case.body_state()
    closed = fc.evaluate(case.body, y0, times, fc.MAIN_DPS)
    main = extended.integrate(case.body, y0, times, extended.MAIN)
    check = extended.integrate(case.body, y0, times, extended.CHECK)
    estimate = extended.parting(main, check)
    true = extended.parting(main, closed)
    for key in ("axis", "attitude"):
        assert true[key] <= extended.ESTIMATE_FACTOR * estimate[key], (key, true, estimate)
        assert true[key] > 1e-30  # the Taylor's error is seen, far above the closed form's


def test_the_reference_of_free_asymmetric_is_the_closed_form(tmp_path, monkeypatch):
    monkeypatch.setenv("TOPDRIFT_REFERENCE_CACHE", str(tmp_path))
    case = load_case("free-asymmetric")
    assert cr.PROVIDERS[0] is cr.FREE_CLOSED_FORM
    ref = cr.case_reference(case, horizon=3.0, samples=7, quiet=True)
    assert ref.provider == "free-closed-form" and "closed form" in ref.method
    assert ref.family == cr.FREE_CLOSED_FORM.family
    families = {m.info.family for m in registry.all_methods()}
    assert ref.family not in families  # no candidate is of its family
    assert np.array_equal(ref.states[0], case.body_state())
    assert ref.parting["axis"] < 1e-28 and ref.accuracy["axis"] == extended.DOUBLE_FLOOR
    assert ref.cost_text().startswith("no steps")
    # its own cache entry, beside (never mixed with) a Taylor reference of the same case
    assert len(list(tmp_path.glob("reference-*.npz"))) == 1
    assert cr.case_reference(case, horizon=3.0, samples=7, build=False).cached
    assert ref.exact and not cr.TAYLOR_DD.exact  # said to be the exact motion, not a stand-in


def test_describe_and_pick_call_it_the_exact_motion(tmp_path, monkeypatch, capsys):
    from topdrift.benchmarks.cli.entry import main

    monkeypatch.setenv("TOPDRIFT_REFERENCE_CACHE", str(tmp_path))
    assert main(["describe", "free-asymmetric"]) == 0  # not built: the provider says it
    out = capsys.readouterr().out
    assert "reference (exact motion in closed form)" in out and "no exact solution" not in out
    args = ["pick", "free-asymmetric", "--target", "1e-4", "--methods", "dop853"]
    assert main([*args, "--horizon", "3", "--samples", "7"]) == 0
    out = capsys.readouterr().out
    assert "note: free-asymmetric: the axis error is measured against its exact motion (" in out
    assert "no exact solution" not in out


def test_a_gravity_body_is_refused_in_one_line():
    case = load_case("chaotic-asymmetric")
    reason = cr.FREE_CLOSED_FORM.refuses(case.body)
    assert reason and "\n" not in reason and "gravity torque" in reason
    provider, why = cr.provider_for(case.body)
    assert provider is cr.TAYLOR_DD and why == [f"free-closed-form: {reason}"]
    with pytest.raises(ValueError, match="gravity torque"):
        FreeMotion(case.body, case.body_state(), 32)
    # no gravity, or the centre of mass at the pivot: no torque, taken
    assert cr.FREE_CLOSED_FORM.refuses(RigidBody(1.0, (1.0, 2.0, 2.5), (0.1, 0, 0), 0.0)) is None
