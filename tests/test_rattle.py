"""RATTLE on the rotation matrix (integrators/constrained/): the kernel against the textbook's
matrix equations, the constraint R^T R = I after 10^6 steps, symplecticity of the step on a
canonical chart, the measured order against references that share nothing with it, and the
refusal of a step whose position equations have no solution."""

import math

import numpy as np
import pytest
from demo_bodies import GENERAL, LAGRANGE, state
from independent_references import attitude_error, exact_attitude, taylor_states

from topdrift.integrators import (
    C_FORCE_EVALS,
    C_STEPS,
    ST_NO_CONVERGENCE,
    ST_OK,
    MethodRefused,
    get,
)
from topdrift.integrators.constrained import kernel
from topdrift.models import FORM_BODY, RigidBody
from topdrift.models.exact import LagrangeTop

EPS = 2.0**-52
ORDER_START = (0.0, 1.0, 0.0, 0.3, 0.5, 5.0)
ORDER_TIMES = np.linspace(0.4, 2.0, 5)
# Four doublings from 40 steps over 2 s: errors from about 4e-2 down to 1.5e-4 (measured), in
# the asymptotic range (each halving divides the error by 4.0 within 2 %).
ORDER_STEPS = np.array([40, 80, 160, 320, 640])


def hat(v):
    return np.array([[0.0, -v[2], v[1]], [v[2], 0.0, -v[0]], [-v[1], v[0], 0.0]])


def vee(a):
    return np.array([a[2, 1], a[0, 2], a[1, 0]])


def rotation(q):
    """R of a unit quaternion, scalar first, body to space (common practice)."""
    q0, q1, q2, q3 = q
    return np.array(
        [
            [
                q0 * q0 + q1 * q1 - q2 * q2 - q3 * q3,
                2 * (q1 * q2 - q0 * q3),
                2 * (q1 * q3 + q0 * q2),
            ],
            [
                2 * (q1 * q2 + q0 * q3),
                q0 * q0 - q1 * q1 + q2 * q2 - q3 * q3,
                2 * (q2 * q3 - q0 * q1),
            ],
            [
                2 * (q1 * q3 - q0 * q2),
                2 * (q2 * q3 + q0 * q1),
                q0 * q0 - q1 * q1 - q2 * q2 + q3 * q3,
            ],
        ]
    )


def mass_matrix(body):
    inertia = np.array(body.inertia, dtype=float)
    return np.diag(inertia.sum() / 2 - inertia), inertia


def one_step(body, y, h):
    st = get("rattle").start(FORM_BODY, body.params(), 0.0, y, {"step": h})
    assert st.advance_to(h) == ST_OK
    return st.y.copy()


@pytest.mark.parametrize("body", [LAGRANGE, GENERAL], ids=["lagrange", "asymmetric"])
def test_one_step_solves_the_textbook_equations(body):
    # RATTLE on (R, P) with the constraint R^T R = I (Leimkuhler and Reich, Simulating
    # Hamiltonian Dynamics, 2004): P+ = P - h/2 grad V(R) - h/2 R L, R1 = R + h P+ D^-1,
    # R1^T R1 = I, P1 = P+ - h/2 grad V(R1) - h/2 R1 L1, R1^T P1 D^-1 skew, with L, L1
    # symmetric. T = tr(R' D R'^T) / 2 is the rigid body's kinetic energy for I = tr(D) - D
    # (common practice), P = R hat(w) D, and V = M g e_z . R chi, grad V = M g e_z chi^T.
    # The kernel's step, in matrices, must meet every equation: the multipliers it implies are
    # symmetric, the constraints hold, to rounding.
    h = 0.05
    y = state(FORM_BODY, body, ORDER_START)
    y1 = one_step(body, y, h)
    d, inertia = mass_matrix(body)
    assert np.allclose(np.diag(inertia), np.trace(d) * np.eye(3) - d, rtol=0, atol=1e-15)
    r, r1 = rotation(y[:4]), rotation(y1[:4])
    p = r @ hat(y[4:] / inertia) @ d
    p1 = r1 @ hat(y1[4:] / inertia) @ d
    mg = body.mass * 9.80665 * np.array(body.com)
    assert np.allclose(mg, body.params()[6:9], rtol=1e-15, atol=0)

    def grad_v(_):
        return np.outer([0.0, 0.0, 1.0], body.params()[6:9])

    # R1 = R + h P+ D^-1  =>  P+ = (R1 - R) D / h; L from the first equation
    p_half = (r1 - r) @ d / h
    lam = -2.0 / h * r.T @ (p_half - p + h / 2 * grad_v(r))
    lam1 = -2.0 / h * r1.T @ (p1 - p_half + h / 2 * grad_v(r1))
    scale = np.abs(p).max() / h
    assert np.abs(lam - lam.T).max() < 64 * EPS * scale, lam
    assert np.abs(lam1 - lam1.T).max() < 64 * EPS * scale, lam1
    assert np.abs(r1.T @ r1 - np.eye(3)).max() < 8 * EPS
    hidden = r1.T @ p1 @ np.linalg.inv(d)
    assert np.abs(hidden + hidden.T).max() < 8 * EPS * np.abs(hidden).max()
    # a control: a multiplier of the wrong step (twice the step) is far from symmetric
    wrong = -2.0 / h * r.T @ ((r1 - r) @ d / (2 * h) - p + h / 2 * grad_v(r))
    assert np.abs(wrong - wrong.T).max() > 1e6 * 64 * EPS * scale


