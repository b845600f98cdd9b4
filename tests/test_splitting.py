"""Splitting methods: orders measured against references of no method family (the exact
solution, a 34-digit Taylor series), invariants, reversibility, symplecticity, bounded energy,
and the stepper contract (grid, failures, counters, snapshots)."""

import math

import numpy as np
import pytest
from independent_references import attitude_error, exact_attitude, taylor_states

from topdrift.integrators import (
    C_EVALS,
    C_FORCE_EVALS,
    C_STEPS,
    ST_DIVERGED,
    ST_OK,
    ST_SINGULAR,
    MethodRefused,
)
from topdrift.integrators.splitting.methods import METHODS
from topdrift.models import RigidBody, body_state, euler_state, invariants_of
from topdrift.models.exact import LagrangeTop
from topdrift.models.forms import FORM_BODY, FORM_EULER, FORM_NAMES

TOP = RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1))
ASYMMETRIC = RigidBody(1.0, (0.05, 0.046, 0.02), com=(0.01, -0.005, 0.1))
# The same moments with no torque. With the exact free flow and a zero kick every splitting is
# the exact flow (the drifts of a step add up to the step): its error is round-off at any step.
# The -composed twins' free flow is not exact there, and their tables show their orders.
ASYMMETRIC_FREE = RigidBody(1.0, (0.05, 0.046, 0.02), com=(0.0, 0.0, 0.0))
# I1 = I2 = 2 I3, centre of mass in the equatorial plane (Kovalevskaya 1889)
KOVALEVSKAYA = RigidBody(1.0, (0.04, 0.04, 0.02), com=(0.06, 0.0, 0.0))
START = (0.3, 0.9, 0.2, 1.0, 0.5, 40.0)  # phi, theta, psi and their rates
BY_NAME = {m.name: m for m in METHODS}
PLAIN = [m for m in METHODS if not m.info.compensated]
# The -axes twins split the free rotation itself and run in the body form only.
AXES = [m.name for m in METHODS if m.name.endswith("-axes")]
PLAIN_EULER = [m for m in PLAIN if "euler" in m.info.forms]
# (name, form) for every method in every form it has
METHOD_FORMS = [
    pytest.param(m.name, f, id=f"{m.name}-{FORM_NAMES[f]}")
    for m in METHODS
    for f in (FORM_EULER, FORM_BODY)
    if FORM_NAMES[f] in m.info.forms
]
EXACT_SUBFLOWS_ONLY = {m.name for m in METHODS if m.table.kind != "composition"}


def start_state(body, form):
    return euler_state(body, *START) if form == FORM_EULER else body_state(body, *START)


def run(method, body, form, h, n, y0=None):
    y0 = start_state(body, form) if y0 is None else y0
    st = method.start(form, body.params(), 0.0, y0, {"step": h})
    assert st.advance_to(n * h) == ST_OK
    return st


def state_error(form, y, yr):
    """Largest error, relative to 1 + |y_ref| per entry (the Euler angles grow to tens of
    radians; the body form's entries are of order one)."""
    if form == FORM_EULER:
        return float(np.max(np.abs(y - yr) / (1.0 + np.abs(yr))))
    dq = min(np.max(np.abs(y[:4] - yr[:4])), np.max(np.abs(y[:4] + yr[:4])))  # q ~ -q
    return float(max(dq, np.max(np.abs(y[4:] - yr[4:]))))


# --- orders -------------------------------------------------------------------------------

