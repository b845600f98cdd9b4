"""The exact free flow of an asymmetric body (models/free_asymmetric.py) against integrations of
Euler's equations and the attitude in multiprecision: mpmath.odefun at 30 digits (mpmath's own
Taylor integrator) and the 34-digit Taylor series of tests/independent_references.py (itself
checked against mpmath.odefun in test_independent_references.py).

Measured (this body, 64 flows per period): the error grows by 10 ulps of q and 17 ulps of m
(relative to |m|) per period, about 2 ulps per flow added like a random walk; one flow over
three periods is within 17 ulps of q, the part of the attitude that comes from the angle about
L (30 rad over three periods here) rounded once. Next to the separatrix the flow is ill
conditioned (one ulp in m moves the state after one period by 2e-10 when L^2 - 2 E I_mid is
1e-9 L^2); there the error is compared with that sensitivity, computed from the reference.
"""

import math
import sys

import numpy as np
import pytest
from independent_references import odefun_states, taylor_states

from topdrift.models import RigidBody
from topdrift.models.free_asymmetric import free_asymmetric, free_asymmetric_increment
from topdrift.models.free_body import free_body_period
from topdrift.models.quaternion import qmul

EPS = sys.float_info.epsilon
# The middle moment first, the largest last: the flow sorts the axes, so no order is special.
BODY = RigidBody(1.0, (0.046, 0.02, 0.05))
P = BODY.params()
I_MID, I_LO, I_HI = BODY.inertia
Q0 = np.array([0.9, 0.1, -0.3, 0.2]) / math.sqrt(0.95)
STARTS = {
    "round-largest": np.array([0.3, 0.1, 0.9]),  # L^2 > 2 E I_mid: m circles the I = 0.05 axis
    "round-smallest": np.array([0.2, 0.9, 0.3]),  # L^2 < 2 E I_mid: round the I = 0.02 axis
}


def near_separatrix(rel, sign):
    """m = (1, 0.05, z) with L^2 - 2 E I_mid = sign rel (in units of m_mid^2 = 1)."""
    x = 0.05
    a = 1.0 - I_MID / I_LO
    b = 1.0 - I_MID / I_HI
    return np.array([1.0, x, math.sqrt((sign * rel - x * x * a) / b)])


def state(m):
    return np.concatenate([Q0, m])


def errors(y, ref):
    """(q error, m error relative to |m|), in units of machine epsilon; q ~ -q."""
    dq = min(np.abs(y[:4] - ref[:4]).max(), np.abs(y[:4] + ref[:4]).max())
    dm = np.abs(y[4:] - ref[4:]).max() / np.linalg.norm(ref[4:])
    return dq / EPS, dm / EPS


def energy_and_l(y):
    m = y[4:]
    return float(np.sum(m * m / np.array(BODY.inertia))), float(np.linalg.norm(m))


@pytest.mark.parametrize("side", list(STARTS))
def test_against_mpmath_odefun_over_periods(side):
    m = STARTS[side]
    period = free_body_period(BODY.inertia, m)
    periods = 2
    ref = odefun_states(BODY, state(m), [k * period for k in range(1, periods + 1)], dps=30)
    y = state(m)
    e0, l0 = energy_and_l(y)
    n = 64
    for k in range(periods):
        for _ in range(n):
            free_asymmetric(period / n, y, P)
        dq, dm = errors(y, ref[k])
        assert dq < 16 * (k + 1) and dm < 30 * (k + 1), (k, dq, dm)
        e, ln = energy_and_l(y)
        # kept to round-off: the flows' errors in E and |L| add up like a random walk
        assert abs(e - e0) / e0 < 4 * math.sqrt(n * (k + 1)) * EPS
        assert abs(ln - l0) / l0 < 4 * math.sqrt(n * (k + 1)) * EPS
    # one flow over the whole span: the phase is reduced by whole half-periods
    y1 = state(m)
    free_asymmetric(periods * period, y1, P)
    dq, dm = errors(y1, ref[-1])
    assert dq < 24 and dm < 12, (dq, dm)


