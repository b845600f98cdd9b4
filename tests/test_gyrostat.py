"""Gyrostats (a rigid body carrying rotors of constant relative momentum h): the exact solution
of the Lagrange gyrostat against mpmath, the sleeping threshold with the rotor's share, every
family's measured order on a gyrostat, and the refusals.

References, each sharing no code with the module under test:
- mpmath.odefun (mpmath's own Taylor integrator) and a 34-digit mpmath Taylor series, both on the
  body-form gyrostat equations q' = q (0, w) / 2, m' = m x w + M g (Gamma x chi),
  w = I^-1 (m - h), m = I w + h the total body momentum (tests/independent_references.py; the
  gyrostat's equations as in Hughes, Spacecraft Attitude Dynamics, 1986, from memory);
- the sleeping-top criterion p_psi^2 > 4 I1 M g l (Goldstein, Classical Mechanics, sec. 5.7,
  from memory), with p_psi = I3 w3 + h3 the total spin momentum.
"""

from __future__ import annotations

import math

import mpmath as mp
import numpy as np
import pytest
from independent_references import (
    odefun_solution,
    taylor_states,
)
from measured_order import measured_order

from topdrift.integrators import ST_OK, MethodRefused, get
from topdrift.models import FORM_BODY, FORM_EULER, RigidBody, body_state, euler_state
from topdrift.models import invariants_of as invariants
from topdrift.models.exact import ExactUnavailable, LagrangeTop

# Scenario bodies of our own (invented numbers): a Lagrange gyrostat (rotor on the figure axis)
# and an asymmetric body with its centre of mass and its rotor off every axis.
GYRO = RigidBody(mass=1.0, inertia=(1.0, 1.0, 0.6), com=(0.0, 0.0, 0.1), rotor=(0.0, 0.0, 0.8))
RIGID = RigidBody(mass=1.0, inertia=(1.0, 1.0, 0.6), com=(0.0, 0.0, 0.1))
GENERAL = RigidBody(
    mass=1.0, inertia=(1.0, 0.8, 0.6), com=(0.02, -0.01, 0.1), rotor=(0.3, -0.2, 0.5)
)
START = (0.0, 0.6, 0.0, 0.3, 0.5, 5.0)  # phi, theta, psi and their rates (the shell's)

ORDER_TIMES = np.linspace(0.4, 2.0, 5)


def _quaternion_error(q, qr) -> float:
    q, qr = np.asarray(q, dtype=float), np.asarray(qr, dtype=float)
    return float(min(np.max(np.abs(q - qr)), np.max(np.abs(q + qr))))


# ------------------------------------------------------------------------ the model itself


def test_momentum_is_shell_plus_rotor_and_energy_is_the_shells():
    # m = I w + h (the gyrostat's total momentum, Hughes 1986, from memory) and the conserved
    # energy is the shell's kinetic energy w.I w / 2 plus the potential (the rotor's own
    # kinetic energy is a constant and left out; common practice).
    y = body_state(GYRO, *START)
    yr = body_state(RIGID, *START)
    np.testing.assert_array_equal(y[:4], yr[:4])
    assert y[4] == yr[4] and y[5] == yr[5]
    assert y[6] == yr[6] + 0.8
    e = invariants(FORM_BODY, y, GYRO.params())["energy"]
    er = invariants(FORM_BODY, yr, RIGID.params())["energy"]
    assert abs(e - er) <= 1e-15 * abs(er)
    # the Euler form: p_psi = I3 w3 + h3, w3 = psidot + phidot cos(theta)
    ye = euler_state(GYRO, *START)
    w3 = START[5] + START[3] * math.cos(START[1])
    assert abs(ye[5] - (0.6 * w3 + 0.8)) <= 1e-15 * ye[5]


def test_exact_gyrostat_against_mpmath_odefun():
    # The exact solution with the rotor on the figure axis (models/exact.py: the top's u(t) and
    # phi(t) with the total p_psi, psidot less h3 / I3) against mpmath.odefun on the body-form
    # equations at 30 digits, from the exact binary values of the same doubles. Measured: a few
    # 1e-16 in q and m. The rigid top's exact solution from the same state misses by O(0.1):
    # the check sees the rotor.
    y0 = body_state(GYRO, *START)
    top = LagrangeTop.from_state(GYRO, FORM_BODY, y0)
    rigid = LagrangeTop.from_state(RIGID, FORM_BODY, y0)
    times = [0.5, 1.5, 3.0]
    with mp.workdps(30):
        sol = odefun_solution(GYRO, y0, binary=True)
        ref = np.array([[float(v) for v in sol(mp.mpf(t))] for t in times])
    s = top.sample(np.array(times))
    sr = rigid.sample(np.array(times))
    for k in range(len(times)):
        assert _quaternion_error(s.quaternion[k], ref[k, :4]) < 1e-13
        assert float(np.max(np.abs(s.momentum[k] - ref[k, 4:]))) < 1e-13
    assert max(_quaternion_error(sr.quaternion[k], ref[k, :4]) for k in range(3)) > 1e-2


