"""The gravity-gradient field (models/fields.py) against outside references.

- The kernels against an independent formulation (tests/gg_reference.py: inertial axes,
  rotation matrices, a time-dependent direction to the primary, scipy DOP853 at rtol 1e-13).
- The small pitch libration: frequency n sqrt(3 (I1 - I3) / I2) for principal axes 1, 2, 3 along
  e_x, e_y, e_z (Hughes, Spacecraft Attitude Dynamics, 1986, ch. 9, and Wie, Space Vehicle
  Dynamics and Control, 1998, sec. 6.3; from memory: the equation numbers are not checked
  here). Planar pitch is exactly the pendulum I2 theta'' = -(3 n^2 / 2)(I1 - I3) sin 2 theta,
  u = 2 theta obeys u'' = -w0^2 sin u, so the exact period is 4 K(sin^2 theta0) / w0 (the
  pendulum's period through the complete elliptic integral K, common practice; scipy.special.
  ellipk), which lies below the linear frequency by about theta0^2 / 4 (u0^2 / 16, the
  pendulum's amplitude correction): -7.6e-5 at 1 deg.
- The roll-yaw frequencies from the classical characteristic equation
  w^4 - (1 + 3 k1 + k1 k3) n^2 w^2 + 4 k1 k3 n^4 = 0, k1 = (I2 - I3) / I1, k3 = (I2 - I1) / I3
  (1 roll along the velocity, 2 pitch along e_y, 3 yaw toward nadir; Wie 1998 sec. 6.3 and
  Hughes 1986 ch. 9, from memory). The signs were checked here the only way that counts: the
  measured frequencies approach the roots as the amplitude squared.
- The stable attitude (I2 > I1 > I3) stays put; the Jacobi integral is bounded for a symplectic
  method over 10^6 steps and drifts for a non-symplectic one (common practice).
"""

from __future__ import annotations

import json
import math

import gg_reference as ref
import numpy as np
import pytest
from scipy.interpolate import CubicSpline
from scipy.optimize import least_squares
from scipy.special import ellipk

from topdrift.benchmarks.cases.library import load_case
from topdrift.benchmarks.cases.schema import parse_case
from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.in_memory import run_in_memory
from topdrift.benchmarks.run.runner import plan_run
from topdrift.integrators import MethodRefused, all_methods, get
from topdrift.models.forms import FORM_BODY, body_state
from topdrift.models.invariants import invariants_of

PITCH = load_case("gg-pitch-libration")
TUMBLE = load_case("gg-roll-yaw-tumble")
N = PITCH.body.field.orbit_rate
I1, I2, I3 = PITCH.body.inertia
TIGHT = {"rtol": 1e-12, "atol": 1e-15}


def attitude(y) -> np.ndarray:
    return ref.quaternion_matrix(y[:4])


def follow(name, settings, case, times, y0=None):
    """Relative attitude matrices of a method's run at the times."""
    y0 = case.body_state() if y0 is None else y0
    st = get(name).start(FORM_BODY, case.body.params(), 0.0, y0, settings)
    out = []
    for t in times:
        st.advance_to(t)
        assert st.status == 0, (name, st.status)
        out.append(attitude(st.y))
    return out


@pytest.fixture(scope="module")
def tumble_reference():
    s = TUMBLE.start
    r0, w0 = ref.start(s.phi, s.theta, s.psi, s.phi_rate, s.theta_rate, s.psi_rate, N)
    times = np.linspace(0.0, 7200.0, 9)
    rel, w = ref.integrate(TUMBLE.body.inertia, N, r0, w0, times)
    return times, rel, w


def test_the_start_and_the_jacobi_integral_agree_with_the_reference(tumble_reference):
    s = TUMBLE.start
    r0, w0 = ref.start(s.phi, s.theta, s.psi, s.phi_rate, s.theta_rate, s.psi_rate, N)
    y0 = TUMBLE.body_state()
    assert np.max(np.abs(attitude(y0) - r0)) < 1e-15
    assert np.max(np.abs(y0[4:] - np.asarray(TUMBLE.body.inertia) * w0)) < 1e-15
    times, rel, w = tumble_reference
    j = ref.jacobi(TUMBLE.body.inertia, N, rel, w)
    assert np.max(np.abs(j - j[0])) < 1e-12 * abs(j[0])  # the reference keeps it
    mine = invariants_of(FORM_BODY, y0, TUMBLE.body.params())
    assert mine["energy"] == pytest.approx(j[0], rel=1e-14)


