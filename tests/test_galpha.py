"""Lie-group generalized-alpha (integrators/galpha/): the coefficients against their published
relations, the measured order against references that share nothing with it, rho_inf = 1
keeping the energy to its order, the spectral radius of the step on a linear mode at large
h w against rho_inf, and the setting's range."""

import numpy as np
import pytest
from demo_bodies import GENERAL, LAGRANGE, state
from measured_order import measured_order

from topdrift.integrators import ST_OK, MethodRefused, get
from topdrift.integrators.galpha import kernel
from topdrift.models import FORM_BODY, RigidBody, invariants_of
from topdrift.models.quaternion import qmul

NAMES = ["lie-galpha", "lie-galpha-undamped"]
ORDER_START = (0.0, 1.0, 0.0, 0.3, 0.5, 5.0)
ORDER_TIMES = np.linspace(0.4, 2.0, 5)
ORDER_STEPS = np.array([40, 80, 160, 320, 640])


@pytest.mark.parametrize("rho", [0.0, 0.5, 0.9, 1.0])
def test_coefficients(rho):
    # Chung and Hulbert, J. Appl. Mech. 60 (1993) 371 (from memory): second order needs
    # gamma = 1/2 - a_m + a_f, and beta = (1/2 + gamma)^2 / 4 with a_m = (2 rho - 1)/(rho + 1),
    # a_f = rho/(rho + 1) puts the spectral radius at infinity at rho; rho = 1 is the
    # trapezoidal rule (a_m = a_f = gamma = 1/2, beta = 1/4; common practice).
    am, af, gamma, beta = kernel.coefficients(rho)
    assert gamma == pytest.approx(0.5 - am + af, abs=1e-15)
    assert beta == pytest.approx((0.5 + gamma) ** 2 / 4, abs=1e-15)
    if rho == 1.0:
        assert (am, af, gamma, beta) == (0.5, 0.5, 0.5, 0.25)


@pytest.mark.parametrize("body", [LAGRANGE, GENERAL], ids=["lagrange", "asymmetric"])
@pytest.mark.parametrize("name", NAMES)
def test_measured_order_two(name, body):
    # Against the exact Lagrange top (compared in the quaternion) and a 34-digit mpmath Taylor
    # series for the asymmetric heavy body (tests/independent_references.py): slope 2 within 0.2.
    y0 = state(FORM_BODY, body, ORDER_START)
    slope, errors = measured_order(name, FORM_BODY, body, y0, ORDER_TIMES, ORDER_STEPS)
    assert abs(slope - 2.0) < 0.2, (slope, errors)


def energy_error(rho, h, t_end, samples=200):
    y0 = state(FORM_BODY, GENERAL, ORDER_START)
    e0 = invariants_of(FORM_BODY, y0, GENERAL.params())["energy"]
    st = get("lie-galpha").start(FORM_BODY, GENERAL.params(), 0.0, y0, {"step": h, "rho_inf": rho})
    out = []
    for t in np.linspace(t_end / samples, t_end, samples):
        assert st.advance_to(t) == ST_OK
        out.append(invariants_of(FORM_BODY, st.y, GENERAL.params())["energy"] - e0)
    return np.array(out) / abs(e0)


def test_undamped_keeps_the_energy_to_its_order():
    # rho_inf = 1 removes no energy (common practice: no numerical dissipation at rho = 1): the
    # energy error stays bounded over 400 s (its second half no larger than 1.5 times its first)
    # and scales as h^2 (halving h divides it by 4 within 20 %).
    coarse = np.abs(energy_error(1.0, 0.02, 400.0))
    fine = np.abs(energy_error(1.0, 0.01, 400.0))
    assert coarse[100:].max() < 1.5 * coarse[:100].max()
    assert 3.2 < coarse.max() / fine.max() < 4.8, (coarse.max(), fine.max())


def test_damped_removes_energy_and_undamped_does_not():
    # rho_inf < 1 damps by design; over the same 400 s the loss at rho = 0.5 and h = 0.02 s is
    # far above rho = 1's bounded error (common practice: damping grows as rho falls).
    undamped = energy_error(1.0, 0.02, 400.0)
    damped = energy_error(0.5, 0.02, 400.0)
    assert damped[-1] < 0 and abs(damped[-1]) > 10 * np.abs(undamped).max()


# --- the spectral radius on a linear mode -------------------------------------------------
# A body hanging at rest (tilt pi) is an equilibrium; small swings about body axis 1 are the
# linear mode theta'' = -(M g l / I1) theta (common practice). The step's linearisation about the
# equilibrium, by central differences in (theta, m1, md1, A1), is the amplification matrix of
# generalized-alpha on that mode; at h w -> infinity its spectral radius is rho_inf (Chung and
# Hulbert 1993).