T_ORDER = 1.0  # about 2.5 nutation periods of these tops
CASES = {
    "symmetric-euler": (TOP, FORM_EULER),
    "symmetric-body": (TOP, FORM_BODY),
    "asymmetric-body": (ASYMMETRIC, FORM_BODY),
    "kovalevskaya-body": (KOVALEVSKAYA, FORM_BODY),
}
ORDER_STEPS = tuple(int(round(5 * 2 ** (k / 2))) for k in range(20))  # T / h, 5 .. 3620
# Errors below E_LO (form, compensated) are within a factor 30 of the runs' own round-off. In the
# Euler form that round-off grows with the number of steps n (the angles grow, psi to 40 rad
# here): errors below EULER_ROUNDOFF_PER_STEP n are round-off too (measured: leapfrog-s4 levels
# off at 4e-12 after 2560 steps, leapfrog-kl8 rises from 3e-13 to 2e-11 between 100 and 3620).
E_LO = {
    (FORM_EULER, False): 1e-12,
    (FORM_BODY, False): 3e-13,
    (FORM_EULER, True): 3e-14,
    (FORM_BODY, True): 3e-14,
}
EULER_ROUNDOFF_PER_STEP = 3e-15
# Above E_HI[order] the error is not yet asymptotic (from the local slopes: the asymmetric and
# Kovalevskaya bodies reach the asymptotic regime later than the symmetric top).
# leapfrog-bm4 on the asymmetric top, exact free flow: local slopes 7.3 and 5.8 from 4.9e-4 to
# 5.3e-6, then 4.2, 4.07, 4.03, ...: order 4's window starts at 1e-4.
E_HI = {2: 1e-2, 4: 1e-4, 6: 1e-5, 8: 1e-7}
# A decade of steps for orders 2 and 4; orders 6 and 8 lose 6 and 8 decades of error per
# decade of steps, more than double precision holds between E_HI and E_LO: a factor 4 and 2.8.
MIN_SPAN = {2: 10.0, 4: 10.0, 6: 4.0, 8: 2.8}
_REFS = {}


def order_reference(body, form):
    """The reference is independent of every method family (tests/independent_references.py):
    the exact solution for the Lagrange top, compared in the attitude; a 34-digit Taylor-series
    integration for the asymmetric and Kovalevskaya bodies, compared in the whole state."""
    key = (id(body), form)
    if key not in _REFS:
        if body.lagrange_top:
            top = LagrangeTop.from_state(body, form, start_state(body, form))
            _REFS[key] = ("exact", exact_attitude(top, [T_ORDER])[0])
        else:
            y0 = start_state(body, form)
            _REFS[key] = ("state", taylor_states(body, y0, [T_ORDER])[0])
    return _REFS[key]


def reference_error(form, y, ref):
    kind, value = ref
    return attitude_error(form, y, value) if kind == "exact" else state_error(form, y, value)


def measured_order(method, body, form):
    """Slope of log(global error) against log(step), fitted over the steps whose errors lie
    between the asymptotic regime (E_HI) and round-off (E_LO). The order conditions themselves
    are checked over a factor 16 of steps in 40 digits (test_compositions.py)."""
    yr = order_reference(body, form)
    errs = []
    for n in ORDER_STEPS:
        y0 = start_state(body, form)
        st = method.start(form, body.params(), 0.0, y0, {"step": T_ORDER / n})
        # a step too long for the Euler form can swing the axis through the pole
        ok = st.advance_to(T_ORDER) == ST_OK
        errs.append(reference_error(form, st.y, yr) if ok else math.inf)
    p = method.info.order
    e_lo = E_LO[form, method.info.compensated]
    per_step = EULER_ROUNDOFF_PER_STEP if form == FORM_EULER else 0.0
    # contiguous: round-off grows with the number of steps, and errors re-enter from below;
    # the longest such run (a coarse step can land on a small error by a sign change of the
    # error, which would otherwise open and close a window of one point)
    window, run_ = [], []
    for n, e in zip(ORDER_STEPS, errs, strict=True):
        if E_HI[p] > e > max(e_lo, per_step * n):
            run_.append((n, e))
        else:
            run_ = []
        if len(run_) > len(window):
            window = list(run_)
    span = window[-1][0] / window[0][0] if window else 0.0
    assert span >= MIN_SPAN[p] * 0.99, f"too few steps where truncation dominates: {errs}"
    x = np.log([T_ORDER / n for n, _ in window])
    y = np.log([e for _, e in window])
    return np.polyfit(x, y, 1)[0], errs


