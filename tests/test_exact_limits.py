"""Textbook limits, classification and degenerate branches of the exact Lagrange-top solution."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy_reference import dop853  # scipy's DOP853 at rtol = atol = 1e-13

from topdrift.models import FORM_BODY, FORM_EULER, RigidBody, body_state, euler_state
from topdrift.models.exact import MOTIONS, ExactUnavailable, LagrangeTop

I1, I3 = 2.0e-3, 1.2e-3
TOP = RigidBody(0.5, (I1, I1, I3), com=(0.0, 0.0, 0.04))  # invented scenario numbers
HANGING = RigidBody(0.5, (I1, I1, I3), com=(0.0, 0.0, -0.04))
FREE = RigidBody(0.5, (I1, I1, I3))
MGL = TOP.mgl


def exact(body, *start):
    return LagrangeTop.from_state(body, FORM_EULER, euler_state(body, *start))


def on_vertical(spin, m1=0.0, m2=0.0, up=True):
    """Body-form start with the figure axis exactly on the vertical (up or down)."""
    q = [math.cos(0.2), 0.0, 0.0, math.sin(0.2)] if up else [0.0, math.cos(0.2), math.sin(0.2), 0.0]
    return np.array(q + [m1, m2, I3 * spin])


def steady_rate(theta, w3, slow=True):
    # Steady precession: M g l = phidot (I3 w3 - I1 phidot cos(theta)) (Goldstein, Classical
    # Mechanics, sec. 5.7), the slow and the fast root.
    c = math.cos(theta)
    disc = math.sqrt((I3 * w3) ** 2 - 4.0 * I1 * c * MGL)
    return (I3 * w3 - disc) / (2.0 * I1 * c) if slow else (I3 * w3 + disc) / (2.0 * I1 * c)


# --------------------------------------------------------------------------- fast top
def test_fast_top_limits_and_their_rate():
    """Released from rest with spin w3 (Goldstein sec. 5.7, the fast top): mean precession
    -> M g l / (I3 w3), nutation frequency -> I3 w3 / I1, nutation amplitude in u ->
    beta sin^2(theta0) / a^2 (beta = 2 M g l / I1, a = I3 w3 / I1).

    The relative errors are series in eps = beta / a^2. Their leading terms, worked out here
    from f(u) = (u0 - u)(beta (1 - u^2) - a^2 (u0 - u)) for this start: amplitude + 2 u0 eps
    (the root near u0), nutation frequency - u0 eps (sqrt(beta (u3 - u1)) with m = O(eps^2)),
    mean precession + u0 eps / 2 (the amplitude's + 2 u0 eps, less 3/2 u0 eps from averaging
    1 / (1 - u^2) over a harmonic swing). Check the fitted rate (eps ~ w3^-2), the leading
    coefficients, and that what is left is O(eps^2)."""
    spins = np.array([100.0, 200.0, 400.0, 800.0, 1600.0])
    theta0 = 0.9
    u0 = math.cos(theta0)
    beta = 2.0 * MGL / I1
    lead = {"precession": 0.5 * u0, "nutation": -u0, "amplitude": 2.0 * u0}
    errs = {k: [] for k in lead}
    epss = []
    for w3 in spins:
        top = exact(TOP, 0.0, theta0, 0.0, 0.0, 0.0, w3)
        assert top.motion == "cusps"
        a = I3 * w3 / I1
        epss.append(beta / a**2)
        errs["precession"].append(top.mean_precession_rate / (MGL / (I3 * w3)) - 1.0)
        errs["nutation"].append(2.0 * math.pi / top.nutation_period / a - 1.0)
        amp = top.roots[1] - top.roots[0]
        errs["amplitude"].append(amp / (beta * math.sin(theta0) ** 2 / a**2) - 1.0)
    eps = np.array(epss)
    for name, e in errs.items():
        e = np.array(e)
        slope = np.polyfit(np.log(spins), np.log(np.abs(e)), 1)[0]
        assert slope == pytest.approx(-2.0, abs=0.02), (name, slope, e)
        assert e[-1] / eps[-1] == pytest.approx(lead[name], rel=1e-3, abs=0), name
        rest = (e - lead[name] * eps) / eps**2
        assert np.abs(rest).max() < 2.0, (name, rest)


# --------------------------------------------------------------------------- sleeping top
def test_sleeping_threshold():
    """A top spinning on the vertical is stable when p_psi^2 > 4 I1 M g l (Goldstein sec. 5.7,
    the sleeping top: w3^2 > 4 I1 M g l / I3^2)."""
    w_crit = math.sqrt(4.0 * I1 * MGL) / I3
    fast = LagrangeTop.from_state(TOP, FORM_BODY, on_vertical(1.1 * w_crit))
    slow = LagrangeTop.from_state(TOP, FORM_BODY, on_vertical(0.9 * w_crit))
    assert fast.sleeping_margin > 0.0 and fast.motion == "sleeping"
    assert slow.sleeping_margin < 0.0 and slow.motion == "sleeping-unstable"
    assert fast.sleeping_margin == pytest.approx(
        (I3 * 1.1 * w_crit) ** 2 - 4 * I1 * MGL, rel=1e-12, abs=0
    )
    # Slightly tilted and released: above the threshold the tilt stays of the order of the
    # start, below it the top falls far.
    tilt = 1e-3
    stays = exact(TOP, 0.0, tilt, 0.0, 0.0, 0.0, 1.1 * w_crit)
    falls = exact(TOP, 0.0, tilt, 0.0, 0.0, 0.0, 0.9 * w_crit)
    assert stays.theta_max < 20.0 * tilt
    assert falls.theta_max > 0.5
    # The sleeping branch reports the small-oscillation limit of the nutation period,
    # 2 pi / sqrt(a^2 - 2 beta) (from f(u) near u = 1); a barely tilted top has that period.
    barely = exact(TOP, 0.0, 1e-6, 0.0, 0.0, 0.0, 1.1 * w_crit)
    assert fast.nutation_period == pytest.approx(barely.nutation_period, rel=1e-6, abs=0)
    yb = on_vertical(1.1 * w_crit)
    e = fast.euler(np.linspace(0.0, 1.0, 5))
    assert np.all(e[:, 1] == 0.0)
    assert np.allclose(np.diff(e[:, 0] + e[:, 2]), 0.25 * yb[6] / I3, rtol=1e-14)
    # Hanging: with the centre of mass below the pivot the margin is positive for any spin.
    assert LagrangeTop.from_state(HANGING, FORM_BODY, on_vertical(1.0)).sleeping_margin > 0.0
    down = LagrangeTop.from_state(TOP, FORM_BODY, on_vertical(1.0, up=False))
    assert down.motion == "hanging" and down.theta_min == math.pi


# --------------------------------------------------------------------------- classification
def phi_reverses(top, periods=2, n=20001):
    t = np.linspace(0.0, periods * top.nutation_period, n)
    d = np.diff(top.euler(t)[:, 0])
    return bool(d.min() < 0.0 < d.max())


@pytest.mark.parametrize("slow", [True, False])
def test_uniform_precession_at_a_double_root(slow):
    theta, w3 = 0.9, 60.0
    rate = steady_rate(theta, w3, slow)
    top = exact(TOP, 0.3, theta, -0.2, rate, 0.0, w3 - rate * math.cos(theta))
    assert top.motion == "uniform-precession"
    assert top.roots[1] - top.roots[0] < 1e-13
    assert top.mean_precession_rate == pytest.approx(rate, rel=1e-10, abs=0)
    e = top.euler(np.linspace(0.0, 50.0, 101))
    assert np.all(np.isfinite(e))
    assert np.abs(e[:, 1] - theta).max() < 1e-12
    assert e[:, 0] == pytest.approx(0.3 + rate * np.linspace(0.0, 50.0, 101), rel=1e-10, abs=0)


def test_classification_of_built_starts():
    theta, w3 = 0.9, 60.0
    rate = steady_rate(theta, w3)
    # Released with spin and no precession: cusps at the upper turning point (Goldstein
    # sec. 5.7, the usual way a top is started).
    cusps = exact(TOP, 0.0, theta, 0.0, 0.0, 0.0, w3)
    assert cusps.motion == "cusps" and cusps.theta_min == pytest.approx(theta, abs=1e-15)
    # Started against the mean precession: phidot changes sign, loops.
    loops = exact(TOP, 0.0, theta, 0.0, -rate, 0.0, w3)
    assert loops.motion == "loops" and phi_reverses(loops)
    # Started faster than the mean in its direction, but not so fast that it reverses
    # at the other turning point: unidirectional.
    uni = exact(TOP, 0.0, theta, 0.0, 1.5 * rate, 0.0, w3)
    assert uni.motion == "unidirectional" and not phi_reverses(uni)
    # Strongly over-driven: phidot reverses at the other turning point, loops again.
    over = exact(TOP, 0.0, theta, 0.0, 4.0 * rate, 0.0, w3)
    assert over.motion == "loops" and phi_reverses(over)
    # The same kinds with the centre of mass below the pivot.
    hang_loops = exact(HANGING, 0.0, 2.5, 0.0, 1.0, -1.5, 20.0)
    assert hang_loops.motion == "loops" and phi_reverses(hang_loops)
    assert exact(FREE, 0.0, theta, 0.0, 3.0, 1.5, w3).motion == "free-precession"
    assert LagrangeTop.from_state(FREE, FORM_BODY, on_vertical(5.0)).motion == "free-spin"
    through = LagrangeTop.from_state(TOP, FORM_BODY, on_vertical(40.0, 2e-3, -1e-3))
    assert through.motion == "through-vertical" and through.theta_min == 0.0
    for top in (cusps, loops, uni, over, hang_loops, through):
        assert top.motion in MOTIONS


def test_cusp_points_have_zero_precession_rate():
    """At a cusp the axis stops (phidot = 0) at the top turning point."""
    top = exact(TOP, 0.0, 0.9, 0.0, 0.0, 0.0, 60.0)
    h = 1e-6 * top.nutation_period
    t = np.array([top.nutation_period - h, top.nutation_period + h])
    e = top.euler(t)
    assert abs(e[1, 0] - e[0, 0]) / (2 * h) < 1e-6 * abs(top.mean_precession_rate)


def test_free_top_cone_rate():
    """Free symmetric top: the figure axis turns about L at |L| / I1 (Landau and Lifshitz,
    Mechanics, sec. 33), so theta oscillates with period 2 pi I1 / |L|."""
    yb = body_state(FREE, 0.3, 0.9, -0.2, 3.0, 1.5, 60.0)
    top = LagrangeTop.from_state(FREE, FORM_BODY, yb)
    big_l = float(np.linalg.norm(yb[4:]))
    assert top.nutation_period == pytest.approx(2.0 * math.pi * I1 / big_l, rel=1e-14, abs=0)


# --------------------------------------------------------------------------- degenerate starts
def test_start_direction_mid_nutation():
    """theta must follow the sign of theta_rate at the start."""
    up = exact(TOP, 0.0, 0.7, 0.0, 2.0, +0.9, 60.0)
    down = exact(TOP, 0.0, 0.7, 0.0, 2.0, -0.9, 60.0)
    h = 1e-5
    assert up.euler(h)[0, 1] > 0.7 > down.euler(h)[0, 1]
    assert up.nutation_period == pytest.approx(down.nutation_period, rel=1e-14, abs=0)


@pytest.mark.parametrize("offset", [1e-4, 1e-7, 1e-10])
def test_near_coincident_roots_against_dop853(offset):
    """Just off steady precession the two roots nearly coincide; the solution keeps full
    accuracy (reference: scipy DOP853)."""
    theta, w3 = 0.9, 60.0
    rate = steady_rate(theta, w3) * (1.0 + offset)
    ye = euler_state(TOP, 0.3, theta, -0.2, rate, 0.0, w3 - rate * math.cos(theta))
    top = LagrangeTop.from_state(TOP, FORM_EULER, ye)
    t = np.linspace(0.0, 10.0 * top.nutation_period, 201)
    err = np.abs(top.euler(t) - dop853(FORM_EULER, TOP, ye, t)[:, :3]).max()
    assert err < 1e-9, err


def test_turning_point_starts_and_the_upper_pole():
    # Exactly at the lower turning point (theta_rate = 0, p_phi chosen so that u0 = u1).
    lower = exact(TOP, 0.0, 0.9, 0.0, 2.5 * steady_rate(0.9, 60.0), 0.0, 60.0)
    assert lower.theta_max == pytest.approx(0.9, abs=1e-15)
    # p_phi = p_psi exactly in the Euler form: the axis reaches the vertical.
    ye = euler_state(TOP, 0.0, 0.5, 0.0, 0.0, 0.4, 60.0)
    ye[3] = ye[5]
    top = LagrangeTop.from_state(TOP, FORM_EULER, ye)
    assert top.motion == "through-vertical" and top.roots[1] == 1.0
    e = top.euler(np.linspace(0.0, 3.0 * top.nutation_period, 301))
    assert np.all(np.isfinite(e)) and e[:, 1].min() >= 0.0


def test_refused_separatrix():
    # Unstable steady rotation with the axis on the vertical is an equilibrium, not a refusal;
    # but the start must not produce NaN anywhere.
    w_crit = math.sqrt(4.0 * I1 * MGL) / I3
    top = LagrangeTop.from_state(TOP, FORM_BODY, on_vertical(0.5 * w_crit))
    assert top.motion == "sleeping-unstable" and top.nutation_period == math.inf
    assert np.all(np.isfinite(top.euler(np.linspace(0, 10, 11))))
    assert top.summary()["nutation_period"] is None
    with pytest.raises(ExactUnavailable):
        LagrangeTop.from_state(TOP, FORM_EULER, np.array([0.0, math.pi, 0.0, 0.0, 0.0, 1.0]))