def test_exact_gyrostat_euler_start_and_summary():
    # The same motion from the Euler form; its p_psi is the total, and the mean spin rate is the
    # rigid top's (same p_phi, p_psi, energy of the u-equation) less h3 / I3: the rotor only
    # slows the shell's spin (derivation in docs/exact-solution.md).
    ye = euler_state(GYRO, *START)
    top = LagrangeTop.from_state(GYRO, FORM_EULER, ye)
    twin = RigidBody(mass=1.0, inertia=(1.0, 1.0, 0.6), com=(0.0, 0.0, 0.1))
    rigid = LagrangeTop.from_state(twin, FORM_EULER, ye)  # the same canonical state, no rotor
    assert top.p_psi == ye[5]
    assert top.nutation_period == pytest.approx(rigid.nutation_period, rel=1e-14)
    assert top.mean_precession_rate == pytest.approx(rigid.mean_precession_rate, rel=1e-13)
    assert top.mean_spin_rate == pytest.approx(rigid.mean_spin_rate - 0.8 / 0.6, rel=1e-13)
    yb = body_state(GYRO, *START)
    b = LagrangeTop.from_state(GYRO, FORM_BODY, yb)
    t = np.array([0.7, 2.9])
    np.testing.assert_allclose(top.euler(t), b.euler(t), rtol=0, atol=1e-12)


def test_sleeping_threshold_counts_the_rotor():
    # Upright with no transverse momentum: stable when p_psi^2 > 4 I1 M g l (Goldstein sec.
    # 5.7, from memory). The shell alone spins below the threshold, the rotor lifts p_psi above.
    body = RigidBody(mass=0.2, inertia=(1.7e-4, 1.7e-4, 9.0e-5), com=(0.0, 0.0, 0.025))
    mgl = body.mass * body.gravity * 0.025
    threshold = math.sqrt(4.0 * 1.7e-4 * mgl)
    w3 = 0.5 * threshold / 9.0e-5  # the shell's spin: half the threshold's p_psi
    h3 = 0.7 * threshold  # with it, p_psi = 1.2 times the threshold
    gyro = RigidBody(mass=0.2, inertia=(1.7e-4, 1.7e-4, 9.0e-5), com=(0.0, 0.0, 0.025),
                     rotor=(0.0, 0.0, h3))  # fmt: skip
    up = (0.0, 0.0, 0.0, 0.0, 0.0, w3)
    plain = LagrangeTop.from_state(body, FORM_BODY, body_state(body, *up))
    spun = LagrangeTop.from_state(gyro, FORM_BODY, body_state(gyro, *up))
    assert plain.motion == "sleeping-unstable" and plain.sleeping_margin < 0.0
    assert spun.motion == "sleeping" and spun.sleeping_margin > 0.0
    assert spun.sleeping_margin == pytest.approx((1.2**2 - 1.0) * threshold**2, rel=1e-12)
    # A run 1 deg off the vertical (rk45, tolerance 1e-10): the gyrostat stays within a few
    # degrees (its exact theta_max), the plain top falls over.
    tilt = (0.0, math.radians(1.0), 0.0, 0.0, 0.0, w3)
    for b, falls in ((gyro, False), (body, True)):
        y0 = body_state(b, *tilt)
        st = get("rk45").start(FORM_BODY, b.params(), 0.0, y0, {"rtol": 1e-10, "atol": 1e-12})
        worst = 0.0
        for t in np.linspace(0.05, 2.0, 40):
            assert st.advance_to(t) == ST_OK
            q = st.y[:4] / np.linalg.norm(st.y[:4])
            worst = max(worst, math.acos(min(1.0, 1.0 - 2.0 * (q[1] ** 2 + q[2] ** 2))))
        if falls:
            assert worst > math.radians(60.0)
        else:
            exact = LagrangeTop.from_state(b, FORM_BODY, y0)
            assert exact.theta_max < math.radians(5.0)
            assert worst <= exact.theta_max * (1 + 1e-6)
            assert worst > exact.theta_max * 0.99  # the run has seen a whole nutation


