"""The runner and its metrics: sampling at uniform times, step rounding, the stored trajectory
against an independent integration, resume to the same bits, and the drift-law fit."""

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.spatial.transform import Rotation
from tiny_cases import top_toml

from topdrift.benchmarks.cases.schema import parse_case
from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.metrics import axis_angle, drift_exponent, wrapped
from topdrift.benchmarks.run.runner import StopFlag, execute, make_run_id, plan_run
from topdrift.benchmarks.store import reader
from topdrift.benchmarks.store import writer as store
from topdrift.integrators import MethodRefused

# The runner's top starts off its steady motion: a tilt rate and phases, at 300 rpm.
RUNNER_START = {"phi": 0.3, "psi": -0.2, "theta_rate": 0.5, "psi_rate": "300 rpm"}
TOP_TOML = top_toml(
    "runner-top",
    "a heavy symmetric top for the runner tests",
    horizon=0.5,
    samples=11,
    **RUNNER_START,
)
ASYM_TOML = top_toml(
    "runner-asym",
    "a heavy symmetric top for the runner tests",
    horizon=0.5,
    samples=11,
    inertia=(0.02, 0.025, 0.01),
    **RUNNER_START,
)


@pytest.fixture(scope="module")
def top():
    return parse_case(TOP_TOML, "runner-top.toml")


class StopAfter(StopFlag):
    """Asks to stop after a number of look-ups, as a signal arriving mid-run would."""

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


def _run(plan, path, **kw):
    f = store.open_writer(path)
    try:
        return execute(plan, f, **kw)
    finally:
        f.close()


def _euler_poisson(body):
    """Body-form equations written out again here in numpy, independent of the kernels:
    m' = m x w + M g (Gamma x chi), q' = q (0, w)/2 (Euler-Poisson; Goldstein sec. 5.6) [from
    memory]."""
    inertia = np.array(body.inertia)
    mg_chi = body.weight * np.array(body.com)

    def f(_t, y):
        q, m = y[:4], y[4:]
        w = m / inertia
        rot = Rotation.from_quat([q[1], q[2], q[3], q[0]])  # scipy is scalar last
        gamma = rot.inv().apply([0.0, 0.0, 1.0])
        dm = np.cross(m, w) + np.cross(gamma, mg_chi)
        q0, qv = q[0], q[1:]
        dq0 = -0.5 * qv @ w
        dqv = 0.5 * (q0 * w + np.cross(qv, w))
        return np.concatenate([[dq0], dqv, dm])

    return f


def test_samples_step_rounding_and_trajectory_against_scipy(top, tmp_path):
    plan = plan_run(top, "gauss6", step=0.0003)
    interval = 0.5 / 10
    per = math.ceil(interval / 0.0003)
    assert plan.settings["step_requested"] == 0.0003
    assert plan.settings["step"] == interval / per
    assert plan.settings["step"] <= 0.0003
    assert plan.notes and "rounded down" in plan.notes[0]
    r = _run(plan, tmp_path / "r.h5", flush_every=0.0)
    assert r.status == "ok"
    assert r.metrics["steps"] == per * 10
    with reader.open_reader(tmp_path / "r.h5") as f:
        g = f["runs"][plan.run_id]
        t = g["t"][()]
        quat = g["quaternion"][()]
        mom = g["momentum"][()]
        eul = g["euler"][()]
        energy = g["invariants/energy"][()]
    # Uniform sample times with both ends included.
    assert t[0] == 0.0 and t[-1] == 0.5 and t.shape == (11,)
    assert np.allclose(np.diff(t), interval, rtol=1e-12)
    # Against scipy's DOP853 on the equations written out independently (reference library).
    y0 = top.state("body")
    ref = solve_ivp(
        _euler_poisson(top.body), (0, 0.5), y0, method="DOP853", t_eval=t, rtol=1e-12, atol=1e-14
    )
    assert np.allclose(quat, ref.y[:4].T, atol=1e-8)
    assert np.allclose(mom, ref.y[4:].T, atol=1e-9)
    # The folded Euler angles against scipy's intrinsic z-x-z decomposition.
    rot = Rotation.from_quat(np.column_stack([quat[:, 1:], quat[:, 0]]))
    zxz = rot.as_euler("ZXZ")
    assert np.allclose(eul[:, 1], zxz[:, 1], atol=1e-12)
    assert np.max(np.abs(wrapped(eul[:, 0] - zxz[:, 0]))) < 1e-10
    assert np.max(np.abs(wrapped(eul[:, 2] - zxz[:, 2]))) < 1e-10
    # Energy as T + V from the stored momentum and attitude (H = m.I^-1 m / 2 + M g chi.Gamma).
    inertia = np.array(top.body.inertia)
    gamma = rot.inv().apply([0.0, 0.0, 1.0])
    h = 0.5 * np.sum(mom**2 / inertia, axis=1) + top.body.weight * gamma @ np.array(top.body.com)
    assert np.allclose(energy, h, rtol=1e-12)
    e_rel = np.max(np.abs(energy - energy[0])) / abs(energy[0])
    assert r.metrics["energy_rel_max"] == pytest.approx(e_rel, rel=1e-12, abs=1e-300)


