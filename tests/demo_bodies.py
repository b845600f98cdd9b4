"""Demo bodies of our own (scenario numbers, not physics results) and their starts, shared by
the integrator tests that run methods on bare states, without a case file."""

from __future__ import annotations

import numpy as np
from scipy.integrate import solve_ivp
from scipy_reference import scipy_rhs

from topdrift.integrators import get
from topdrift.models import FORM_BODY, FORM_EULER, RigidBody, body_state, euler_state
from topdrift.models import invariants_of as invariants

# A symmetric heavy top, and a body with three different moments and its centre of mass off the
# axis (body form only): the Gauss-Legendre and scipy reference tests.
LAGRANGE = RigidBody(mass=1.0, inertia=(1.0, 1.0, 0.6), com=(0.0, 0.0, 0.1))
GENERAL = RigidBody(mass=1.0, inertia=(1.0, 0.8, 0.6), com=(0.02, -0.01, 0.1))
START = (0.0, 0.6, 0.0, 0.3, 0.5, 5.0)  # phi, theta, psi and their rates
CASES = [(FORM_EULER, LAGRANGE), (FORM_BODY, GENERAL)]  # each body in a form it can run in
CASE_IDS = ["euler", "body"]

# A fast top for the Runge-Kutta tests: 0.5 kg, I1 = I2 = 3e-3, I3 = 1e-3 kg m^2 about the
# pivot, centre of mass 4 cm up the figure axis, started at 0.6 rad tilt, precessing at 2 rad/s,
# spinning at 150 rad/s.
FAST_TOP = RigidBody(mass=0.5, inertia=(0.003, 0.003, 0.001), com=(0.0, 0.0, 0.04))
FAST_START = (0.0, 0.6, 0.0, 2.0, 0.0, 150.0)


def state(form: int, body: RigidBody, start=START) -> np.ndarray:
    """The start (phi, theta, psi and their rates) as a state of the given form."""
    return euler_state(body, *start) if form == FORM_EULER else body_state(body, *start)


def fast_top_start(form: int) -> np.ndarray:
    """FAST_TOP's start in the given form."""
    return state(form, FAST_TOP, FAST_START)


def fast_top_reference(form: int, t_end: float) -> np.ndarray:
    """FAST_TOP's state at t_end by scipy's DOP853 at rtol 1e-13, atol 1e-15: the general-purpose
    reference library (its error, about 1e-12 here, is decades below the errors measured
    against it)."""
    sol = solve_ivp(
        scipy_rhs(form, FAST_TOP.params()),
        (0.0, t_end),
        fast_top_start(form),
        method="DOP853",
        rtol=1e-13,
        atol=1e-15,
    )
    assert sol.success
    return sol.y[:, -1]


def fast_top_energy_trend(name: str, settings: dict, ts: np.ndarray) -> tuple[float, float, float]:
    """Run a method on FAST_TOP in the body form through the times ts; fit a line to the relative
    energy error: (drift over the run, scatter about the line, final error)."""
    p = FAST_TOP.params()
    y0 = fast_top_start(FORM_BODY)
    e0 = invariants(FORM_BODY, y0, p)["energy"]
    st = get(name).start(FORM_BODY, p, 0.0, y0, dict(settings))
    de = []
    for t in ts:
        st.advance_to(float(t))
        de.append(invariants(FORM_BODY, st.y, p)["energy"] / e0 - 1.0)
    de = np.array(de)
    slope, icept = np.polyfit(ts, de, 1)
    scatter = float(np.std(de - (slope * ts + icept)))
    return float(slope * ts[-1]), scatter, float(de[-1])