PENDULUM = RigidBody(mass=1.0, inertia=(1.0, 0.8, 0.6), com=(0.0, 0.0, 0.1))


def _one_step(rho, h, z):
    # z in units that keep every increment O(|z|) at any h: (theta, h w1, h^2 w1', h^2 A1 / I1);
    # a diagonal change of variables, which leaves the eigenvalues as they are
    i1 = PENDULUM.inertia[0]
    theta, m1, md1, a1 = z[0], z[1] * i1 / h, z[2] * i1 / h**2, z[3] * i1 / h**2
    q_eq = np.array([0.0, 1.0, 0.0, 0.0])  # hanging: the half turn about axis 1, exactly
    half = 0.5 * theta
    q = np.array(qmul(*q_eq, np.cos(half), np.sin(half), 0.0, 0.0))
    y = np.concatenate([q, [m1, 0.0, 0.0]])
    aux = np.array([md1, 0.0, 0.0, a1, 0.0, 0.0])
    coef = np.array(kernel.coefficients(rho))
    counters = np.zeros(4, dtype=np.int64)
    status, done = kernel.galpha_steps(coef, y, aux, PENDULUM.params(), h, 1, counters)
    assert status == ST_OK and done == 1
    conj = q_eq * np.array([1.0, -1.0, -1.0, -1.0])
    r = np.array(qmul(*conj, *y[:4]))
    return np.array(
        [2.0 * np.arctan2(r[1], r[0]), y[4] * h / i1, aux[0] * h**2 / i1, aux[3] * h**2 / i1]
    )


def spectral_radius(rho, h):
    e = 1e-7
    cols = [
        (_one_step(rho, h, e * np.eye(4)[k]) - _one_step(rho, h, -e * np.eye(4)[k])) / (2 * e)
        for k in range(4)
    ]
    return float(np.max(np.abs(np.linalg.eigvals(np.column_stack(cols)))))


@pytest.mark.parametrize("rho", [0.0, 0.3, 0.6, 0.9, 1.0])
def test_spectral_radius_at_large_step_is_rho_inf(rho):
    # rho_inf is the limit of the spectral radius as h w -> infinity (Chung and Hulbert 1993).
    # The approach is slow: the design puts all three roots at -rho_inf at infinity (from
    # memory), and a triple root moves as the cube root of its perturbation, here 1/(h w)^2,
    # so the gap falls as (h w)^(-2/3) (measured: 4.6 to 4.7 per decade, 10^(2/3) = 4.64).
    # rho_inf = 1 has no damping at any step.
    omega = np.sqrt(PENDULUM.mgl / PENDULUM.inertia[0])
    near = spectral_radius(rho, 1e3 / omega) - rho
    far = spectral_radius(rho, 1e5 / omega) - rho
    assert abs(far) < 1e-3, far
    if rho == 1.0:
        assert abs(near) < 1e-12 and abs(far) < 1e-12
    else:
        assert 0.8 * 10 ** (4 / 3) < near / far < 1.2 * 10 ** (4 / 3), (near, far)


def test_spectral_radius_is_one_at_small_step():
    # at h w << 1 the mode is resolved and hardly damped, whatever rho (common practice)
    omega = np.sqrt(PENDULUM.mgl / PENDULUM.inertia[0])
    assert abs(spectral_radius(0.5, 0.01 / omega) - 1.0) < 1e-4


def test_rho_inf_out_of_range_is_refused():
    y0 = state(FORM_BODY, LAGRANGE, ORDER_START)
    for bad in (1.5, -0.1):
        with pytest.raises(MethodRefused, match="rho_inf"):
            get("lie-galpha").start(
                FORM_BODY, LAGRANGE.params(), 0.0, y0, {"step": 0.01, "rho_inf": bad}
            )


def test_resume_from_snapshot_gives_the_same_bits():
    y0 = state(FORM_BODY, GENERAL, ORDER_START)
    s = {"step": 0.01, "rho_inf": 0.7}
    one = get("lie-galpha").start(FORM_BODY, GENERAL.params(), 0.0, y0, s)
    assert one.advance_to(2.0) == ST_OK
    two = get("lie-galpha").start(FORM_BODY, GENERAL.params(), 0.0, y0, s)
    assert two.advance_to(1.0) == ST_OK
    three = get("lie-galpha").start(FORM_BODY, GENERAL.params(), 0.0, y0, s)
    three.restore(two.snapshot())
    assert three.advance_to(2.0) == ST_OK
    assert np.array_equal(three.y, one.y) and np.array_equal(three.aux, one.aux)
