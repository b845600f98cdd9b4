"""The whole-attitude error (attitude_angle_max): the formula against scipy's rotations, and a
run that loses its spin phase while its figure axis stays exact, which the axis error cannot see
and the attitude error must."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation
from tiny_cases import top_toml

from topdrift.benchmarks.cases.schema import parse_case
from topdrift.benchmarks.run.metrics import attitude_angle, euler_quaternions
from topdrift.benchmarks.run.runner import StopFlag, execute, plan_run
from topdrift.benchmarks.store import reader
from topdrift.benchmarks.store import writer as store

# An upright sleeping top (theta = 0 exactly, no precession, spin 100 rad/s): the gravity torque
# is zero, so the body spins about its figure axis at a constant rate and the figure axis stays
# vertical. A demo scenario of our own.
SPIN = 100.0  # rad/s
UPRIGHT = dict(theta=0.0, phi=0.0, psi=0.0, theta_rate=0.0, phi_rate=0.0, psi_rate=SPIN)


def _upright(horizon: float, samples: int):
    text = top_toml(
        "upright-spin", "an upright sleeping top", horizon=horizon, samples=samples, **UPRIGHT
    )
    return parse_case(text, "upright-spin.toml")


def _scipy_angles(q: np.ndarray, q_ref: np.ndarray) -> np.ndarray:
    # Independent computation: scipy.spatial.transform.Rotation (scalar-last quaternions),
    # the magnitude of R_ref^-1 R.
    r = Rotation.from_quat(np.roll(q, -1, axis=1))
    r_ref = Rotation.from_quat(np.roll(q_ref, -1, axis=1))
    return (r_ref.inv() * r).magnitude()


def test_attitude_angle_against_scipy_rotations():
    rng = np.random.default_rng(20261202)
    q_ref = rng.normal(size=(400, 4))
    q_ref /= np.linalg.norm(q_ref, axis=1)[:, None]
    # Rotations of every size away from the reference, small ones included, where the acos form
    # would lose half the digits; sign flips (q and -q are one attitude) and a drifted norm.
    angles = np.concatenate((np.geomspace(1e-12, 1e-3, 100), rng.uniform(0.0, math.pi, 300)))
    axes = rng.normal(size=(400, 3))
    axes /= np.linalg.norm(axes, axis=1)[:, None]
    turn = np.column_stack((np.cos(angles / 2), np.sin(angles / 2)[:, None] * axes))
    q = np.array([_mul(a, b) for a, b in zip(q_ref, turn, strict=True)])
    q[::3] *= -1.0
    q[1::3] *= 1.0 + 1e-3
    got = attitude_angle(q, q_ref)
    ref = _scipy_angles(q / np.linalg.norm(q, axis=1)[:, None], q_ref)
    assert np.allclose(got, ref, rtol=1e-9, atol=1e-15)
    # and against the angles built in, to the rounding of the composed quaternions (ulps of 1)
    assert np.allclose(got, angles, rtol=1e-12, atol=1e-15)


def test_small_attitude_angles_keep_their_relative_accuracy():
    # From the identity the vector part of q is the only carrier of a small angle: the atan2 form
    # keeps it to a few ulps, relative (2 acos of the scalar part would return 0 below 1e-8).
    angles = np.geomspace(1e-15, 1e-3, 40)
    n = np.array([2.0, -1.0, 2.0]) / 3.0
    q = np.column_stack((np.cos(angles / 2), np.sin(angles / 2)[:, None] * n))
    q_ref = np.tile([1.0, 0.0, 0.0, 0.0], (40, 1))
    assert np.allclose(attitude_angle(q, q_ref), angles, rtol=1e-14, atol=0.0)
    assert np.allclose(attitude_angle(q_ref, q), angles, rtol=1e-14, atol=0.0)


def _mul(a, b):
    # Hamilton product (common practice), written out again here
    a0, a1, a2, a3 = a
    b0, b1, b2, b3 = b
    return (
        a0 * b0 - a1 * b1 - a2 * b2 - a3 * b3,
        a0 * b1 + a1 * b0 + a2 * b3 - a3 * b2,
        a0 * b2 - a1 * b3 + a2 * b0 + a3 * b1,
        a0 * b3 + a1 * b2 - a2 * b1 + a3 * b0,
    )


def test_euler_quaternions_match_scipy_zxz():
    # scipy's intrinsic z-x-z Euler angles ("ZXZ"): R = Rz(phi) Rx(theta) Rz(psi)
    rng = np.random.default_rng(7)
    e = np.column_stack(
        (rng.uniform(-math.pi, math.pi, 50), rng.uniform(0, math.pi, 50), rng.uniform(-3, 3, 50))
    )
    q = euler_quaternions(e)
    r = Rotation.from_euler("ZXZ", e)
    assert np.allclose(
        (r.inv() * Rotation.from_quat(np.roll(q, -1, axis=1))).magnitude(), 0.0, atol=1e-14
    )


def _rk4_spin_error(step: float, n_steps: np.ndarray) -> np.ndarray:
    """The spin-phase error of RK4 on q' = q (0, w)/2 at constant w = SPIN e3, after n steps: each
    step multiplies q by R(i a/2), a = w h, where R(z) = 1 + z + z^2/2 + z^3/6 + z^4/24 is the
    stability function of the classical RK4 (Hairer, Norsett & Wanner, Solving ODEs I, sec. II.1,
    from memory: the degree-4 Taylor polynomial of exp), so the rotation per step is
    2 arg R(i a/2) against a exactly. The attitude error is that phase difference folded to
    [0, pi]."""
    z = 0.5j * SPIN * step
    r = 1 + z + z**2 / 2 + z**3 / 6 + z**4 / 24
    per_step = 2.0 * np.angle(r) - SPIN * step
    return np.abs(np.angle(np.exp(1j * n_steps * per_step)))


def _run(plan, path, **kw):
    f = store.open_writer(path)
    try:
        return execute(plan, f, **kw)
    finally:
        f.close()


def test_attitude_catches_the_lost_spin_phase_the_axis_error_misses(tmp_path):
    # rk4 at a w h = 0.8: the figure axis stays exactly vertical (no axis error at all), while the
    # spin phase runs away by 1.6e-4 rad a step and is lost (2 rad) after 12500 steps.
    case = _upright(100.0, 101)
    plan = plan_run(case, "rk4", step=0.008, form="body")
    res = _run(plan, tmp_path / "r.h5")
    assert res.status == "ok"
    m = res.metrics
    h = 100.0 / m["steps"]
    predicted = _rk4_spin_error(h, np.arange(101) * (m["steps"] // 100))
    assert m["axis_angle_max"] < 1e-14
    assert m["attitude_angle_max"] > 1.0
    assert m["attitude_angle_max"] == pytest.approx(float(predicted.max()), rel=1e-9)
    # the per-sample attitude errors from the stored quaternions, through scipy
    with reader.open_reader(tmp_path / "r.h5") as f:
        g = f["runs"][plan.run_id]
        q, ee = g["quaternion"][()], g["exact/euler"][()]
    ref = _scipy_angles(q / np.linalg.norm(q, axis=1)[:, None], euler_quaternions(ee))
    assert np.allclose(ref, predicted, rtol=1e-8, atol=1e-12)
    assert m["attitude_angle_max"] == pytest.approx(float(ref.max()), rel=1e-12)


class _StopAfter(StopFlag):
    def __init__(self, n):
        super().__init__()
        self.n = n

    @property
    def requested(self):
        self.n -= 1
        return self.n < 0

    @property
    def signum(self):
        return 2 if self.n < 0 else 0

    @signum.setter
    def signum(self, v):
        pass


def test_a_resumed_run_keeps_the_attitude_maximum_of_its_first_part(tmp_path):
    # Over 200 s the spin-phase error of the run above passes pi (at about 156 s) and falls back:
    # its maximum lies in the part before the interruption, which the checkpoint does not hold
    # (run/metrics.py, ATTITUDE_NAME); the resumed run takes it from the stored samples.
    case = _upright(200.0, 201)
    plan = plan_run(case, "rk4", step=0.008, form="body")
    whole = _run(plan, tmp_path / "whole.h5")
    part = _run(plan, tmp_path / "part.h5", stop=_StopAfter(340), flush_every=0.0)
    assert part.status == "interrupted"
    with reader.open_reader(tmp_path / "part.h5") as f:
        kept = f["runs"][plan.run_id]["t"].shape[0]
    assert 160 < kept < 201  # past the maximum (about 156 s), short of the end
    done = _run(plan, tmp_path / "part.h5", resume=True)
    assert done.status == "ok"
    assert whole.metrics["attitude_angle_max"] > 3.1
    h = 200.0 / whole.metrics["steps"]
    later = _rk4_spin_error(h, np.arange(kept, 201) * (whole.metrics["steps"] // 200))
    assert later.max() < whole.metrics["attitude_angle_max"] - 0.1  # the first part holds it
    assert done.metrics["attitude_angle_max"] == whole.metrics["attitude_angle_max"]


def test_no_exact_solution_no_attitude_error(tmp_path):
    text = top_toml(
        "asym", "three different moments", horizon=0.2, samples=5, inertia=(0.02, 0.03, 0.015)
    )
    plan = plan_run(parse_case(text, "asym.toml"), "rk4", step=0.01, form="body")
    m = _run(plan, tmp_path / "a.h5").metrics
    assert m["axis_angle_max"] is None
    assert m["attitude_angle_max"] is None


def test_near_the_pole_psi_errors_mislead_and_the_attitude_does_not(tmp_path):
    # The README's second example: sleeping-above (1 deg off the vertical) under rk4 at h = 0.01
    # s. phi and psi trade places near the pole, so their separate errors reach pi while the
    # attitude, which does not split the rotation at all, is off by a fraction of that.
    from topdrift.benchmarks.cases.library import load_case

    plan = plan_run(load_case("sleeping-above"), "rk4", step=0.01, form="body")
    m = _run(plan, tmp_path / "s.h5").metrics
    assert m["psi_abs_max"] > 3.1
    assert m["axis_angle_max"] <= m["attitude_angle_max"] < 0.2