def test_adaptive_run_uses_dense_output_at_samples(top, tmp_path):
    plan = plan_run(top, "rk45", rtol=1e-10, atol=1e-12, form="body")
    r = _run(plan, tmp_path / "r.h5")
    assert r.status == "ok"
    assert r.metrics["rejected"] >= 0 and r.metrics["rhs_evals"] > r.metrics["steps"]
    with reader.open_reader(tmp_path / "r.h5") as f:
        g = f["runs"][plan.run_id]
        quat, mom, t = g["quaternion"][()], g["momentum"][()], g["t"][()]
    ref = solve_ivp(
        _euler_poisson(top.body),
        (0, 0.5),
        top.state("body"),
        method="DOP853",
        t_eval=t,
        rtol=1e-12,
        atol=1e-14,
    )
    assert np.allclose(quat, ref.y[:4].T, atol=1e-7)
    assert np.allclose(mom, ref.y[4:].T, atol=1e-8)


def test_interrupt_then_resume_gives_the_same_bits(top, tmp_path):
    plan = plan_run(top, "gauss4", step=0.001, samples=41, horizon=2.0)
    whole = _run(plan, tmp_path / "whole.h5")

    part = _run(plan, tmp_path / "part.h5", stop=StopAfter(15))
    assert part.status == "interrupted"
    with reader.open_reader(tmp_path / "part.h5") as f:
        g = f["runs"][plan.run_id]
        assert g.attrs["status"] == "interrupted"
        assert 0 < g["t"].shape[0] < 41
    done = _run(plan, tmp_path / "part.h5", resume=True)
    assert done.status == "ok"
    for k in (
        "energy_rel_max",
        "p_phi_rel_max",
        "attitude_angle_max",
        "steps",
        "rhs_evals",
        "energy_drift_exponent",
    ):
        assert done.metrics[k] == whole.metrics[k]
    with (
        reader.open_reader(tmp_path / "whole.h5") as fa,
        reader.open_reader(tmp_path / "part.h5") as fb,
    ):
        ga, gb = fa["runs"][plan.run_id], fb["runs"][plan.run_id]
        names = []
        ga.visititems(lambda n, o: names.append(n) if hasattr(o, "shape") else None)
        for n in names:
            if not n.startswith("checkpoint"):
                assert ga[n][()].tobytes() == gb[n][()].tobytes(), n


def test_refusals_and_bad_settings(top):
    asym = parse_case(ASYM_TOML, "runner-asym.toml")
    with pytest.raises(MethodRefused, match="Euler-angle form"):
        plan_run(asym, "gauss4", step=0.001, form="euler")
    with pytest.raises(UserError, match="--step"):
        plan_run(top, "gauss4", rtol=1e-8)
    with pytest.raises(UserError, match="--rtol"):
        plan_run(top, "rk45", step=0.01)
    with pytest.raises(UserError, match="--samples"):
        plan_run(top, "gauss4", step=0.01, samples=1)
    with pytest.raises(UserError, match="--step"):
        plan_run(top, "gauss4", step=-1.0)


def test_run_id_is_stable_and_tells_settings_apart(top):
    a = plan_run(top, "gauss4", step=0.001)
    b = plan_run(top, "gauss4", step=0.001)
    c = plan_run(top, "gauss4", step=0.002)
    d = plan_run(top, "gauss4", step=0.001, form="body")
    assert a.run_id == b.run_id
    assert len({a.run_id, c.run_id, d.run_id}) == 3
    assert make_run_id("x", "m", "body", {"step": 0.1}, 1.0, 3) == make_run_id(
        "x", "m", "body", {"step": 0.1}, 1.0, 3
    )


def test_wrapped_difference_and_axis_angle():
    assert wrapped(np.array([2 * math.pi - 1e-3]))[0] == pytest.approx(-1e-3, abs=1e-12)
    assert wrapped(np.array([math.pi + 0.5]))[0] == pytest.approx(-math.pi + 0.5)
    # Two directions 1e-9 rad apart: acos(dot) would return 0 or 1.5e-8 (half the digits lost).
    a = np.array([[1.0, 0.0, 0.0]])
    b = np.array([[math.cos(1e-9), math.sin(1e-9), 0.0]])
    assert axis_angle(a, b)[0] == pytest.approx(1e-9, rel=1e-6)


@pytest.mark.parametrize("power", [0.0, 0.5, 1.0, 2.0])
def test_drift_exponent_recovers_power_laws(power):
    # A running maximum growing like t^p has log-log slope p (definition of a power law).
    t = np.linspace(0.0, 1e4, 5001)
    e = 1e-12 * np.maximum(t, 1e-300) ** power
    e[0] = 0.0
    assert drift_exponent(t, e) == pytest.approx(power, abs=1e-9)