# ------------------------------------------------------------------------ every family

# (method, nominal order, step counts over 2 s): errors well above the references' own and
# above round-off at the finest step (measured).
ORDERS = [
    ("rk4", 4, [40, 80, 160, 320]),
    ("leapfrog", 2, [40, 80, 160, 320]),
    ("leapfrog-s4", 4, [40, 80, 160, 320]),
    ("leapfrog-kahan", 2, [40, 80, 160, 320]),
    ("leapfrog-s4-axes", 4, [40, 80, 160, 320]),
    ("gauss4", 4, [20, 40, 80, 160]),
    ("lie-rkmk4", 4, [40, 80, 160, 320]),
    ("lie-cg3", 3, [40, 80, 160, 320]),
    ("engine-euler", 1, [2000, 4000, 8000, 16000]),
    ("engine-semi-implicit", 1, [2000, 4000, 8000, 16000]),
    ("engine-implicit-gyro", 1, [2000, 4000, 8000, 16000]),
]


def _measured_order(name, form, body, steps):
    y0 = euler_state(body, *START) if form == FORM_EULER else body_state(body, *START)
    return measured_order(name, form, body, y0, ORDER_TIMES, steps)


@pytest.mark.parametrize(("name", "order", "steps"), ORDERS, ids=[o[0] for o in ORDERS])
def test_order_on_the_lagrange_gyrostat_body_form(name, order, steps):
    # Against the exact gyrostat (itself checked against mpmath above): the slope of log error
    # against log h is the nominal order within 0.2 (common practice for an order test).
    slope, errors = _measured_order(name, FORM_BODY, GYRO, steps)
    assert abs(slope - order) < 0.2, (slope, errors)


EULER_ORDERS = [o for o in ORDERS if o[0] in ("rk4", "leapfrog", "leapfrog-s4", "gauss4")]


@pytest.mark.parametrize(("name", "order", "steps"), EULER_ORDERS, ids=[o[0] for o in EULER_ORDERS])
def test_order_on_the_lagrange_gyrostat_euler_form(name, order, steps):
    slope, errors = _measured_order(name, FORM_EULER, GYRO, steps)
    assert abs(slope - order) < 0.2, (slope, errors)


GENERAL_ORDERS = [o for o in ORDERS if "leapfrog" not in o[0] or o[0].endswith("-axes")]


@pytest.mark.parametrize(
    ("name", "order", "steps"), GENERAL_ORDERS, ids=[o[0] for o in GENERAL_ORDERS]
)
def test_order_on_a_general_gyrostat(name, order, steps):
    # Rotor and centre of mass off every axis of an asymmetric body, against the 34-digit mpmath
    # Taylor series of the gyrostat equations.
    slope, errors = _measured_order(name, FORM_BODY, GENERAL, steps)
    assert abs(slope - order) < 0.2, (slope, errors)


@pytest.mark.parametrize(
    ("name", "settings"),
    [
        ("rk45", {"rtol": 1e-11, "atol": 1e-13}),
        ("dop853", {"rtol": 1e-12, "atol": 1e-14}),
        ("taylor-adaptive", {"rtol": 1e-13, "atol": 1e-15}),
        ("scipy-dop853", {"rtol": 1e-12, "atol": 1e-14}),
        ("scipy-radau", {"rtol": 1e-10, "atol": 1e-12}),
    ],
)
def test_adaptive_families_carry_the_rotor(name, settings):
    # At tight tolerances every adaptive method follows the general gyrostat to the mpmath
    # reference within 1e-9 over 2 s (measured: rk45 7.5e-12, dop853 5.8e-13, taylor-adaptive
    # 4.2e-15, scipy-dop853 5.8e-13, scipy-radau 1.5e-11); the rotor-free motion from the
    # same start ends 1.9 away, so a method that dropped h would fail.
    y0 = body_state(GENERAL, *START)
    ref = taylor_states(GENERAL, y0, ORDER_TIMES)
    st = get(name).start(FORM_BODY, GENERAL.params(), 0.0, y0, settings)
    for k, t in enumerate(ORDER_TIMES):
        assert st.advance_to(t) == ST_OK
        assert float(np.max(np.abs(st.y - ref[k]))) < 1e-9, (name, t)