# Known gap, recorded rather than hidden: plain leapfrog-kl8 on the asymmetric heavy top, exact
# free flow. Its local slopes are 9.0, 8.66, 8.34, 7.75 between E_HI and its round-off (3e-13):
# double precision ends the window before the leading error term dominates, and the fit, 8.66,
# is just outside the 0.6 the optimised tables get here. Its compensated twin, with the same
# coefficients and a window a decade deeper, passes. strict: the day it passes, this must go.
KNOWN_GAPS = {("leapfrog-kl8", "asymmetric-body")}


def order_params():
    for case in CASES:
        for m in METHODS:
            if CASES[case][1] == FORM_EULER and "euler" not in m.info.forms:
                continue
            marks = ()
            if (m.name, case) in KNOWN_GAPS:
                marks = pytest.mark.xfail(strict=True, reason="pre-asymptotic in double: fit 8.66")
            yield pytest.param(m.name, case, marks=marks, id=f"{m.name}-{case}")


@pytest.mark.parametrize(("name", "case"), list(order_params()))
def test_measured_order(name, case):
    method = BY_NAME[name]
    body, form = CASES[case]
    slope, errs = measured_order(method, body, form)
    p = method.info.order
    optimised = name.split("-")[1:2] in (["m8"], ["kl8"], ["bm6"])
    if body.lagrange_top or not optimised:
        assert abs(slope - p) < 0.2, (slope, errs)
    else:
        # The optimised tables have small leading error constants, so on the asymmetric and
        # Kovalevskaya bodies the higher terms of the error expansion still bend the window
        # that double precision leaves between E_HI and round-off: local slopes swing between
        # 7.3 and 8.7 there (measured fits 7.7-8.5 for m8 and kl8, 6.2 for bm6).
        assert abs(slope - p) < 0.6, (slope, errs)


def test_direct_splittings_run_on_any_body():
    # With the composed free flow these tables fell to order 2 for I1 != I2 and were refused;
    # the elliptic free flow is exact, so they run (their orders: test_measured_order).
    for name in sorted(EXACT_SUBFLOWS_ONLY):
        BY_NAME[name].check(ASYMMETRIC, "body", {"step": 1e-3})
        run(BY_NAME[name], ASYMMETRIC, FORM_BODY, 1e-3, 1)
    assert "leapfrog-bm4-composed" not in BY_NAME  # no twin: its order needs the exact flow


COMPOSED = [m.name for m in METHODS if m.name.endswith("-composed")]


@pytest.mark.parametrize("name", COMPOSED + AXES)
def test_measured_order_composed_twin_on_a_free_asymmetric_body(name):
    # The -axes twins too: neither splits the free flow exactly for I1 != I2 != I3.
    slope, errs = measured_order(BY_NAME[name], ASYMMETRIC_FREE, FORM_BODY)
    p = BY_NAME[name].info.order
    optimised = name.split("-")[1:2] in (["m8"], ["kl8"])
    assert abs(slope - p) < (0.6 if optimised else 0.2), (slope, errs)


@pytest.mark.parametrize("name", [m.name for m in METHODS if m.name not in COMPOSED + AXES])
def test_exact_free_flow_makes_every_table_exact_on_a_free_body(name):
    # Reference: the 34-digit Taylor series of tests/independent_references.py. Errors stay at
    # round-off (3e-13: E_LO of the body form) from 5 to 3620 steps over T_ORDER.
    yr = order_reference(ASYMMETRIC_FREE, FORM_BODY)
    for n in (5, 40, 320):
        st = run(BY_NAME[name], ASYMMETRIC_FREE, FORM_BODY, T_ORDER / n, n)
        assert reference_error(FORM_BODY, st.y, yr) < E_LO[FORM_BODY, False], n


