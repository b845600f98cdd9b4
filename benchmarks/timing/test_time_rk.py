"""Nanoseconds per step of rk4, rk45 and dop853 on one standard top, and dop853 against scipy's
DOP853 at the same tolerances on the same case.

    python -m pytest benchmarks/timing/test_time_rk.py -s

Each result carries ns_per_step in its extra_info; the comparison prints the speed ratio
scipy / topdrift per run. Target: >= 100 x against scipy calling the model's compiled
right-hand side through a small Python wrapper, as the registered method scipy-dop853 does and
the cheapest scipy can be made to run; also printed against scipy driven by a plain Python
right-hand side, the way a user would write it. Both take the same steps (checked) and end
within 10 rtol of each other (checked).
"""

from __future__ import annotations

import math
import time

import numpy as np
import pytest
from scipy.integrate import DOP853

from topdrift.integrators import C_STEPS, ST_OK, get
from topdrift.models import RigidBody, body_state, euler_state, form_code
from topdrift.models.dynamics import rhs

# A standard top of our own: 0.5 kg, I1 = I2 = 3e-3, I3 = 1e-3 kg m^2 about the pivot, centre
# of mass 4 cm up the figure axis, tilted 0.6 rad, precessing at 2 rad/s, spinning at 150 rad/s.
TOP = RigidBody(mass=0.5, inertia=(0.003, 0.003, 0.001), com=(0.0, 0.0, 0.04))
START = (0.0, 0.6, 0.0, 2.0, 0.0, 150.0)
TOL = {"rtol": 1e-8, "atol": 1e-10}
FIXED_STEP = 1e-3
FIXED_STEPS = 50_000
ADAPTIVE_SPAN = 20.0  # simulated seconds per round
ROUNDS = 5
TARGET = 100.0
FIXED = ("rk4", "rk4-kahan")


def _y0(form: str) -> np.ndarray:
    return euler_state(TOP, *START) if form == "euler" else body_state(TOP, *START)


@pytest.mark.parametrize("form", ["body", "euler"])
@pytest.mark.parametrize("name", ["rk4", "rk4-kahan", "rk45", "dop853"])
def test_rk_ns_per_step(benchmark, name, form):
    settings = {"step": FIXED_STEP} if name in FIXED else TOL
    span = FIXED_STEPS * FIXED_STEP if name in FIXED else ADAPTIVE_SPAN
    m = get(name)
    st = m.start(form_code(form), TOP.params(), 0.0, _y0(form), settings)
    assert st.advance_to(10 * FIXED_STEP) == ST_OK  # compiled (or loaded) and warm
    steps = []

    def run():
        s0 = int(st.counters[C_STEPS])
        assert st.advance_to(st.t + span) == ST_OK
        steps.append(int(st.counters[C_STEPS]) - s0)

    benchmark.pedantic(run, rounds=5, iterations=1)
    per_round = sum(steps) / len(steps)
    ns = benchmark.stats.stats.min / per_round * 1e9
    benchmark.extra_info["ns_per_step"] = ns
    benchmark.extra_info["steps_per_round"] = per_round
    print(f"\n{name:10s} {form:5s} {ns:8.1f} ns/step (best of 5, {per_round:.0f} steps/round)")


def _plain_python_rhs(p):
    """The body-form equations written the way a user would hand them to scipy."""
    inv1, inv2, inv3, mgx, mgy, mgz = p[3], p[4], p[5], p[6], p[7], p[8]

    def f(t, y):
        q0, q1, q2, q3, m1, m2, m3 = y
        w1, w2, w3 = m1 * inv1, m2 * inv2, m3 * inv3
        g1 = 2.0 * (q1 * q3 - q0 * q2)
        g2 = 2.0 * (q2 * q3 + q0 * q1)
        g3 = q0 * q0 - q1 * q1 - q2 * q2 + q3 * q3
        return np.array(
            [
                0.5 * (-q1 * w1 - q2 * w2 - q3 * w3),
                0.5 * (q0 * w1 + q2 * w3 - q3 * w2),
                0.5 * (q0 * w2 - q1 * w3 + q3 * w1),
                0.5 * (q0 * w3 + q1 * w2 - q2 * w1),
                m2 * w3 - m3 * w2 + (g2 * mgz - g3 * mgy),
                m3 * w1 - m1 * w3 + (g3 * mgx - g1 * mgz),
                m1 * w2 - m2 * w1 + (g1 * mgy - g2 * mgx),
            ]
        )

    return f