def test_jacobian_of_the_position_equations():
    # The kernel's Newton uses d vee(W D - D W^T) = (tr(W D) 1 - W D) W dtheta for
    # W -> W (1 + hat(dtheta)); against central differences (common practice), W random.
    rng = np.random.default_rng(7)
    q = rng.normal(size=4)
    w = rotation(q / np.linalg.norm(q))
    d = np.diag([0.2, 0.4, 0.7])

    def f(x):
        return vee(x @ d - d @ x.T)

    e = 1e-6
    cols = []
    for k in range(3):
        step = hat(np.eye(3)[k] * e)
        cols.append((f(w @ (np.eye(3) + step)) - f(w @ (np.eye(3) - step))) / (2 * e))
    numeric = np.column_stack(cols)
    g = w @ d
    assert np.abs((np.trace(g) * np.eye(3) - g) @ w - numeric).max() < 1e-9


@pytest.mark.parametrize("h", [1e-3, 1e-2, 0.1])
def test_newton_converges_quadratically_to_rounding(h):
    # The solve stops when its correction is at the rounding level, in a handful of iterations
    # (Newton converges quadratically from a guess O(h^2) off; common practice); the solution
    # meets vee(W D - D W^T) = b to rounding, and |w| = 1 to rounding.
    inertia = np.array([1.0, 0.8, 0.6])
    d = inertia.sum() / 2 - inertia
    m = np.array([0.3, 0.5, 5.0]) * inertia
    x = 0.5 * h * m / inertia
    s = 1.0 / math.sqrt(1.0 + x @ x)
    its, *w = kernel.position_step(*d, *(h * m), s, *(s * x))
    assert 1 <= its <= 5, its
    big_w = rotation(w)
    residual = vee(big_w @ np.diag(d) - np.diag(d) @ big_w.T) - h * m
    assert np.abs(residual).max() < 8 * EPS * d.max()
    # each Newton turn is one product with a unit quaternion, rounding |w|^2 by a few eps
    assert abs(np.dot(w, w) - 1.0) < 4 * EPS * its


def test_constraint_at_rounding_after_a_million_steps():
    # R^T R = I is solved on every step's new attitude, so its error does not accumulate: after
    # 1e6 steps it is at the rounding of one step (a few eps; common practice for a constraint
    # solved each step), not the sqrt(N) eps or N eps of an unconstrained product.
    y0 = state(FORM_BODY, GENERAL, (0.3, 1.1, -0.4, 2.0, -1.5, 6.0))
    st = get("rattle").start(FORM_BODY, GENERAL.params(), 0.0, y0, {"step": 0.01})
    assert st.advance_to(10_000.0) == ST_OK
    assert st.counters[C_STEPS] == 1_000_000
    r = rotation(st.y[:4])
    assert np.abs(r.T @ r - np.eye(3)).max() < 8 * EPS


