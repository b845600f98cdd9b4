"""How fast a case's start turns: the rates that size a step ladder, the first step a
recommendation tries, and the step budget of an adaptive run.

Two rates are at play: the body's angular velocity w = I^-1 m (rad/s) and the pendulum rate
sqrt(M g |chi| / I_min) of the gravity torque. An explicit method following a rotation or
oscillation at rate w needs h w below a small constant (its stability interval on the imaginary
axis, below 2 pi for every method here: common practice), and any method needs about one step
per turn to resolve it. The ladder takes the largest body axis component of w (the documented
rule of "auto" ladders, README), the budget the whole |w|: the two differ by at most sqrt(3),
and each fixes numbers that users already have (the steps of auto ladders, hence run ids).

The periods of the motion, `timescales(case)`: the fastest and the slowest time scales of a
case's motion, from its body and start. Two verdicts depend on them. Samples further apart than
half the fastest period cannot show that motion: any figure drawn from them aliases it (the
sampling theorem, common practice), and the run says so. And a growth law of the energy error
means something only over a horizon that holds many periods of the slowest motion the error can
follow: a bounded error reaches its plateau only after about one such period, so before that any
error grows, whatever the method.

- fastest: the shortest of 2 pi / |w| (the body's angular velocity at the start), the pendulum
  period of gravity 2 pi sqrt(I_min / (M g |chi|)) and, for a Lagrange top, its nutation period.
- slowest, by body:
  * a Lagrange top: the nutation period of its exact solution. phi and psi are cyclic, and every
    method here commutes with turns about the vertical and about the figure axis (up to an
    adaptive controller's component-wise norm), so the energy error is a function of the
    nutation phase alone; the precession does not enter it.
  * a free body (no torque): the period of its body angular momentum (models/free_body.py),
    which carries every error of a torque-free motion for the same reason (turns about L).
  * any other body (heavy and not a Lagrange top: chaotic, or integrable without a closed form
    here, such as the Kovalevskaya top): no period exists to compute; the estimate is the
    longest of 2 pi / |w|, the pendulum period and 2 pi |L| / (M g |chi|), the time in which the
    largest torque gravity can exert would turn L through a full turn. It is an estimate, and
    the drift law of such a case says so.
  * a body in the gravity gradient of an orbit of mean motion n: no period either; the estimate
    is the longest of 2 pi / |w|, the orbit period 2 pi / n, the libration period of the gradient
    2 pi / (n sqrt(3 max|I_i - I_j| / I_min)) and 2 pi |L| over the gradient's largest torque
    (3 n^2 / 2) max|I_i - I_j|; the libration period also joins the fastest candidates.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from topdrift.models.body import (
    P_HW1,
    P_HW2,
    P_HW3,
    P_INV1,
    P_INV2,
    P_INV3,
    P_MGX,
    P_MGY,
    P_MGZ,
)
from topdrift.models.free_body import free_body_period


def body_rates(case) -> np.ndarray:
    """|w_i| about each body axis at the start, rad/s."""
    p = case.body.params()
    y = case.body_state()
    # the shell's rates, w = I^-1 m - I^-1 h (a gyrostat's offset is zero for a rigid body)
    return np.abs(y[4:7] * p[[P_INV1, P_INV2, P_INV3]] - p[[P_HW1, P_HW2, P_HW3]])


def gravity_rate(case) -> float:
    """The small-oscillation rate of the gravity torque, sqrt(M g |chi| / I_min), rad/s."""
    p = case.body.params()
    mg_chi = math.sqrt(p[P_MGX] ** 2 + p[P_MGY] ** 2 + p[P_MGZ] ** 2)
    return math.sqrt(mg_chi * max(p[P_INV1], p[P_INV2], p[P_INV3]))


def fastest_rate(case) -> float:
    """The fastest rate of the start for a step budget: |w| or the pendulum rate, rad/s."""
    return max(float(np.sqrt(np.sum(body_rates(case) ** 2))), gravity_rate(case))


def fastest_period(case) -> float:
    """2 pi over the fastest rate of the start for a step ladder: the largest body axis rate or
    the pendulum rate; the horizon for a body at rest (any step will do)."""
    rate = max(float(np.max(body_rates(case))), gravity_rate(case))
    if not rate > 0.0:
        return case.horizon
    return 2.0 * math.pi / rate


@dataclass(frozen=True)
class Timescales:
    fastest: float  # s
    fastest_what: str
    slowest: float  # s; inf when the slowest motion never repeats (a separatrix)
    slowest_what: str  # "nutation", "free motion", or the estimate's description
    slowest_exact: bool  # False when `slowest` is an estimate (no period exists)


def _start_rates(case) -> tuple[float, float, float]:
    """(|w|, the pendulum rate sqrt(M g |chi| / I_min), |L|) at the start."""
    spin = float(np.sqrt(np.sum(body_rates(case) ** 2)))
    m = np.asarray(case.body_state(), dtype=np.float64)[4:7]
    return spin, gravity_rate(case), float(np.linalg.norm(m))


def _period(rate: float) -> float:
    return 2.0 * math.pi / rate if rate > 0.0 else math.inf


def _nutation_period(case) -> float | None:
    if not case.body.lagrange_top:
        return None
    from topdrift.models.exact import ExactUnavailable, LagrangeTop

    try:
        top = LagrangeTop.from_state(case.body, "body", case.body_state())
    except (ExactUnavailable, ArithmeticError, ValueError):
        return None
    period = float(getattr(top, "nutation_period", math.nan))
    return period if math.isfinite(period) and period > 0.0 else None


def gradient_rate(case) -> float:
    """n sqrt(3 max|I_i - I_j| / I_min), the fastest libration rate the gravity gradient of an
    orbit of mean motion n can drive (0 in uniform gravity), rad/s."""
    n = case.body.field.orbit_rate
    inertia = case.body.inertia
    return n * math.sqrt(3.0 * (max(inertia) - min(inertia)) / min(inertia))


def _field_timescales(case) -> Timescales:
    spin, _, l_norm = _start_rates(case)
    n = case.body.field.orbit_rate
    libration = _period(gradient_rate(case))
    candidates = [(_period(spin), "rotation 2 pi / |w|"), (libration, "libration in the gradient")]
    fastest, fastest_what = min(candidates, key=lambda c: c[0])
    torque = 1.5 * n * n * (max(case.body.inertia) - min(case.body.inertia))
    turn = 2.0 * math.pi * l_norm / torque if torque > 0.0 else 0.0
    slowest = max(_period(spin), _period(n), libration, turn)
    return Timescales(
        fastest,
        fastest_what,
        slowest,
        "slowest time scale (an estimate: this motion has no period)",
        False,
    )


def timescales(case) -> Timescales:
    if not case.body.uniform_gravity:
        return _field_timescales(case)
    spin, swing, l_norm = _start_rates(case)
    candidates = [(_period(spin), "rotation 2 pi / |w|"), (_period(swing), "pendulum of gravity")]
    nutation = _nutation_period(case)
    if nutation is not None:
        candidates.append((nutation, "nutation"))
    fastest, fastest_what = min(candidates, key=lambda c: c[0])
    body = case.body
    torque = body.mass * body.gravity * float(np.linalg.norm(np.asarray(body.com, dtype=float)))
    if nutation is not None:
        return Timescales(fastest, fastest_what, nutation, "nutation", True)
    if torque == 0.0 and not body.has_rotor:  # the rigid free period; a gyrostat has its own
        y = np.asarray(case.body_state(), dtype=np.float64)
        period = free_body_period(body.inertia, y[4:7])
        return Timescales(fastest, fastest_what, period, "free motion", True)
    turn = 2.0 * math.pi * l_norm / torque
    slowest = max(_period(spin), _period(swing), turn)
    return Timescales(
        fastest,
        fastest_what,
        slowest,
        "slowest time scale (an estimate: this motion has no period)",
        False,
    )