@pytest.mark.parametrize(
    "name,settings,bound",
    [
        ("dop853", TIGHT, 1e-8),
        ("rk45", {"rtol": 1e-11, "atol": 1e-14}, 1e-7),
        ("gbs", {"rtol": 1e-11, "atol": 1e-14}, 1e-7),
        ("scipy-dop853", {"rtol": 1e-11, "atol": 1e-14}, 1e-7),
        ("rk4", {"step": 5.0}, 5e-6),
        ("gauss6", {"step": 20.0}, 1e-7),
        ("leapfrog-kl6", {"step": 10.0}, 1e-7),
        ("leapfrog-s4-axes", {"step": 5.0}, 1e-5),
        ("leapfrog-proc6", {"step": 10.0}, 1e-7),
        ("lie-rkmk4", {"step": 5.0}, 5e-7),
    ],
)
def test_the_kernels_follow_the_independent_reference(tumble_reference, name, settings, bound):
    times, rel, _ = tumble_reference
    got = follow(name, settings, TUMBLE, times)
    err = max(ref.rotation_angle(a, b) for a, b in zip(got, rel, strict=True))
    assert err < bound, (name, err)


@pytest.mark.parametrize(
    "name,order",
    [("leapfrog", 2), ("leapfrog-composed", 2), ("leapfrog-kahan", 2), ("leapfrog-s4", 4),
     ("midpoint", 2), ("engine-semi-implicit", 1), ("engine-euler", 1),
     ("engine-implicit-gyro", 1), ("lie-cg3", 3)],
)  # fmt: skip
def test_fixed_step_methods_converge_to_the_reference_at_their_order(tumble_reference, name, order):
    times, rel, _ = tumble_reference
    errs = []
    for h in (10.0, 5.0):
        got = follow(name, {"step": h}, TUMBLE, times)
        errs.append(max(ref.rotation_angle(a, b) for a, b in zip(got, rel, strict=True)))
    ratio = errs[0] / errs[1]
    assert 2.0**order * 0.8 < ratio < 2.0**order * 1.25, (name, errs, ratio)


def pitch_angle(r: np.ndarray) -> float:
    """theta of Rot(e_y, theta) = [[c, 0, s], [0, 1, 0], [-s, 0, c]]."""
    return math.atan2(r[0, 2], r[2, 2])


def test_the_small_pitch_libration_has_the_textbook_frequency():
    times = np.arange(0.0, PITCH.horizon + 1.0, 10.0)
    pitch = np.array([pitch_angle(r) for r in follow("dop853", TIGHT, PITCH, times)])
    spline = CubicSpline(times, pitch)
    ups = [t for t in spline.roots(extrapolate=False) if spline(t, 1) > 0.0]
    assert len(ups) >= 9
    measured = 2.0 * math.pi * (len(ups) - 1) / (ups[-1] - ups[0])
    linear = N * math.sqrt(3.0 * (I1 - I3) / I2)
    theta0 = PITCH.start.theta
    exact = linear * math.pi / (2.0 * ellipk(math.sin(theta0) ** 2))
    assert abs(measured / linear - 1.0) < 1e-4  # the check, at 1 deg
    # below it by the pendulum's amplitude correction theta0^2 / 4, to its own next order
    assert measured / linear - 1.0 == pytest.approx(-(theta0**2) / 4.0, rel=1e-3)
    assert abs(measured / exact - 1.0) < 1e-8  # and the exact pendulum, all but round-off
    # roll and yaw stay zero: the planar pitch motion is an invariant set
    st = get("dop853").start(FORM_BODY, PITCH.body.params(), 0.0, PITCH.body_state(), TIGHT)
    st.advance_to(PITCH.horizon)
    r = attitude(st.y)
    assert abs(r[1, 0]) < 1e-12 and abs(r[2, 1]) < 1e-12 and abs(r[1, 1] - 1.0) < 1e-12


def roll_yaw_roots() -> tuple[float, float]:
    k1 = (I2 - I3) / I1
    k3 = (I2 - I1) / I3
    b = 1.0 + 3.0 * k1 + k1 * k3
    c = 4.0 * k1 * k3
    d = math.sqrt(b * b - 4.0 * c)
    return N * math.sqrt(0.5 * (b - d)), N * math.sqrt(0.5 * (b + d))