def _exp(theta):
    """Unit quaternion of the turn by the rotation vector theta (common practice)."""
    a = float(np.linalg.norm(theta))
    if a == 0.0:
        return np.array([1.0, 0.0, 0.0, 0.0])
    return np.concatenate([[math.cos(a / 2)], math.sin(a / 2) / a * theta])


def _qmul(a, b):
    a0, a1, a2, a3 = a
    b0, b1, b2, b3 = b
    return np.array(
        [
            a0 * b0 - a1 * b1 - a2 * b2 - a3 * b3,
            a0 * b1 + a1 * b0 + a2 * b3 - a3 * b2,
            a0 * b2 - a1 * b3 + a2 * b0 + a3 * b1,
            a0 * b3 + a1 * b2 - a2 * b1 + a3 * b0,
        ]
    )


def _log(q):
    """Rotation vector of a unit quaternion near the identity."""
    q = q if q[0] >= 0 else -q
    s = float(np.linalg.norm(q[1:]))
    return 2.0 * math.atan2(s, q[0]) / s * q[1:] if s > 0 else np.zeros(3)


def _right_jacobian(theta):
    # d/dt exp(hat(theta)) = exp(hat(theta)) hat(J_r(theta) theta'), J_r = 1 - (1 - cos a)/a^2
    # hat(theta) + (a - sin a)/a^3 hat(theta)^2 (from memory; checked below by differences).
    # Both coefficients in forms that do not cancel at small a: 2 sin^2(a/2)/a^2, and the
    # series 1/6 - a^2/120 + a^4/5040 - a^6/362880 below a = 0.1 (next term 1e-10 / 4e7).
    a = float(np.linalg.norm(theta))
    t = hat(theta)
    c1 = 0.5 if a == 0.0 else 2.0 * math.sin(a / 2) ** 2 / a**2
    if a < 0.1:
        a2 = a * a
        c2 = 1 / 6 - a2 / 120 + a2 * a2 / 5040 - a2**3 / 362880
    else:
        c2 = (a - math.sin(a)) / a**3
    return np.eye(3) - c1 * t + c2 * t @ t


def _chart(q_ref):
    """The canonical chart (theta, p_theta) about q_ref: q = q_ref exp(theta), and the momentum
    conjugate to theta is p = J_r(theta)^T m (L = w . I w / 2 with w = J_r(theta) theta')."""

    def to_state(z):
        theta, p = z[:3], z[3:]
        m = np.linalg.solve(_right_jacobian(theta).T, p)
        return np.concatenate([_qmul(q_ref, _exp(theta)), m])

    def from_state(y):
        q = y[:4] / np.linalg.norm(y[:4])
        conj = q_ref * np.array([1.0, -1.0, -1.0, -1.0])
        theta = _log(_qmul(conj, q))
        return np.concatenate([theta, _right_jacobian(theta).T @ y[4:]])

    return to_state, from_state


def test_right_jacobian_by_differences():
    theta, v, e = np.array([0.3, -0.2, 0.5]), np.array([0.1, 0.4, -0.3]), 1e-6
    rate = (rotation(_exp(theta + e * v)) - rotation(_exp(theta - e * v))) / (2 * e)
    assert np.abs(rotation(_exp(theta)).T @ rate - hat(_right_jacobian(theta) @ v)).max() < 1e-9


def _step_jacobian(name, body, h):
    y0 = state(FORM_BODY, body, (0.3, 1.1, -0.4, 2.0, -1.5, 6.0))
    y1 = one_step_of(name, body, y0, h)
    into, _ = _chart(y0[:4])
    _, out = _chart(y1[:4])
    z0 = np.concatenate([np.zeros(3), y0[4:]])  # at theta = 0, p = m
    e = 1e-6
    cols = []
    for k in range(6):
        dz = np.eye(6)[k] * e
        plus = out(one_step_of(name, body, into(z0 + dz), h))
        minus = out(one_step_of(name, body, into(z0 - dz), h))
        cols.append((plus - minus) / (2 * e))
    return np.column_stack(cols)


def one_step_of(name, body, y, h):
    st = get(name).start(FORM_BODY, body.params(), 0.0, y, {"step": h})
    assert st.advance_to(h) == ST_OK
    return st.y.copy()


J6 = np.block([[np.zeros((3, 3)), np.eye(3)], [-np.eye(3), np.zeros((3, 3))]])


