"""Nanoseconds per step of every splitting method in both forms, on one standard top of our own.

    python -m pytest benchmarks/timing/test_time_splitting.py

Each result carries ns_per_step and ns_per_subflow (per drift / free-flow or kick evaluation,
from the kernels' own counters) in its extra_info. Targets: the Euler-form leapfrog within
1.3 x of the same loop in C (benchmarks/timing/against_c.py measures the ratio).
"""

import pytest

from topdrift.integrators import C_EVALS, C_STEPS, ST_OK
from topdrift.integrators.splitting.methods import METHODS
from topdrift.models import RigidBody, body_state, euler_state, form_code

# A brass-and-steel toy top of our own: 0.3 kg, centre of mass 3 cm up the figure axis,
# spinning at 80 rad/s, tilted 0.6 rad and precessing slowly.
TOP = RigidBody(mass=0.3, inertia=(1.2e-4, 1.2e-4, 6.0e-5), com=(0.0, 0.0, 0.03))
START = (0.0, 0.6, 0.0, 0.5, 0.0, 80.0)
STEP = 1e-4
WORK = 2_000_000  # sub-flow evaluations per round, so that every method runs ~50 ms a round


@pytest.mark.parametrize("form", ["euler", "body"])
@pytest.mark.parametrize("name", [m.name for m in METHODS])
def test_splitting_ns_per_step(benchmark, name, form):
    method = next(m for m in METHODS if m.name == name)
    steps = max(1000, WORK // (2 * method.table.stages))
    y0 = euler_state(TOP, *START) if form == "euler" else body_state(TOP, *START)
    st = method.start(form_code(form), TOP.params(), 0.0, y0, {"step": STEP})
    assert st.advance_to(10 * STEP) == ST_OK  # compiled and warmed up

    def run():
        assert st.advance_to(st.t + steps * STEP) == ST_OK

    s0, e0 = int(st.counters[C_STEPS]), int(st.counters[C_EVALS])
    benchmark.pedantic(run, rounds=5, iterations=1)
    done = int(st.counters[C_STEPS]) - s0
    evals = int(st.counters[C_EVALS]) - e0
    best = benchmark.stats.stats.min
    benchmark.extra_info["ns_per_step"] = best / steps * 1e9
    benchmark.extra_info["ns_per_subflow"] = best / (evals / (done // steps)) * 1e9
    assert done == 5 * steps
