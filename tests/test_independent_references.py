"""The Taylor-series reference of the order tests (tests/independent_references.py) against
mpmath's own ODE integrator, mpmath.odefun, and against itself at more digits and terms."""

import numpy as np
from independent_references import odefun_states, taylor_states

from topdrift.models import RigidBody, body_state

# Demo bodies of our own: three different moments with the centre of mass off every axis, and a
# Kovalevskaya top (I1 = I2 = 2 I3, centre of mass in the equatorial plane).
ASYMMETRIC = RigidBody(1.0, (0.05, 0.046, 0.02), com=(0.01, -0.005, 0.1))
KOVALEVSKAYA = RigidBody(1.0, (0.04, 0.04, 0.02), com=(0.06, 0.0, 0.0))
START = (0.3, 0.9, 0.2, 1.0, 0.5, 40.0)


def test_taylor_reference_agrees_with_mpmath_odefun():
    times = (0.01, 0.03)
    for body in (ASYMMETRIC, KOVALEVSKAYA):
        y0 = body_state(body, *START)
        ours = taylor_states(body, y0, times)
        theirs = odefun_states(body, y0, times)
        # both at 34 digits; compared as doubles, so to the doubles' own rounding
        np.testing.assert_allclose(ours, theirs, rtol=0, atol=4e-16)


def test_taylor_reference_agrees_with_itself_at_more_digits_and_terms():
    y0 = body_state(ASYMMETRIC, *START)
    times = (0.1, 0.2)
    a = taylor_states(ASYMMETRIC, y0, times)
    b = taylor_states(ASYMMETRIC, y0, times, dps=40, order=48)
    np.testing.assert_allclose(a, b, rtol=0, atol=4e-16)