def test_composed_twin_is_the_same_method_on_a_symmetric_body():
    # The composed free flow is exact for I1 = I2: the twin gives the same bits there.
    for form in (FORM_EULER, FORM_BODY):
        a = run(BY_NAME["leapfrog-kl6"], TOP, form, 1e-3, 200).y
        b = run(BY_NAME["leapfrog-kl6-composed"], TOP, form, 1e-3, 200).y
        assert np.array_equal(a, b)


# --- invariants kept by construction ------------------------------------------------------


def relative_change(form, y0, y, key):
    p = TOP.params()
    a, b = invariants_of(form, y0, p)[key], invariants_of(form, y, p)[key]
    return abs(b - a) / abs(a)


@pytest.mark.parametrize("form", [FORM_EULER, FORM_BODY])
@pytest.mark.parametrize("name", ["leapfrog", "leapfrog-kahan"])
def test_momenta_and_norm_over_a_million_steps(name, form):
    y0 = start_state(TOP, form)
    st = run(BY_NAME[name], TOP, form, 1e-3, 10**6, y0)
    # m3 (body) and p_psi (euler) are never written: exact
    assert (
        invariants_of(form, st.y, TOP.params())["p_psi"]
        == invariants_of(form, y0, TOP.params())["p_psi"]
    )
    if form == FORM_EULER:
        assert st.y[3] == y0[3] and st.y[5] == y0[5]  # p_phi, p_psi: the same bits
    else:
        assert abs(np.linalg.norm(st.y[:4]) - 1.0) < 1e-13
    # L.e_z: the plain body form used to drift linearly with round-off (2.9e-12 here), from the
    # nearly constant rotations of the free flow rounding the same way every step; with the free
    # flow's increments and renormalisation rounded without bias (models/flows.py) it is
    # 2.9e-13 here (RMS 1.9e-13 over 16 nearby starts), the compensated variant 6.6e-15.
    assert relative_change(form, y0, st.y, "p_phi") < 1e-12


@pytest.mark.parametrize(("name", "form"), METHOD_FORMS)
def test_momenta_kept_by_every_method(name, form):
    method = BY_NAME[name]
    y0 = start_state(TOP, form)
    st = run(method, TOP, form, 2e-3, 10**4, y0)
    assert relative_change(form, y0, st.y, "p_phi") < 1e-12
    if "p_psi" in method.info.keeps_by_form[FORM_NAMES[form]][0]:
        assert relative_change(form, y0, st.y, "p_psi") == 0.0
    else:
        # the -axes twins: the turns about axes 1 and 2 move m3, so they do not claim it
        # (measured here: 7.2e-8 leapfrog-axes, 6.8e-12 -s4-axes, 1.0e-14 -kl6-axes: truncation)
        assert relative_change(form, y0, st.y, "p_psi") > 0.0
    if form == FORM_BODY:
        assert abs(np.linalg.norm(st.y[:4]) - 1.0) < 1e-14


def test_norm_of_an_asymmetric_body_over_a_million_steps():
    for name in ("leapfrog", "leapfrog-kahan"):
        st = run(BY_NAME[name], ASYMMETRIC, FORM_BODY, 1e-3, 10**6)
        assert abs(np.linalg.norm(st.y[:4]) - 1.0) < 1e-13


# --- time reversibility and symplecticity -------------------------------------------------


@pytest.mark.parametrize(("name", "form"), METHOD_FORMS)
def test_time_reversible(name, form):
    # a symmetric method: Phi(-h) = Phi(h)^-1 (common practice; Hairer, Lubich and Wanner V.1)
    method = BY_NAME[name]
    y0 = start_state(TOP, form)
    h, n = 5e-3, 1000
    fwd = run(method, TOP, form, h, n, y0)
    back = method.start(form, TOP.params(), fwd.t, fwd.y, {"step": h})  # first step goes back
    assert back.advance_to(0.0) == ST_OK
    assert np.max(np.abs(back.y - y0)) < 1e-12 * max(1.0, np.max(np.abs(y0)))


