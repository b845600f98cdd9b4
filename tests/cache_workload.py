"""Run every built-in compiled method a few steps in both forms, the exact solution's kernels and
the extended-precision reference's (used by test_numba_cache)."""

import numpy as np

from topdrift.integrators import all_methods
from topdrift.integrators.extended.reference import MAIN, integrate
from topdrift.models import RigidBody, body_state, double_double, euler_state, form_code
from topdrift.models.exact import LagrangeTop
from topdrift.models.invariants import N_INVARIANTS, invariants

top = RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1))
start = (0.3, 0.9, 0.2, 1.0, 0.5, 40.0)
p = top.params()
out = np.empty(N_INVARIANTS)
invariants(0, euler_state(top, *start), p, out)
invariants(1, body_state(top, *start), p, out)
for m in all_methods():
    if m.info.family in ("reference", "external"):
        continue  # Python-level references: nothing to cache
    for form in m.info.forms:
        code = form_code(form)
        y0 = euler_state(top, *start) if form == "euler" else body_state(top, *start)
        settings = {"step": 1e-3} if m.info.control == "step" else {"rtol": 1e-8, "atol": 1e-10}
        stepper = m.start(code, p, 0.0, y0, settings)
        stepper.advance_to(0.01)
        invariants(code, stepper.y, p, out)
# the exact solution: a nutating top (phase and angle kernels), a sleeping one (steady kernel)
times = np.linspace(0.0, 1.0, 5)
LagrangeTop.from_state(top, "euler", euler_state(top, *start)).sample(times).angles.unfolded()
sleeping = np.array([1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 2.0])
LagrangeTop.from_state(top, "body", sleeping).sample(times)
double_double.remainder((1.0, 0.0, 0.0), (0.0, 0.0), (3.0, 0.0, 0.0), times, 0.0 * times)
integrate(top, body_state(top, *start), times[:2] * 0.01, MAIN)
print("workload done")
