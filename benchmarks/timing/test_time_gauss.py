"""Nanoseconds per step of the Gauss-Legendre methods and of the scipy references, on one standard
top. Run with `python -m pytest benchmarks/timing/test_time_gauss.py`; each result carries
ns_per_step (and, for Gauss, fixed-point sweeps per step) in its extra_info."""

import pytest

from topdrift.integrators import C_STEPS, ST_OK, get
from topdrift.models import RigidBody, body_state, euler_state, form_code

# A standard top of our own: 0.5 kg, centre of mass 4 cm up the axis, spinning at 60 rad/s
# (about 570 rpm) tilted 0.7 rad from the vertical and precessing at 1 rad/s.
TOP = RigidBody(mass=0.5, inertia=(2.0e-3, 2.0e-3, 1.2e-3), com=(0.0, 0.0, 0.04))
START = (0.0, 0.7, 0.0, 1.0, 0.0, 60.0)
STEP = 1e-3  # 0.06 rad of spin per step
GAUSS_STEPS = 20_000
REFERENCE_SPAN = 1.0  # simulated seconds per round for the scipy references
TOL = {"rtol": 1e-8, "atol": 1e-10}


def _start(name, form, settings):
    y0 = euler_state(TOP, *START) if form == "euler" else body_state(TOP, *START)
    return get(name).start(form_code(form), TOP.params(), 0.0, y0, dict(settings))


@pytest.mark.parametrize("form", ["euler", "body"])
@pytest.mark.parametrize("name", ["gauss4", "gauss6", "gauss4-kahan", "gauss6-kahan"])
def test_gauss_ns_per_step(benchmark, name, form):
    st = _start(name, form, {"step": STEP})
    assert st.advance_to(10 * STEP) == ST_OK  # compiled and warmed up

    def run():
        assert st.advance_to(st.t + GAUSS_STEPS * STEP) == ST_OK

    s0, w0 = int(st.counters[C_STEPS]), st.sweeps
    benchmark.pedantic(run, rounds=5, iterations=1)
    steps = int(st.counters[C_STEPS]) - s0
    rounds = steps // GAUSS_STEPS
    benchmark.extra_info["ns_per_step"] = benchmark.stats.stats.mean / GAUSS_STEPS * 1e9
    benchmark.extra_info["sweeps_per_step"] = (st.sweeps - w0) / steps
    assert rounds >= 5


@pytest.mark.parametrize("form", ["euler", "body"])
@pytest.mark.parametrize("name", ["scipy-rk45", "scipy-dop853", "scipy-radau", "scipy-lsoda"])
def test_reference_ns_per_step(benchmark, name, form):
    st = _start(name, form, TOL)
    assert st.advance_to(0.01) == ST_OK
    steps = []

    def run():
        s0 = int(st.counters[C_STEPS])
        assert st.advance_to(st.t + REFERENCE_SPAN) == ST_OK
        steps.append(int(st.counters[C_STEPS]) - s0)

    benchmark.pedantic(run, rounds=3, iterations=1)
    mean_steps = sum(steps) / len(steps)
    benchmark.extra_info["ns_per_step"] = benchmark.stats.stats.mean / mean_steps * 1e9
    benchmark.extra_info["steps_per_round"] = mean_steps