@pytest.mark.parametrize("sign", [1, -1])
def test_next_to_the_separatrix_errors_are_within_the_conditioning(sign):
    # Both sides of the separatrix, L^2 - 2 E I_mid = +-1e-9: the reference from the start and
    # from the start with m_hi one ulp larger gives the flow's own sensitivity to round-off
    # (m_mid does not enter L^2 - 2 E I_mid; m_hi does).
    m = near_separatrix(1e-9, sign)
    period = free_body_period(BODY.inertia, m)
    y0 = state(m)
    bumped = y0.copy()
    bumped[6] = np.nextafter(bumped[6], np.inf)
    ref, ref_bumped = taylor_states(BODY, y0, [period])[0], taylor_states(BODY, bumped, [period])[0]
    ulp_effect = np.abs(ref_bumped - ref).max()
    assert ulp_effect > 1e5 * EPS  # ill conditioned indeed: otherwise this test is the wrong one
    y = y0.copy()
    free_asymmetric(period, y, P)
    assert np.abs(y - ref).max() < 8 * ulp_effect
    y = y0.copy()
    for _ in range(64):
        free_asymmetric(period / 64, y, P)
    assert np.abs(y - ref).max() < 8 * math.sqrt(64) * ulp_effect  # measured 20-60 x
    e0, l0 = energy_and_l(y0)
    e, ln = energy_and_l(y)
    assert abs(e - e0) / e0 < 40 * EPS and abs(ln - l0) / l0 < 40 * EPS


def steady_turn(y, h):
    """Closed form of a steady rotation (w parallel to m): q turns about w by |w| h."""
    w = y[4:] / np.array(BODY.inertia)
    wn = np.linalg.norm(w)
    c, s = math.cos(0.5 * h * wn), math.sin(0.5 * h * wn) / wn
    return np.array(qmul(*y[:4], c, *(s * w)))


@pytest.mark.parametrize(
    "m",
    [(1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 0.0, -1.0)],
    ids=["middle-axis (on the separatrix)", "smallest-axis", "largest-axis"],
)
def test_steady_rotations_about_a_principal_axis(m):
    # common practice: a rotation about a principal axis is a steady motion (Euler's equations)
    y = state(np.array(m))
    h = 3.7
    expect = steady_turn(y, h)
    free_asymmetric(h, y, P)
    assert np.array_equal(y[4:], np.array(m))
    assert np.abs(y[:4] - expect).max() < 4 * EPS


def test_no_nan_anywhere_near_the_separatrix():
    # States within 1e-15 .. 1e-3 of the separatrix on both sides, and m = 0: always finite,
    # |q| = 1 and E, |L| kept to round-off, for steps up to a few periods.
    rng = np.random.default_rng(11)
    y = state(np.zeros(3))
    free_asymmetric(1.0, y, P)
    assert np.array_equal(y[4:], np.zeros(3)) and np.abs(y[:4] - Q0).max() < 2 * EPS
    for _ in range(300):
        m = near_separatrix(10.0 ** rng.uniform(-15, -3), rng.choice([-1, 1]))
        m = m * rng.choice([-1.0, 1.0], size=3) * 10.0 ** rng.uniform(-3, 3)
        y0 = state(m)
        y = y0.copy()
        free_asymmetric(10.0 ** rng.uniform(-4, 2), y, P)
        assert np.all(np.isfinite(y))
        assert abs(np.linalg.norm(y[:4]) - 1.0) < 4 * EPS
        e0, l0 = energy_and_l(y0)
        e, ln = energy_and_l(y)
        assert abs(e - e0) / e0 < 16 * EPS and abs(ln - l0) / l0 < 16 * EPS


def test_increment_is_the_flow():
    # The compensated twins' increment: y + d is the flow's result to an ulp or two.
    rng = np.random.default_rng(5)
    d = np.zeros(7)
    for _ in range(200):
        q = rng.normal(size=4)
        y0 = np.concatenate([q / np.linalg.norm(q), rng.normal(size=3)])
        h = 10.0 ** rng.uniform(-3, 0.5)
        y = y0.copy()
        free_asymmetric(h, y, P)
        free_asymmetric_increment(h, y0, P, d)
        assert np.abs((y0 + d) - y).max() < 4 * EPS * (1.0 + np.abs(y0).max())