@pytest.mark.parametrize("body", [LAGRANGE, GENERAL], ids=["lagrange", "asymmetric"])
def test_step_is_symplectic_on_a_canonical_chart(body):
    # M^T J M = J for the Jacobian M of one step in canonical coordinates (theta, p_theta) of
    # T*SO(3) on charts about the start and the end (common practice: RATTLE is symplectic,
    # Leimkuhler and Reich 2004). M by central differences (error about 1e-9 here). The
    # control: lie-rkmk4 (an explicit Runge-Kutta method, not symplectic) at the same large
    # step misses it by far more.
    h = 0.1
    m = _step_jacobian("rattle", body, h)
    defect = np.abs(m.T @ J6 @ m - J6).max()
    assert defect < 1e-8, defect
    control = _step_jacobian("lie-rkmk4", body, h)
    assert np.abs(control.T @ J6 @ control - J6).max() > 100 * max(defect, 1e-8)


@pytest.mark.parametrize("body", [LAGRANGE, GENERAL], ids=["lagrange", "asymmetric"])
def test_measured_order_two(body):
    # Global error, the largest over the sample times, against references of no method family
    # here (tests/independent_references.py): the exact Lagrange top (compared in the
    # quaternion), a 34-digit mpmath Taylor series for the asymmetric heavy body. The slope of
    # log error against log h must be 2 within 0.2.
    y0 = state(FORM_BODY, body, ORDER_START)
    if body.lagrange_top:
        angles = exact_attitude(LagrangeTop.from_state(body, FORM_BODY, y0), ORDER_TIMES)

        def error(y, k):
            return attitude_error(FORM_BODY, y, angles[k])
    else:
        ref = taylor_states(body, y0, ORDER_TIMES)

        def error(y, k):
            return float(np.max(np.abs(y - ref[k])))

    t_end = ORDER_TIMES[-1]
    errors = []
    for n in ORDER_STEPS:
        st = get("rattle").start(FORM_BODY, body.params(), 0.0, y0, {"step": t_end / n})
        worst = 0.0
        for k, t in enumerate(ORDER_TIMES):
            assert st.advance_to(t) == ST_OK
            worst = max(worst, error(st.y, k))
        assert st.counters[C_STEPS] == n
        # one torque a step, and one more at the start of each of the five calls
        assert st.counters[C_FORCE_EVALS] == n + len(ORDER_TIMES)
        errors.append(worst)
    slope = np.polyfit(np.log(t_end / ORDER_STEPS), np.log(errors), 1)[0]
    assert abs(slope - 2.0) < 0.2, (slope, errors)


def test_a_step_with_no_solution_is_refused_or_stops_the_run():
    # vee(W D - D W^T) has components bounded by d_j + d_k = I_i for W orthogonal (|W_ij| <= 1;
    # common practice), so a step with h |w_i| > 1 has no position solution. At the start it
    # is refused with the reason; when a later step loses its solution, the run stops there
    # with ST_NO_CONVERGENCE and the last good state.
    body = RigidBody(mass=1.0, inertia=(1.0, 0.8, 0.6), com=(0.0, 0.0, 0.1))
    y0 = state(FORM_BODY, body, (0.0, 1.0, 0.0, 0.0, 0.0, 5.0))
    with pytest.raises(MethodRefused, match="no solution at h = 1.0 s"):
        get("rattle").start(FORM_BODY, body.params(), 0.0, y0, {"step": 1.0})
    # released at rest nearly upright (tilt 0.1 rad), the body falls over; its rate at the
    # bottom, sqrt(2 M g l (1 + cos 0.1) / I1) = 1.97 rad/s (energy, common practice), takes
    # h |w| past 1 at h = 0.6 s: that step has no solution (measured: the seventh)
    y0 = state(FORM_BODY, body, (0.0, 0.1, 0.0, 0.0, 0.0, 0.0))
    h = 0.6
    st = get("rattle").start(FORM_BODY, body.params(), 0.0, y0, {"step": h})
    status = st.advance_to(60.0)
    assert status == ST_NO_CONVERGENCE
    assert 0.0 < st.t_fail < 60.0 and np.all(np.isfinite(st.y))
    assert st.counters[C_STEPS] == round(st.t_fail / h)