def test_splittings_refuse_a_rotor_they_cannot_split_exactly():
    # Off the figure axis of a symmetric body the rigid free flow and the rotor's turn do not
    # commute: no exact free flow, refused with the reason; the -axes split takes it.
    y0 = body_state(GENERAL, *START)
    for name in ("leapfrog", "leapfrog-s4-composed", "leapfrog-kahan"):
        with pytest.raises(MethodRefused, match="rotor"):
            get(name).start(FORM_BODY, GENERAL.params(), 0.0, y0, {"step": 0.01})
    get("leapfrog-axes").start(FORM_BODY, GENERAL.params(), 0.0, y0, {"step": 0.01})


def test_euler_form_and_exact_solution_need_the_rotor_on_the_figure_axis():
    tilted = RigidBody(mass=1.0, inertia=(1.0, 1.0, 0.6), com=(0.0, 0.0, 0.1),
                       rotor=(0.1, 0.0, 0.8))  # fmt: skip
    assert not tilted.lagrange_top and GYRO.lagrange_top
    with pytest.raises(ExactUnavailable, match="rotor"):
        LagrangeTop.from_state(tilted, FORM_BODY, body_state(tilted, *START))
    with pytest.raises(MethodRefused, match="rotor"):
        get("rk4").check(tilted, "euler", {"step": 0.01})


# ------------------------------------------------------------------------ case files

GYRO_CASE = """\
name = "gyro"
description = "a test gyrostat"
horizon = 0.2
samples = 3
[body]
mass = 1.0
inertia = [1.0, 1.0, 0.6]
com = [0.0, 0.0, 0.1]
[rotor]
momentum = {momentum}
[start]
theta = 0.6
phi = 0.0
psi = 0.0
theta_rate = 0.5
phi_rate = 0.3
psi_rate = 5.0
{run}"""


@pytest.mark.parametrize(
    ("momentum", "run", "words"),
    [
        ("[0.0, 0.8]", "", "rotor.momentum: expected an array of 3 numbers"),
        ('[0.0, 0.0, "fast"]', "", "rotor.momentum[2]: expected a number"),
        ("[0.0, 0.0, nan]", "", "rotor.momentum[2]: must be finite"),
        ("[0.0, 0.0, 1e300]", "", "rotor.momentum[2]: 1e+300 is outside the range"),
        ("[0.1, 0.0, 0.8]", '[run]\nmethod = "rk4"\nform = "euler"\nstep = 0.01', "rotor"),
        ("[0.1, 0.0, 0.8]", '[run]\nmethod = "leapfrog"\nform = "body"\nstep = 0.01', "rotor"),
    ],
)
def test_bad_rotor_input_is_one_line_and_status_2(tmp_path, command_line, momentum, run, words):
    # The house's rule for bad input (DEVELOPERS.md): one line, exit status 2.
    path = tmp_path / "gyro.toml"
    path.write_text(GYRO_CASE.format(momentum=momentum, run=run))
    rc, out, err = command_line("run", path, "--out", tmp_path / "runs.h5")
    assert rc == 2, (out, err)
    assert len(err.strip().splitlines()) == 1 and words in err, err


def test_an_unknown_rotor_key_is_refused(tmp_path, command_line):
    path = tmp_path / "gyro.toml"
    text = GYRO_CASE.format(momentum="[0.0, 0.0, 0.8]\nspeed = 3.0", run="")
    path.write_text(text)
    rc, _, err = command_line("describe", path)
    assert rc == 2 and "rotor.speed: unknown key" in err, err


def test_library_case_sleeps_on_its_rotor(command_json):
    # sleeping-on-rotor: the shell's spin alone is far below the threshold, its total p_psi
    # above it (Goldstein sec. 5.7, from memory): the exact motion stays within 2 deg.
    rc, info, _ = command_json("describe", "sleeping-on-rotor")
    assert rc == 0 and info["kind"] == "lagrange-gyrostat"
    body = info["body"]
    i1 = body["inertia"][0]
    mgl = body["mass"] * body["gravity"] * body["com"][2]
    p_psi = info["invariants"]["p_psi"]
    shell = p_psi - body["rotor"][2]
    assert shell**2 < 0.01 * 4 * i1 * mgl < p_psi**2
    assert info["exact"]["sleeping_margin"] == pytest.approx(p_psi**2 - 4 * i1 * mgl, rel=1e-12)
    assert info["exact"]["theta_max"] < math.radians(2.0)