def measured_roll_yaw(amplitude_deg: float) -> np.ndarray:
    """The two frequencies in the roll angle of a small roll-yaw motion, from the FFT's two
    highest peaks refined by a least-squares fit of two sinusoids (common practice)."""
    slow, _ = roll_yaw_roots()
    horizon = 20.0 * 2.0 * math.pi / slow
    times = np.linspace(0.0, horizon, 4001)
    a = math.radians(amplitude_deg)
    y0 = body_state(PITCH.body, 0.0, a, 0.0, 0.2 * a * N, 0.0, 0.0)  # roll, and a yaw rate
    roll = np.array([r[2, 1] for r in follow("dop853", TIGHT, PITCH, times, y0)])
    roll /= np.max(np.abs(roll))
    pad = 16 * len(roll)
    spec = np.abs(np.fft.rfft(roll * np.hanning(len(roll)), pad))
    freq = 2.0 * math.pi * np.fft.rfftfreq(pad, times[1] - times[0])
    peaks = [i for i in range(1, len(spec) - 1) if spec[i - 1] < spec[i] > spec[i + 1]]
    peaks = sorted(peaks, key=lambda i: -spec[i])
    # the highest peak, and the highest one at least a fifth away from it (not its side lobe)
    other = next(i for i in peaks if abs(freq[i] - freq[peaks[0]]) > 0.2 * freq[peaks[0]])
    guess = sorted((freq[peaks[0]], freq[other]))

    def resid(x):
        return (
            x[2] * np.cos(x[0] * times) + x[3] * np.sin(x[0] * times)
            + x[4] * np.cos(x[1] * times) + x[5] * np.sin(x[1] * times) - roll
        )  # fmt: skip

    fit = least_squares(resid, [*guess, 0.0, 0.0, 0.0, 0.0], x_scale=[1e-4, 1e-4, 1, 1, 1, 1])
    assert np.max(np.abs(fit.fun)) < 1e-4
    return np.sort(fit.x[:2])


def test_the_roll_yaw_frequencies_are_the_roots_of_the_characteristic_equation():
    roots = np.array(roll_yaw_roots())
    small = measured_roll_yaw(0.1) / roots - 1.0
    assert np.all(np.abs(small) < 1e-4), small
    # the rest is the amplitude's: five times the amplitude, 25 times the offset (within 20 %)
    large = measured_roll_yaw(0.5) / roots - 1.0
    assert 20.0 < large[0] / small[0] < 30.0, (large, small)


def test_the_stable_attitude_stays_put():
    assert I2 > I1 > I3  # the stable attitude of the axes
    y0 = body_state(PITCH.body, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0)
    st = get("leapfrog").start(FORM_BODY, PITCH.body.params(), 0.0, y0, {"step": 20.0})
    st.advance_to(20.0 * 100_000)
    assert ref.rotation_angle(attitude(st.y), np.eye(3)) < 1e-9
    # knocked by 1 deg in roll and yaw, it stays within a few degrees (no instability grows)
    a = math.radians(1.0)
    y1 = body_state(PITCH.body, a, a, 0.0, 0.0, 0.0, 0.0)
    st = get("leapfrog").start(FORM_BODY, PITCH.body.params(), 0.0, y1, {"step": 20.0})
    worst = 0.0
    for k in range(1, 101):
        st.advance_to(20.0 * 1000 * k)
        worst = max(worst, ref.rotation_angle(attitude(st.y), np.eye(3)))
    assert worst < math.radians(5.0), math.degrees(worst)


def jacobi_errors(name, h, steps, blocks=100):
    p = TUMBLE.body.params()
    y0 = TUMBLE.body_state()
    j0 = invariants_of(FORM_BODY, y0, p)["energy"]
    st = get(name).start(FORM_BODY, p, 0.0, y0, {"step": h})
    out = []
    for k in range(1, blocks + 1):
        st.advance_to(h * steps * k / blocks)
        out.append(abs(invariants_of(FORM_BODY, st.y, p)["energy"] / j0 - 1.0))
    return np.array(out)


def test_the_jacobi_integral_is_bounded_for_a_symplectic_method_over_a_million_steps():
    lf = jacobi_errors("leapfrog", 40.0, 1_000_000)
    assert lf.max() < 1e-3
    assert lf.max() < 1.5 * lf[:10].max(), (lf[:10].max(), lf.max())  # bounded, not growing
    rk = jacobi_errors("rk4", 40.0, 1_000_000)
    assert rk[-1] > 5.0 * rk[:10].max(), (rk[:10].max(), rk[-1])  # drifts


def test_metrics_that_are_no_invariants_in_the_field_are_null():
    plan = plan_run(TUMBLE, "leapfrog", form="body", step=20.0, horizon=2000.0, samples=11)
    run = run_in_memory(plan)
    assert run.status == "ok"
    m = run.metrics
    assert m["p_phi_rel_max"] is None and m["p_psi_rel_max"] is None
    assert m["kovalevskaya_rel_max"] is None and m["axis_angle_max"] is None
    assert m["energy_rel_max"] is not None and 0.0 < m["energy_rel_max"] < 1e-3
    assert m["norm_abs_max"] is not None


def test_the_euler_form_is_refused():
    with pytest.raises(MethodRefused, match="Euler-angle form"):
        plan_run(PITCH, "leapfrog", form="euler", step=10.0, horizon=100.0, samples=3)


