"""Lie-group Runge-Kutta methods (integrators/liegroup/): measured orders against references
that share nothing with them, |q| = 1 without renormalisation, the Crouch-Grossman
coefficients against their order conditions in exact rationals, and the Crouch-Grossman and
commutator-free coefficients' local order in 40-digit mpmath."""

from fractions import Fraction as F

import numpy as np
import pytest
from demo_bodies import GENERAL, LAGRANGE, state
from measured_order import measured_order

from topdrift.integrators import C_STEPS, ST_OK, MethodRefused, get
from topdrift.integrators.liegroup import kernel
from topdrift.models import FORM_BODY, FORM_EULER

ORDERS = {"lie-rkmk4": 4, "lie-cg3": 3, "lie-cf4": 4}
STAGES = {"lie-rkmk4": 4, "lie-cg3": 3, "lie-cf4": 4}

ORDER_START = (0.0, 1.0, 0.0, 0.3, 0.5, 5.0)
ORDER_TIMES = np.linspace(0.4, 2.0, 5)
# Four doublings from 40 steps over 2 s: errors from about 3e-4 down to 5e-11 (measured), far above
# the references' own (a few ulps), not yet at round-off.
ORDER_STEPS = np.array([40, 80, 160, 320, 640])


@pytest.mark.parametrize("body", [LAGRANGE, GENERAL], ids=["lagrange", "asymmetric"])
@pytest.mark.parametrize("name", sorted(ORDERS))
def test_measured_order(name, body):
    # Global error, the largest over the sample times, against references of no method family
    # here (tests/independent_references.py): the exact solution of the Lagrange top (compared in
    # the quaternion), a 34-digit mpmath Taylor series for the asymmetric heavy body. The slope
    # of log error against log h must be the nominal order within 0.2.
    y0 = state(FORM_BODY, body, ORDER_START)
    slope, errors = measured_order(
        name, FORM_BODY, body, y0, ORDER_TIMES, ORDER_STEPS, evals_per_step=STAGES[name]
    )
    assert abs(slope - ORDERS[name]) < 0.2, (slope, errors)


@pytest.mark.parametrize("name", sorted(ORDERS))
def test_unit_quaternion_without_renormalisation_over_1e5_steps(name):
    # A product of unit quaternions has |q| = 1 up to rounding (common practice); the kernel has
    # no renormalisation, so the deviation is the random walk of 1e5 products' rounding:
    # measured a few 1e-14, far below what one unrenormalised RK4 step's truncation leaves at
    # this step (|q| - 1 of order (h w)^5, about 1e-7 here; common practice).
    y0 = state(FORM_BODY, GENERAL, (0.3, 1.1, -0.4, 2.0, -1.5, 6.0))
    st = get(name).start(FORM_BODY, GENERAL.params(), 0.0, y0, {"step": 0.01})
    assert st.advance_to(1000.0) == ST_OK
    assert st.counters[C_STEPS] == 100_000
    assert abs(float(np.linalg.norm(st.y[:4])) - 1.0) < 1e-12


def test_no_renormalisation_in_the_kernel():
    # |q| is kept by construction: the kernel never divides by the norm of q.
    import inspect

    src = inspect.getsource(kernel)
    assert "/ math.sqrt(" not in src and "1.0 / n" not in src


def test_crouch_grossman_coefficients_meet_their_order_conditions():
    # Order conditions of Crouch-Grossman methods up to order 3 (Owren and Marthinsen, BIT 39
    # (1999) 116; from memory): the classical ones, sum b = 1, sum b c = 1/2, sum b c^2 = 1/3,
    # sum b a c = 1/6, with c_i = sum_j a_ij, and the one non-commutativity adds,
    # sum b_i^2 c_i + 2 sum_{i<j} b_i c_i b_j = 1/3. In exact rationals.
    a = {(2, 1): F(3, 4), (3, 1): F(119, 216), (3, 2): F(17, 108)}
    b = {1: F(13, 51), 2: F(-2, 3), 3: F(24, 17)}
    assert [float(x) for x in a.values()] == [kernel.CG_A21, kernel.CG_A31, kernel.CG_A32]
    assert [float(x) for x in b.values()] == [kernel.CG_B1, kernel.CG_B2, kernel.CG_B3]
    c = {i: sum((a.get((i, j), F(0)) for j in range(1, 4)), F(0)) for i in range(1, 4)}
    assert c == {1: 0, 2: F(3, 4), 3: F(17, 24)}
    assert sum(b.values()) == 1
    assert sum(b[i] * c[i] for i in b) == F(1, 2)
    assert sum(b[i] * c[i] ** 2 for i in b) == F(1, 3)
    assert sum(b[i] * a.get((i, j), 0) * c[j] for i in b for j in b) == F(1, 6)
    extra = sum(b[i] ** 2 * c[i] for i in b) + 2 * sum(
        b[i] * c[i] * b[j] for i in b for j in b if i < j
    )
    assert extra == F(1, 3)


