"""The exact solution of a body-form start as the equations move it (weight_by_norm): their
vertical Gamma(q) is the unnormalised quadratic of q, so a quaternion of length |q| moves as the
unit top with the weight M g l |q|^2. Checked against a Taylor-series integration of the
body-form equations in 50-digit mpmath from the same doubles (tests/independent_references.py)."""

import math

import mpmath as mp
import numpy as np
from demo_bodies import LAGRANGE, START
from independent_references import taylor_states_mp

from topdrift.benchmarks.run.metrics import attitude_angle
from topdrift.models import FORM_BODY, FORM_EULER, body_state, euler_state
from topdrift.models.exact import LagrangeTop

TIMES = (0.37, 2.0)


def _scaled_start(scale: float) -> np.ndarray:
    y = body_state(LAGRANGE, *START)
    y[:4] *= scale
    return y


def _taylor_quaternions(y0) -> np.ndarray:
    rows = taylor_states_mp(LAGRANGE, y0, TIMES)
    out = []
    with mp.workdps(50):
        for r in rows:
            n = mp.sqrt(sum(v * v for v in r[:4]))
            out.append([float(v / n) for v in r[:4]])
    return np.array(out)


def test_a_long_quaternion_moves_as_the_top_with_weight_times_its_square_length():
    # |q|^2 = (1 + 2^-7)^2: the weight is 1.6 % heavier than the unit top's, far above any
    # rounding, so the two references must part visibly while the weighted one follows the
    # equations to the exact solution's own accuracy.
    y0 = _scaled_start(1.0 + 2.0**-7)
    ref = _taylor_quaternions(y0)
    weighted = LagrangeTop.from_state(LAGRANGE, FORM_BODY, y0, weight_by_norm=True)
    unit = LagrangeTop.from_state(LAGRANGE, FORM_BODY, y0)
    t = np.array(TIMES)
    err_w = attitude_angle(weighted.sample(t).quaternion, ref)
    err_u = attitude_angle(unit.sample(t).quaternion, ref)
    assert np.all(err_w < 1e-14), err_w
    assert np.all(err_u > 1e-4), err_u


def test_weight_by_norm_changes_nothing_for_a_unit_quaternion_or_the_euler_form():
    # A quaternion of length exactly 1 in rationals, (1/2, 1/2, 1/2, 1/2), and the Euler form,
    # which has no quaternion.
    y = body_state(LAGRANGE, *START)
    y[:4] = 0.5
    a = LagrangeTop.from_state(LAGRANGE, FORM_BODY, y, weight_by_norm=True)
    b = LagrangeTop.from_state(LAGRANGE, FORM_BODY, y)
    assert a.nutation_period == b.nutation_period
    assert a.precession_per_period == b.precession_per_period
    ye = euler_state(LAGRANGE, *START)
    c = LagrangeTop.from_state(LAGRANGE, FORM_EULER, ye, weight_by_norm=True)
    d = LagrangeTop.from_state(LAGRANGE, FORM_EULER, ye)
    assert c.nutation_period == d.nutation_period
    assert c.spin_per_period == d.spin_per_period
    assert math.isfinite(a.nutation_period)