def test_drift_exponent_of_bounded_zero_and_random_walk():
    t = np.linspace(0.0, 1e3, 20001)
    # A bounded oscillation: its running max saturates, slope near 0.
    assert abs(drift_exponent(t, 1e-6 * np.abs(np.sin(3.0 * t)))) < 0.02
    # Kept to the bit: bounded, 0.
    assert drift_exponent(t, np.zeros_like(t)) == 0.0
    # A random walk's running max grows like sqrt(t) (reflection principle; Feller vol. 1,
    # ch. III) [from memory]; with a fixed seed the fitted slope lands near 0.5.
    rng = np.random.default_rng(7)
    walk = np.abs(np.cumsum(rng.standard_normal(t.size)))
    assert drift_exponent(t, walk) == pytest.approx(0.5, abs=0.2)
    # Too few samples for a fit.
    assert drift_exponent(np.array([0.0, 1.0]), np.array([0.0, 1.0])) is None


def test_a_failing_reference_ends_the_run_as_failed_without_nan(top, tmp_path):
    plan = plan_run(top, "gauss4", step=0.001)
    good = plan.exact

    class BreaksLate:
        """The exact solution, raising past t = 0.2 as a broken reference would (the runner
        asks it for the folded angles)."""

        def folded(self, t):
            if np.max(t) > 0.2:
                raise ValueError("cannot convert float NaN to integer")
            return good.folded(t)

    plan.exact = BreaksLate()
    r = _run(plan, tmp_path / "r.h5", flush_every=0.0)
    assert r.status == "failed" and "exact solution failed" in r.detail
    with reader.open_reader(tmp_path / "r.h5") as f:
        g = f["runs"][plan.run_id]
        assert g.attrs["status"] == "failed"
        n = g["t"].shape[0]
        assert 0 < n < 11 and g["exact/euler"].shape[0] == n
        assert np.all(np.isfinite(g["exact/euler"][()]))


@pytest.mark.parametrize("stop_after", [3, 10, 23])
def test_long_intervals_in_pieces_resume_to_the_same_bits(top, tmp_path, monkeypatch, stop_after):
    """An interval longer than CHUNK_STEPS is advanced in pieces; a stop inside one rolls back
    to the last sample, and the resumed run repeats the bits of one that never stopped."""
    from topdrift.benchmarks.run import runner

    monkeypatch.setattr(runner, "CHUNK_STEPS", 7)
    plan = plan_run(top, "leapfrog", step=0.001, form="body")  # 50 steps per interval
    assert plan.settings["steps_per_sample"] == 50
    whole = _run(plan, tmp_path / "whole.h5")
    assert whole.status == "ok" and whole.metrics["steps"] == 500
    part = _run(plan, tmp_path / "part.h5", stop=StopAfter(stop_after))
    assert part.status == "interrupted"
    with reader.open_reader(tmp_path / "part.h5") as f:
        g = f["runs"][plan.run_id]
        k = g["checkpoint/run"].attrs["sample"]
        assert g["t"].shape[0] == k
        # The checkpoint's step count is that of sample k - 1, not of a piece past it.
        assert g["checkpoint/run/counters"][0] == 50 * (k - 1)
    done = _run(plan, tmp_path / "part.h5", resume=True)
    assert done.status == "ok" and done.metrics["steps"] == 500
    with (
        reader.open_reader(tmp_path / "whole.h5") as fa,
        reader.open_reader(tmp_path / "part.h5") as fb,
    ):
        ga, gb = fa["runs"][plan.run_id], fb["runs"][plan.run_id]
        for n in ("t", "state", "euler", "quaternion", "momentum", "invariants/energy"):
            assert ga[n][()].tobytes() == gb[n][()].tobytes(), n


def test_progress_bar_on_a_terminal_and_lines_otherwise():
    import io

    from topdrift.benchmarks.run.progress import Progress

    tty = io.StringIO()
    p = Progress("case m 0123abcd", 100, stream=tty, tty=True)
    p.begin(0, 0)
    p.update(50, 5_000_000)
    p.update(100, 10_000_000)
    p.end("ok")
    out = tty.getvalue()
    assert "\r" in out and "[" + "#" * 24 + "]" in out and "steps/s" in out and "left" in out
    plain = io.StringIO()
    p = Progress("case m 0123abcd", 100, stream=plain, tty=False)
    p.begin(0, 0)
    p.update(50, 5_000_000)  # no bar drawn off a terminal
    p.flushed(50, 5_000_000)
    p.end("ok")
    lines = plain.getvalue().splitlines()
    assert "\r" not in plain.getvalue() and len(lines) == 3
    assert "flushed sample 50/100, 5000000 steps" in lines[1] and lines[2].endswith("ok after 0s")
