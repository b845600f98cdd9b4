"""The extended-precision reference of the cases with no closed form
(integrators/extended, benchmarks/run/case_reference.py): the double-double Taylor integration
against an independent integration by mpmath.odefun (mpmath's own Taylor method, 34 digits) over
a short horizon; its error estimate bounds its true error there; the cache gives the same bits
back and rebuilds a damaged file."""

import functools

import mpmath as mp
import numpy as np
import pytest
from independent_references import odefun_solution, taylor_states_mp

from topdrift.benchmarks.cases.library import load_case
from topdrift.benchmarks.run import case_reference as cr
from topdrift.benchmarks.run import reference_cache
from topdrift.integrators.extended import reference as extended

LIBRARY = ("free-asymmetric", "chaotic-asymmetric", "kovalevskaya")
SHORT = (0.125, 0.5)  # s: odefun costs seconds per body over these
DPS = 34


@functools.cache
def odefun_states(name: str) -> list:
    """The body-form states of a library case at SHORT by mpmath.odefun at 34 digits, from the
    exact binary values of the double start and parameters (the Euler-Poisson equations with a
    quaternion: q' = q (0, w) / 2, m' = m x w + M g (Gamma x chi); common practice)."""
    case = load_case(name)
    with mp.workdps(DPS):
        sol = odefun_solution(case.body, case.body_state(), DPS, binary=True)
        return [list(sol(mp.mpf(t))) for t in SHORT]


def as_integration(rows) -> extended.Integration:
    """mpmath states split into double-double words, so that `parting` measures against them."""
    with mp.workdps(DPS):
        hi = np.array([[float(v) for v in r] for r in rows])
        lo = np.array(
            [
                [float(v - mp.mpf(h)) for v, h in zip(r, hr, strict=True)]
                for r, hr in zip(rows, hi, strict=True)
            ]
        )
    return extended.Integration(hi, lo, 0, 0.0, extended.MAIN)


@pytest.mark.parametrize("name", LIBRARY)
def test_double_double_taylor_agrees_with_mpmath_odefun_to_30_digits(name):
    case = load_case(name)
    times = np.array(SHORT)
    ours = extended.integrate(case.body, case.body_state(), times, extended.MAIN)
    theirs = odefun_states(name)
    with mp.workdps(DPS):
        worst = max(
            abs(mp.mpf(ours.hi[i, j]) + mp.mpf(ours.lo[i, j]) - theirs[i][j])
            / (1 if j < 4 else mp.sqrt(sum(v * v for v in theirs[i][4:])))
            for i in range(len(SHORT))
            for j in range(7)
        )
    # measured 1e-31 .. 5e-30 (the quaternion absolute, the momentum relative to |m|)
    assert worst < 1e-28, mp.nstr(worst, 3)


# The estimate's rule, where truncation and not rounding decides: the same pair of integrations
# (the reference, and a check of lower order and bolder step) at coarse settings, so that the
# errors (1e-22 .. 1e-16) stand far above mpmath's 34 digits. At the library settings both
# errors are rounding (about 4e-32 at these times, measured), which mpmath cannot tell apart.
COARSE_MAIN = extended.TaylorSettings(order=16, tol=1e-22, safety=0.5)
COARSE_CHECK = extended.TaylorSettings(order=13, tol=1e-21, safety=0.7)


@pytest.mark.parametrize("name", LIBRARY)
def test_the_error_estimate_bounds_the_true_error(name):
    case = load_case(name)
    times = np.array(SHORT)
    y0 = case.body_state()
    main = extended.integrate(case.body, y0, times, COARSE_MAIN)
    check = extended.integrate(case.body, y0, times, COARSE_CHECK)
    estimate = extended.parting(main, check)
    true = extended.parting(main, as_integration(odefun_states(name)))
    for key in ("axis", "attitude", "momentum"):
        # the stated estimate is ESTIMATE_FACTOR times the parting (a free body's |m| is kept
        # to 1e-32, below mpmath's 34 digits)
        assert true[key] <= extended.ESTIMATE_FACTOR * estimate[key], (key, true, estimate)
        assert key == "momentum" or true[key] > 1e-30  # truncation, far above the rounding
    # an estimate, not a blanket bound: where truncation decides, the check's own error (lower
    # order, bolder step) is what the parting shows, measured 300 to 4000 times the reference's
    for key in ("axis", "attitude"):
        assert estimate[key] < 1e5 * true[key], (key, true, estimate)