def _wrapped_model_rhs(p):
    def f(t, y):
        dy = np.empty(7)
        rhs(1, y, p, dy)
        return dy

    return f


def _scipy_run(fun, y0, t_end, h0):
    s = DOP853(fun, 0.0, y0, t_end, first_step=h0, **TOL)
    t0 = time.perf_counter()
    n = 0
    while s.status == "running":
        s.step()
        n += 1
    return time.perf_counter() - t0, n, s.y


def test_dop853_against_scipy(benchmark):
    """Both sides timed over windows of the same length, interleaved, best window each: one scipy
    run against as many back-to-back runs of ours as fill the same wall time, so that a noisy
    machine slows both alike (a best of a few short runs of ours against a best of long scipy
    runs would favour ours)."""
    p = TOP.params()
    y0 = _y0("body")
    t_end = ADAPTIVE_SPAN
    h0 = 1e-4  # the same first step for both, and the same end (scipy's t_bound = our horizon)
    settings = dict(TOL, first_step=h0, horizon=t_end)
    m = get("dop853")
    m.start(1, p, 0.0, y0, settings).advance_to(0.01)  # compiled (or loaded)
    result = {}

    def ours(reps):
        t0 = time.perf_counter()
        for _ in range(reps):
            st = m.start(1, p, 0.0, y0, settings)
            assert st.advance_to(t_end) == ST_OK
        result["steps"], result["y"] = int(st.counters[C_STEPS]), st.y
        return (time.perf_counter() - t0) / reps

    funs = {"plain Python rhs": _plain_python_rhs(p), "wrapped model rhs": _wrapped_model_rhs(p)}
    best = {label: math.inf for label in funs}
    best_ours = math.inf
    reps = max(1, int(_scipy_run(funs["wrapped model rhs"], y0, t_end, h0)[0] / ours(1)))
    for _ in range(ROUNDS):
        for label, fun in funs.items():
            dt, n_ref, y_ref = _scipy_run(fun, y0, t_end, h0)
            best[label] = min(best[label], dt)
            best_ours = min(best_ours, ours(reps))
            assert abs(result["steps"] - n_ref) <= 0.02 * n_ref, (result["steps"], n_ref)
            assert np.abs(result["y"] - y_ref).max() <= 10 * TOL["rtol"]
    ratios = {}
    for label in funs:
        ratios[label] = best[label] / best_ours
        print(
            f"\nscipy DOP853 ({label}): {best[label] / n_ref * 1e6:7.2f} us/step, topdrift "
            f"dop853: {best_ours / result['steps'] * 1e9:7.1f} ns/step, {result['steps']} steps "
            f"both; ratio {ratios[label]:6.1f} x"
        )
    benchmark.pedantic(ours, args=(reps,), rounds=1, iterations=1)  # recorded with the others
    benchmark.extra_info["ns_per_step"] = best_ours / result["steps"] * 1e9
    benchmark.extra_info["ratio_plain_python"] = ratios["plain Python rhs"]
    benchmark.extra_info["ratio_wrapped_model_rhs"] = ratios["wrapped model rhs"]
    verdict = "meets" if ratios["wrapped model rhs"] >= TARGET else "MISSES"
    print(
        f"target >= {TARGET:.0f} x against scipy-dop853 (scipy calling the compiled model rhs): "
        f"{verdict}"
    )