def test_a_backward_run_keeps_its_direction_through_a_snapshot():
    # Backwards is asked for by time, never by a negative step (refused with every family's
    # settings, tests/test_validation.py); the direction survives a snapshot.
    method = BY_NAME["leapfrog-y6-kahan"]
    y0 = start_state(TOP, FORM_BODY)
    with pytest.raises(MethodRefused, match="positive"):
        method.start(FORM_BODY, TOP.params(), 1.0, y0, {"step": -1e-3})
    a = method.start(FORM_BODY, TOP.params(), 1.0, y0, {"step": 1e-3})
    assert a.advance_to(0.5) == ST_OK
    snap = a.snapshot()
    assert snap["n"] == -500
    assert a.advance_to(0.25) == ST_OK
    b = method.start(FORM_BODY, TOP.params(), 1.0, y0, {"step": 1e-3})
    b.restore(snap)
    assert b.advance_to(0.25) == ST_OK
    assert np.array_equal(a.y, b.y) and np.array_equal(a.counters, b.counters)
    with pytest.raises(MethodRefused, match="turn back"):
        b.advance_to(0.5)


def _one_step(method, y, h):
    st = method.start(FORM_EULER, TOP.params(), 0.0, y, {"step": h})
    st.advance_to(h)
    return st.y


@pytest.mark.parametrize("name", [m.name for m in PLAIN_EULER])
def test_euler_form_step_is_symplectic(name):
    # M^T J M = J for the Jacobian M of one step in the canonical variables
    # (q = phi, theta, psi; p = p_phi, p_theta, p_psi), by central differences
    method = BY_NAME[name]
    y0 = start_state(TOP, FORM_EULER)
    h, d = 0.02, 1e-6
    m = np.empty((6, 6))
    for j in range(6):
        e = np.zeros(6)
        e[j] = d
        m[:, j] = (_one_step(method, y0 + e, h) - _one_step(method, y0 - e, h)) / (2 * d)
    jmat = np.block([[np.zeros((3, 3)), np.eye(3)], [-np.eye(3), np.zeros((3, 3))]])
    assert np.max(np.abs(m.T @ jmat @ m - jmat)) < 1e-7
    assert np.max(np.abs(m - np.eye(6))) > 1e-3  # the step does something


# --- energy: bounded, no drift ------------------------------------------------------------

# Steps chosen so that the truncation error in the energy (1e-9 .. 1e-6 relative) stands far
# above round-off over the run; the energy of a symplectic method oscillates without drift
# (backward error analysis; Hairer, Lubich and Wanner, Ch. IX).
# Per table (key), for the Lagrange top and for the other bodies; measured envelopes 1e-10..1e-7.
ENERGY_STEP = {
    "lagrange": {
        "": 1e-3,
        "tj4": 5e-3,
        "s4": 1e-2,
        "bm4": 2e-2,
        "tj6": 2e-2,
        "y6": 4e-2,
        "kl6": 4e-2,
        "bm6": 6e-2,
        "tj8": 4e-2,
        "m8": 8e-2,
        "kl8": 1e-1,
    },
    "other": {
        "": 1e-3,
        "tj4": 2.5e-3,
        "s4": 5e-3,
        "bm4": 1e-2,
        "tj6": 1e-2,
        "y6": 1e-2,
        "kl6": 2e-2,
        "bm6": 2e-2,
        "tj8": 1e-2,
        "m8": 4e-2,
        "kl8": 4e-2,
    },
}
# The envelope of a quasi-periodic motion fluctuates by some 10% between windows (non-
# integrable bodies); a drift shows as a steady change of the envelope far beyond that.
ENVELOPE_CHANGE = 0.2


def energy_step(method, body):
    return ENERGY_STEP["lagrange" if body.lagrange_top else "other"][method.table.key]