def test_the_estimate_holds_where_rounding_is_amplified():
    """The library settings on the chaotic top over 6 s, where round-off (not truncation) is
    what grows (about 1e2 over these seconds): against a 50-digit Taylor integration in mpmath
    (tests/independent_references.py, itself checked against mpmath.odefun) the stated estimate
    bounds the error, and is within a factor ten of it (measured over 8 s: the parting 1.6
    times the error, the stated estimate 3.3 times)."""
    case = load_case("chaotic-asymmetric")
    times = np.linspace(0.0, 6.0, 4)
    y0 = case.body_state()
    main = extended.integrate(case.body, y0, times, extended.MAIN)
    check = extended.integrate(case.body, y0, times, extended.CHECK)
    estimate = extended.parting(main, check)
    with mp.workdps(50):
        true = extended.parting(main, as_integration(taylor_states_mp(case.body, y0, times)))
    for key in ("axis", "attitude", "momentum"):
        stated = extended.ESTIMATE_FACTOR * estimate[key]
        assert 1e-31 < true[key] <= stated < 10.0 * true[key], (key, true, estimate)


def test_a_reference_is_cached_and_read_back_to_the_bit(tmp_path, monkeypatch, capsys):
    monkeypatch.setenv(reference_cache.CACHE_ENV, str(tmp_path / "cache"))
    case = load_case("kovalevskaya")
    built = cr.case_reference(case, horizon=2.0, samples=21)
    err = capsys.readouterr().err
    assert "reference for kovalevskaya: building" in err and "verified accuracy" in err
    assert not built.cached and built.notes == []
    (path,) = (tmp_path / "cache").glob("reference-*.npz")
    again = cr.case_reference(case, horizon=2.0, samples=21)
    assert again.cached and capsys.readouterr().err == ""  # read, not built: no progress
    assert np.array_equal(again.states, built.states) and again.accuracy == built.accuracy
    # another horizon is another reference
    assert cr.case_reference(case, horizon=1.0, samples=11, build=False) is None
    # a damaged file is built again, never trusted
    path.write_bytes(path.read_bytes()[:100])
    assert cr.case_reference(case, horizon=2.0, samples=21, build=False) is None
    rebuilt = cr.case_reference(case, horizon=2.0, samples=21, quiet=True)
    assert not rebuilt.cached and np.array_equal(rebuilt.states, built.states)


def test_a_cache_that_cannot_be_written_is_said_not_fatal(tmp_path, monkeypatch):
    blocker = tmp_path / "a-file"
    blocker.write_text("not a directory")
    monkeypatch.setenv(reference_cache.CACHE_ENV, str(blocker / "cache"))
    ref = cr.case_reference(load_case("free-asymmetric"), horizon=1.0, samples=11, quiet=True)
    assert ref.states.shape == (11, 7)
    (note,) = ref.notes
    assert note.startswith("not cached: cannot write in")


def test_states_are_the_run_sample_times_and_unit_quaternions(tmp_path, monkeypatch):
    monkeypatch.setenv(reference_cache.CACHE_ENV, str(tmp_path))
    case = load_case("chaotic-asymmetric")
    ref = cr.case_reference(case, horizon=3.0, samples=31, quiet=True)
    assert ref.times[0] == 0.0 and ref.times[-1] == 3.0
    assert np.array_equal(ref.times, [3.0 * k / 30 for k in range(30)] + [3.0])
    assert np.array_equal(ref.states[0], case.body_state())
    # |q| = 1 is kept by the exact flow (common practice): here to the last bits
    assert np.max(np.abs(np.linalg.norm(ref.states[:, :4], axis=1) - 1.0)) < 1e-15