@pytest.mark.parametrize("name", sorted(ORDERS))
def test_body_form_only_and_forward_only(name):
    y0 = state(FORM_EULER, LAGRANGE, ORDER_START)
    with pytest.raises(MethodRefused):
        get(name).start(FORM_EULER, LAGRANGE.params(), 0.0, y0, {"step": 0.01})
    st = get(name).start(
        FORM_BODY, LAGRANGE.params(), 0.0, state(FORM_BODY, LAGRANGE, ORDER_START), {"step": 0.01}
    )
    assert st.advance_to(0.1) == ST_OK
    with pytest.raises(MethodRefused):
        st.advance_to(0.05)


@pytest.mark.parametrize("name", sorted(ORDERS))
def test_resume_from_snapshot_gives_the_same_bits(name):
    y0 = state(FORM_BODY, GENERAL, ORDER_START)
    one = get(name).start(FORM_BODY, GENERAL.params(), 0.0, y0, {"step": 0.01})
    assert one.advance_to(2.0) == ST_OK
    two = get(name).start(FORM_BODY, GENERAL.params(), 0.0, y0, {"step": 0.01})
    assert two.advance_to(1.0) == ST_OK
    snap = two.snapshot()
    three = get(name).start(FORM_BODY, GENERAL.params(), 0.0, y0, {"step": 0.01})
    three.restore(snap)
    assert three.advance_to(2.0) == ST_OK
    assert np.array_equal(three.y, one.y)
    assert np.array_equal(three.counters, one.counters)


# --- the Crouch-Grossman and commutator-free coefficients in 40 digits ------------------------
# A nonlinear equation on SO(3) of our own, Y' = Y hat(w(Y)) with w depending on the third row of
# Y (like a heavy top's vertical in body axes) so that the frozen rates of different stages do not
# commute. One step of each method, written here in mpmath with the coefficients of
# integrators/liegroup/methods.py, against mpmath's own Taylor integrator (mpmath.odefun) at 40
# digits: the local error of a method of order p falls as h^(p+1) (common practice). The swapped
# update of the commutator-free method is the control: its two factors do not commute, and the
# order falls (measured: local order 3).


def _so3_problem():
    import mpmath as mp

    chi = [mp.mpf("0.3"), mp.mpf("-0.2"), mp.mpf("0.5")]
    w0 = [mp.mpf("0.7"), mp.mpf("1.1"), mp.mpf("-0.4")]

    def rate(y):
        g = [y[2, 0], y[2, 1], y[2, 2]]
        c = [g[1] * chi[2] - g[2] * chi[1], g[2] * chi[0] - g[0] * chi[2]]
        c.append(g[0] * chi[1] - g[1] * chi[0])
        v = [c[0] + w0[0] + g[0] ** 2 / 2, c[1] + w0[1] + g[1] * g[2] / 2]
        v.append(c[2] + w0[2] + g[0] * g[2] / 2)
        return mp.matrix([[0, -v[2], v[1]], [v[2], 0, -v[0]], [-v[1], v[0], 0]])

    return mp, rate


def _cf4(mp, rate, y, h, swapped=False):
    e = mp.expm
    f1 = h * rate(y)
    y2 = y * e(f1 / 2)
    f2 = h * rate(y2)
    f3 = h * rate(y * e(f2 / 2))
    f4 = h * rate(y2 * e(f3 - f1 / 2))
    first, second = (3 * f1 + 2 * f2 + 2 * f3 - f4) / 12, (-f1 + 2 * f2 + 2 * f3 + 3 * f4) / 12
    if swapped:
        first, second = second, first
    return y * e(first) * e(second)


def _cg3(mp, rate, y, h):
    e, a21, a31, a32 = mp.expm, F(3, 4), F(119, 216), F(17, 108)
    b1, b2, b3 = F(13, 51), F(-2, 3), F(24, 17)

    def r(x):
        return mp.mpf(x.numerator) / x.denominator

    f1 = h * rate(y)
    f2 = h * rate(y * e(r(a21) * f1))
    f3 = h * rate(y * e(r(a31) * f1) * e(r(a32) * f2))
    return y * e(r(b1) * f1) * e(r(b2) * f2) * e(r(b3) * f3)


@pytest.mark.parametrize(
    "which,local_order",
    [("cf4", 5), ("cg3", 4), ("cf4-swapped", 3)],
)
def test_local_order_in_40_digits(which, local_order):
    mp, rate = _so3_problem()
    with mp.workdps(40):

        def flat(m):
            return [m[i, j] for i in range(3) for j in range(3)]

        def f(t, y):
            m = mp.matrix([y[0:3], y[3:6], y[6:9]])
            return flat(m * rate(m))

        y0 = mp.eye(3)
        ref = mp.odefun(f, 0, flat(y0))
        errors = []
        for k in range(4):
            h = mp.mpf(1) / (10 * 2**k)
            if which == "cg3":
                y1 = _cg3(mp, rate, y0, h)
            else:
                y1 = _cf4(mp, rate, y0, h, swapped=which == "cf4-swapped")
            errors.append(mp.norm(mp.matrix(flat(y1)) - mp.matrix(ref(h))))
        slopes = [float(mp.log(errors[i] / errors[i + 1], 2)) for i in range(3)]
    assert abs(slopes[-1] - local_order) < 0.2, slopes