def energy_envelope_drift(method, body, form, n_steps, samples=200, windows=20):
    p = body.params()
    y0 = start_state(body, form)
    h = energy_step(method, body)
    st = method.start(form, p, 0.0, y0, {"step": h})
    e0 = invariants_of(form, y0, p)["energy"]
    per = n_steps // samples
    errs = []
    for k in range(1, samples + 1):
        assert st.advance_to(k * per * h) == ST_OK
        errs.append(abs(invariants_of(form, st.y, p)["energy"] - e0) / abs(e0))
    env = np.array(errs).reshape(windows, -1).max(axis=1)
    slope = np.polyfit(np.arange(windows), env, 1)[0]
    # change of the envelope over the whole run, relative to its mean
    return slope * (windows - 1) / env.mean(), env


@pytest.mark.parametrize("name", [m.name for m in PLAIN_EULER])
def test_energy_bounded_euler_million_steps(name):
    drift, env = energy_envelope_drift(BY_NAME[name], TOP, FORM_EULER, 10**6)
    assert abs(drift) < ENVELOPE_CHANGE, env
    assert env.max() < 1e-5


@pytest.mark.parametrize("case", ["symmetric-body", "asymmetric-body", "kovalevskaya-body"])
@pytest.mark.parametrize("name", [m.name for m in PLAIN])
def test_energy_bounded_body(name, case):
    body, form = CASES[case]
    n = 10**6 if name == "leapfrog" else 10**5
    if not body.symmetric:
        # The energy error's envelope beats slowly here: leapfrog-tj8, exact free flow, 4e-11
        # to 6e-11 with a period of about 2e5 steps (measured over 4e5); 1e5 steps saw half a
        # beat as a trend (-0.33), 4e5 steps see none (-0.11).
        n = max(n, 4 * 10**5)
    samples, windows = 200, 20
    if name in AXES:
        # The split free rotation beats against the spin: leapfrog-axes on the symmetric body,
        # 1e6 steps sampled every 5000 steps, saw its envelope fall from 1.7e-7 to 6e-8 (-0.83);
        # 8e6 steps sampled every 1e4 see it flat between 1.4e-7 and 1.9e-7 (+0.014).
        n, samples, windows = 4 * 10**6, 800, 40
    drift, env = energy_envelope_drift(BY_NAME[name], body, form, n, samples, windows)
    assert abs(drift) < ENVELOPE_CHANGE, env
    assert env.max() < 1e-4


def test_compensated_energy_bounded():
    for form in (FORM_EULER, FORM_BODY):
        drift, env = energy_envelope_drift(BY_NAME["leapfrog-kahan"], TOP, form, 10**6)
        assert abs(drift) < ENVELOPE_CHANGE, env