@pytest.mark.parametrize("name", sorted(m.name for m in all_methods()))
def test_every_method_runs_the_field_or_refuses_it(tumble_reference, name):
    method = get(name)
    setting = {"step": 4.0} if method.info.control == "step" else {"rtol": 1e-10}
    if "body" not in method.info.forms:
        # an Euler-form-only method (the variable-step splittings): the field has no Euler form
        # and the method no body form, so it is refused by the form, before the field is asked
        with pytest.raises(MethodRefused, match="euler form only"):
            plan_run(TUMBLE, name, form="body", horizon=7200.0, samples=9, **setting)
        with pytest.raises(MethodRefused, match="Euler-angle form"):
            plan_run(TUMBLE, name, form="euler", horizon=7200.0, samples=9, **setting)
        return
    try:
        plan = plan_run(TUMBLE, name, form="body", horizon=7200.0, samples=9, **setting)
    except MethodRefused as exc:
        assert "gravity" in str(exc), exc
        assert name in ("rattle", "lie-galpha", "lie-galpha-undamped", "taylor-adaptive")
        return
    run = run_in_memory(plan)
    assert run.status == "ok", (name, run.detail)
    with run.open() as f:
        (g,) = f["runs"].values()
        q = g["quaternion"][()]
    _, rel, _ = tumble_reference
    err = max(ref.rotation_angle(attitude(row), r) for row, r in zip(q, rel, strict=True))
    if method.info.order > 1:
        assert err < 1e-3, (name, err)
        return
    # a first-order scheme is far off at this step: it must converge (half the step, about half
    # the error), which a kernel that ignored the field or the turning frame could not
    half = run_in_memory(plan_run(TUMBLE, name, form="body", horizon=7200.0, samples=9, step=2.0))
    with half.open() as f:
        (g,) = f["runs"].values()
        q = g["quaternion"][()]
    err2 = max(ref.rotation_angle(attitude(row), r) for row, r in zip(q, rel, strict=True))
    assert 0.4 < err2 / err < 0.6, (name, err, err2)


BAD = """
name = "bad"
description = "x"
horizon = 10.0
samples = 3
[body]
mass = 1.0
inertia = [1.0, 2.0, 1.5]
com = [{com}]
[field]
{field}
[start]
theta = 0.1
phi = 0.0
psi = 0.0
theta_rate = 0.0
phi_rate = 0.0
psi_rate = 0.0
"""


@pytest.mark.parametrize(
    "com,field,says",
    [
        ("0, 0, 0", 'kind = "magnetic"', "field.kind: 'magnetic': no such field"),
        ("0, 0, 0", 'kind = "gravity-gradient"\norbit_rate = 0.0', "field.orbit_rate"),
        ("0, 0, 0", 'kind = "gravity-gradient"\norbit_rate = "-1 rad/s"', "must be positive"),
        ("0, 0, 0", 'kind = "gravity-gradient"', "field.orbit_rate: missing"),
        ("0, 0, 0.1", 'kind = "gravity-gradient"\norbit_rate = 0.001', "body.com: must be zero"),
        ("0, 0, 0", "orbit_rate = 0.001", "uniform gravity has no orbit"),
    ],
)
def test_bad_field_input_is_one_line(com, field, says):
    with pytest.raises(UserError) as exc:
        parse_case(BAD.format(com=com, field=field), "bad.toml")
    msg = str(exc.value)
    assert says in msg and "\n" not in msg, msg


def test_an_ensemble_in_the_field_nulls_the_same_metrics(tmp_path):
    import h5py

    from topdrift.benchmarks.cli import entry as cli

    out = tmp_path / "e.h5"
    argv = ["run", "gg-pitch-libration", "--method", "leapfrog", "--step", "40", "--ensemble",
            "4", "--horizon", "4000", "--out", str(out)]  # fmt: skip
    assert cli.main(argv) == 0
    with h5py.File(out, "r") as f:
        (g,) = f["runs"].values()
        m = json.loads(g.attrs["metrics"])
    assert m["p_phi_rel_max"] is None and m["p_psi_rel_max"] is None
    assert 0.0 < m["energy_rel_max"] < 1e-4


@pytest.mark.parametrize(
    "argv,says",
    [
        (["roundoff", "gg-pitch-libration", "--method", "leapfrog", "--step", "40"],
         "no gravity-gradient field"),
        (["run", "gg-pitch-libration", "--method", "rattle", "--step", "40", "--horizon", "400"],
         "uniform-gravity torque"),
        (["run", "gg-pitch-libration", "--method", "leapfrog", "--form", "euler", "--step", "40",
          "--horizon", "400"], "needs uniform gravity"),
    ],
)  # fmt: skip
def test_commands_that_cannot_take_the_field_refuse_it_in_one_line(tmp_path, capsys, argv, says):
    from topdrift.benchmarks.cli import entry as cli

    out = tmp_path / "r.h5"
    rc = cli.main([*argv, *(["--out", str(out)] if argv[0] == "run" else [])])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1 and says in err[0], (rc, err)
    assert not out.exists()
