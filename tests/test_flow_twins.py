"""Every sub-flow of models/flows.py exists twice: as a flow (in place, for the plain splittings)
and as an increment (d = flow(y) - y without forming flow(y), for the compensated ones). The
twins are pinned here on random states, both forms, symmetric and asymmetric bodies:

- the drift and the kicks (Euler form: drift and kick; body form: the gravity kick) are the same
  arithmetic in both twins: y + d equals the flow's result to the last bit (compared as values;
  where the flow leaves a -0.0 the sum gives +0.0);
- the free flow of the body form is formulated twice (the flow turns by quarter-angle sines,
  the increment by half-angle sines and forms the quaternion factors in another order, so that
  no increment is a difference of nearly equal numbers): y + d is within 8 units in the last
  place of the flow's result (ulp of 1 for the unit quaternion, of |m| for the momentum) as long
  as no rotation of the step exceeds 4 rad. Why 8: each formulation rounds a few times per
  component (measured: 1 ulp for I1 = I2, 3 for I1 != I2 at angles up to 1 rad, 5.25 up to
  4 rad, on 3e5 random states each); for I1 != I2 the step is three rotations, and each angle is
  computed from the previous rotation's rounded output, so the twins part by about angle x eps
  per rotation (hundreds of ulp at 1e3 rad, far beyond any step that resolves the motion).
"""

import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from topdrift.models import FORM_BODY, FORM_EULER, RigidBody
from topdrift.models.flows import flow_a, flow_b, increment_a, increment_b

SYMMETRIC = RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1))
ASYMMETRIC = RigidBody(1.3, (0.06, 0.045, 0.02), com=(0.01, -0.02, 0.1))
FLAT = RigidBody(1.0, (0.08, 0.01, 0.075), com=(0.0, 0.0, 0.1))  # I2 far below I1 and I3
BODIES = {"symmetric": SYMMETRIC, "asymmetric": ASYMMETRIC, "flat": FLAT}
MAX_ANGLE = 4.0
ULPS = 8.0

unit = st.floats(-1.0, 1.0, allow_nan=False)
sign = st.sampled_from([-1.0, 1.0])


@st.composite
def body_states(draw):
    q = np.array([draw(unit) for _ in range(4)])
    if np.linalg.norm(q) < 0.1:
        q = np.array([1.0, 0.0, 0.0, 0.0])
    q = q / np.linalg.norm(q)
    # The momentum as a direction times a size, so that |m| is 0 or between 1e-4 and 1e3: a
    # subnormal |m| would make the test's own step, angle I_min / |m|, overflow to infinity.
    m = np.array([draw(unit) for _ in range(3)])
    n = np.linalg.norm(m)
    m = m / n if n >= 0.1 else np.zeros(3)
    m *= 10.0 ** draw(st.floats(-3.0, 3.0))
    return np.concatenate([q, m])


@st.composite
def euler_states(draw):
    theta = draw(st.floats(0.05, math.pi - 0.05))
    phi, psi = draw(st.floats(-3.2, 3.2)), draw(st.floats(-3.2, 3.2))
    moms = [draw(st.floats(-50.0, 50.0)) for _ in range(3)]
    return np.array([phi, theta, psi, *moms])


def twins(form, flow, increment, h, y, p):
    y_flow = y.copy()
    flow(form, h, y_flow, p)
    d = np.zeros_like(y)
    increment(form, h, y, p, d)
    return y_flow, y + d


@settings(max_examples=400, deadline=None)
@given(y=euler_states(), h=st.floats(1e-8, 1.0), s=sign)
def test_euler_twins_agree_to_the_last_bit(y, h, s):
    p = SYMMETRIC.params()
    for flow, increment in ((flow_a, increment_a), (flow_b, increment_b)):
        y_flow, y_sum = twins(FORM_EULER, flow, increment, s * h, y, p)
        assert np.array_equal(y_flow, y_sum), (flow, y, h)


@settings(max_examples=400, deadline=None)
@given(y=body_states(), h=st.floats(1e-8, 1.0), s=sign, name=st.sampled_from(sorted(BODIES)))
def test_the_gravity_kick_twins_agree_to_the_last_bit(y, h, s, name):
    y_flow, y_sum = twins(FORM_BODY, flow_b, increment_b, s * h, y, BODIES[name].params())
    assert np.array_equal(y_flow, y_sum)


@settings(max_examples=600, deadline=None)
@given(
    y=body_states(),
    angle=st.floats(-8.0, math.log10(MAX_ANGLE)),
    s=sign,
    name=st.sampled_from(sorted(BODIES)),
)
def test_the_free_flow_twins_agree_to_a_few_ulp(y, angle, s, name):
    body = BODIES[name]
    m = float(np.linalg.norm(y[4:]))
    # The step whose largest rotation (|m| / I_min) h is the drawn angle.
    h = s * 10.0**angle * (min(body.inertia) / m if m > 0.0 else 1.0)
    y_flow, y_sum = twins(FORM_BODY, flow_a, increment_a, h, y, body.params())
    q_ulps = np.max(np.abs(y_sum[:4] - y_flow[:4])) / np.spacing(1.0)
    m_ulps = np.max(np.abs(y_sum[4:] - y_flow[4:])) / np.spacing(m)
    assert q_ulps <= ULPS and m_ulps <= ULPS, (name, q_ulps, m_ulps)