@pytest.mark.parametrize("name", ["leapfrog", "leapfrog-kl6", "leapfrog-kahan"])
def test_kovalevskaya_integral_bounded(name):
    p = KOVALEVSKAYA.params()
    y0 = start_state(KOVALEVSKAYA, FORM_BODY)
    method = BY_NAME[name]
    h = energy_step(method, KOVALEVSKAYA)
    k0 = invariants_of(FORM_BODY, y0, p)["kovalevskaya"]
    assert math.isfinite(k0) and k0 > 0.0
    st = method.start(FORM_BODY, p, 0.0, y0, {"step": h})
    errs = []
    # a million steps: over 2 10^5 the envelope's slow modulation (some 30%) looks like drift
    n = 10**6
    for k in range(1, 401):
        st.advance_to(k * (n // 400) * h)
        errs.append(abs(invariants_of(FORM_BODY, st.y, p)["kovalevskaya"] - k0) / k0)
    env = np.array(errs).reshape(20, -1).max(axis=1)
    slope = np.polyfit(np.arange(20), env, 1)[0]
    assert abs(slope * 19 / env.mean()) < ENVELOPE_CHANGE, env
    assert env.max() < 1e-4


# --- the stepper contract -----------------------------------------------------------------


def test_output_times_do_not_change_the_bits():
    for name in ("leapfrog", "leapfrog-kl8-kahan"):
        for form in (FORM_EULER, FORM_BODY):
            one = run(BY_NAME[name], TOP, form, 1e-3, 1000)
            y0 = start_state(TOP, form)
            st = BY_NAME[name].start(form, TOP.params(), 0.0, y0, {"step": 1e-3})
            for k in range(1, 11):
                st.advance_to(k * 0.1)
            assert np.array_equal(one.y, st.y)
            assert st.t == 1.0


def test_snapshot_restore_is_bit_exact():
    for name in ("leapfrog-y6", "leapfrog-y6-kahan"):
        for form in (FORM_EULER, FORM_BODY):
            method = BY_NAME[name]
            a = method.start(form, TOP.params(), 0.0, start_state(TOP, form), {"step": 1e-3})
            a.advance_to(0.5)
            snap = a.snapshot()
            a.advance_to(1.0)
            b = method.start(form, TOP.params(), 0.0, start_state(TOP, form), {"step": 1e-3})
            b.restore(snap)
            assert b.t == 0.5
            b.advance_to(1.0)
            assert np.array_equal(a.y, b.y)
            assert np.array_equal(a.counters, b.counters)
            if method.info.compensated:
                assert np.any(snap["e"] != 0.0)  # the compensation terms are part of the state


def test_counters():
    method = BY_NAME["leapfrog-kl6"]
    st = method.start(FORM_EULER, TOP.params(), 0.0, start_state(TOP, FORM_EULER), {"step": 1e-2})
    st.advance_to(0.5)
    st.advance_to(1.0)
    assert st.counters[C_STEPS] == 100
    # 9 drifts and 9 kicks per step (merged half kicks), plus one closing kick per output
    assert st.counters[C_EVALS] == 100 * 18 + 2
    # of these, the kicks are the force evaluations: 9 per step and the closing ones
    assert st.counters[C_FORCE_EVALS] == 100 * 9 + 2
    # the same in the body form, plain and compensated (the compensated kernel is separate)
    for name in ("leapfrog-kl6", "leapfrog-kl6-kahan", "leapfrog"):
        st = BY_NAME[name].start(
            FORM_BODY, TOP.params(), 0.0, start_state(TOP, FORM_BODY), {"step": 1e-2}
        )
        st.advance_to(1.0)
        kicks = BY_NAME[name].table.stages
        assert st.counters[C_FORCE_EVALS] == 100 * kicks + 1
        assert st.counters[C_EVALS] == 100 * 2 * kicks + 1


def test_off_grid_time_is_refused():
    st = BY_NAME["leapfrog"].start(
        FORM_EULER, TOP.params(), 0.0, start_state(TOP, FORM_EULER), {"step": 1e-3}
    )
    with pytest.raises(MethodRefused, match="whole number"):
        st.advance_to(0.0105)
    st.advance_to(0.1 + 0.2)  # 300.00000000000006 steps: on the grid to round-off
    assert st.counters[C_STEPS] == 300
    with pytest.raises(MethodRefused, match="back"):
        st.advance_to(0.1)


def test_singular_attitude_stops_at_the_last_good_step():
    # p_phi = p_psi: no centrifugal barrier, the figure axis swings through the vertical
    y0 = np.array([0.0, 0.05, 0.0, 0.5, -0.5, 0.5])
    method = BY_NAME["leapfrog"]
    st = method.start(FORM_EULER, TOP.params(), 0.0, y0, {"step": 1e-3})
    assert st.advance_to(1.0) == ST_SINGULAR
    good = st.counters[C_STEPS]
    assert 0 < good < 1000
    assert st.t_fail == pytest.approx(good * 1e-3, abs=1e-15)
    assert st.t == st.t_fail
    assert 0.0 < st.y[1] < math.pi
    assert st.advance_to(2.0) == ST_SINGULAR  # stays failed
    # the state handed back is the state of a clean run to t_fail
    clean = method.start(FORM_EULER, TOP.params(), 0.0, y0, {"step": 1e-3})
    clean.advance_to(good * 1e-3)
    assert np.array_equal(clean.y, st.y)


def test_non_finite_state_is_reported():
    y0 = start_state(TOP, FORM_BODY)
    y0[4] = np.inf
    st = BY_NAME["leapfrog-kahan"].start(FORM_BODY, TOP.params(), 0.0, y0, {"step": 1e-3})
    assert st.advance_to(1.0) == ST_DIVERGED
    assert st.t_fail == 0.0 and st.counters[C_STEPS] == 0


def test_bad_settings_are_refused():
    m = BY_NAME["leapfrog"]
    for bad in ({}, {"step": 0.0}, {"step": float("nan")}, {"step": "1e-3"}):
        with pytest.raises(MethodRefused):
            m.start(FORM_EULER, TOP.params(), 0.0, start_state(TOP, FORM_EULER), bad)
    with pytest.raises(MethodRefused, match="entries"):
        m.start(FORM_EULER, TOP.params(), 0.0, np.zeros(7), {"step": 1e-3})


def test_axes_twins_refuse_the_euler_form():
    for name in AXES:
        with pytest.raises(MethodRefused, match="form"):
            BY_NAME[name].start(
                FORM_EULER, TOP.params(), 0.0, start_state(TOP, FORM_EULER), {"step": 1e-3}
            )


def test_registry_metadata():
    names = [m.name for m in METHODS]
    # 11 tables, each plain and -kahan; the 9 compositions also -composed; 3 -axes twins
    assert len(set(names)) == len(names) == 22 + 9 + 3
    assert sorted(AXES) == ["leapfrog-axes", "leapfrog-kl6-axes", "leapfrog-s4-axes"]
    for m in METHODS:
        i = m.info
        assert i.family == "splitting" and i.symplectic and i.control == "step"
        assert "energy" not in i.keeps
        if m.name in AXES:
            assert i.forms == ("body",)
            assert i.keeps == () and i.keeps_roundoff == ("p_phi", "norm")
        else:
            assert i.forms == ("euler", "body")
            assert i.keeps == ("p_psi",) and i.keeps_roundoff == ("p_phi", "norm")
        assert i.compensated == i.name.endswith("-kahan")
        assert i.source


def test_the_kernels_written_out_euler_drift_is_the_model_flow_bit_for_bit():
    # integrators/splitting/kernels.py writes drift_euler out in the Euler-form loop (speed); a
    # step with no kick (coefficients 0) is that drift alone, and must be the model's to the bit.
    from topdrift.integrators.splitting.kernels import run_plain_euler
    from topdrift.models.flows import FREE_EXACT, drift_euler

    p = RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1)).params()
    rng = np.random.default_rng(11)
    for _ in range(200):
        y = np.array([*rng.uniform(-3, 3, 1), rng.uniform(0.1, 3.0), *rng.uniform(-3, 3, 1)])
        y = np.concatenate([y, rng.uniform(-50, 50, 3)])
        h = 10.0 ** rng.uniform(-6, -1)
        want = y.copy()
        drift_euler(h, want, p)
        got = y.copy()
        turns = np.zeros(0, dtype=np.int64)  # unfolded: the bare drift
        counters = np.zeros(8, dtype=np.int64)
        fresh = np.ones(1, dtype=np.int64)
        kick, drift = np.zeros(2), np.array([h])
        run_plain_euler(FREE_EXACT, p, kick, drift, 1, got, fresh, counters, turns)
        if 0.0 < want[1] < math.pi:  # a step that leaves (0, pi) is stopped, not compared
            assert np.array_equal(got, want)
