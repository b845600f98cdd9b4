"""References for the order tests that share nothing with any method family under test.

- A Lagrange top: the exact solution (models/exact.py, checked on its own in test_exact.py),
  compared in the attitude: the Euler angles in the Euler form, the quaternion in the body form.
- Any other body: a Taylor-series integration of the body-form equations in 34-digit mpmath
  arithmetic (a method of no family here: not Runge-Kutta, not splitting, not collocation). The
  equations are polynomial of degree 2 in (q, m),

      q' = q (0, w) / 2,   m' = m x w + M g (Gamma(q) x chi),   w = I^-1 (m - h),
      Gamma(q) = (2 (q1 q3 - q0 q2), 2 (q2 q3 + q0 q1), q0^2 - q1^2 - q2^2 + q3^2),

  (Euler-Poisson with a quaternion, common practice; h is the constant rotor momentum of a
  gyrostat, zero for a rigid body, with m the total body momentum I w + h, as in Hughes,
  Spacecraft Attitude Dynamics, 1986, on gyrostats, from memory), so the Taylor coefficients
  follow from the Cauchy products of the series (Moore's recurrences, common practice):
  (k + 1) y_(k+1) =
  [f(y)]_k. Each step takes ORDER terms and a step h with |y_ORDER| h^ORDER below 1e-32 (from the
  decay of the last two coefficients, times a safety factor). It is checked against mpmath's own
  integrator, mpmath.odefun (a Taylor method too, but with its own derivatives, by finite
  differences at raised precision), over a short interval, and by its invariants, in
  test_independent_references.py.

Every reference is computed once per test session (lru_cache).
"""

from __future__ import annotations

import functools
import math

import mpmath as mp
import numpy as np

from topdrift.models.quaternion import from_euler

DPS = 34
ORDER = 40
SAFETY = "0.7"


def _mpf(x: float):
    return mp.mpf(repr(float(x)))


_decimal = _mpf


def _series_step(c, inv, mgc, order, rotor=(0, 0, 0)):
    """Extend the Taylor coefficients c (7 lists holding y_0) to `order` terms in place."""
    for k in range(order):

        def conv(a, b, k=k):
            return mp.fdot(a[: k + 1], b[k::-1])

        q0, q1, q2, q3, m1, m2, m3 = c
        w1 = [x * inv[0] for x in m1]
        w2 = [x * inv[1] for x in m2]
        w3 = [x * inv[2] for x in m3]
        # w = I^-1 (m - h): the constant h moves only the zeroth coefficient
        w1[0] -= rotor[0] * inv[0]
        w2[0] -= rotor[1] * inv[1]
        w3[0] -= rotor[2] * inv[2]
        g1 = 2 * (conv(q1, q3) - conv(q0, q2))
        g2 = 2 * (conv(q2, q3) + conv(q0, q1))
        g3 = conv(q0, q0) - conv(q1, q1) - conv(q2, q2) + conv(q3, q3)
        d = (
            (-conv(q1, w1) - conv(q2, w2) - conv(q3, w3)) / 2,
            (conv(q0, w1) + conv(q2, w3) - conv(q3, w2)) / 2,
            (conv(q0, w2) - conv(q1, w3) + conv(q3, w1)) / 2,
            (conv(q0, w3) + conv(q1, w2) - conv(q2, w1)) / 2,
            conv(m2, w3) - conv(m3, w2) + (g2 * mgc[2] - g3 * mgc[1]),
            conv(m3, w1) - conv(m1, w3) + (g3 * mgc[0] - g1 * mgc[2]),
            conv(m1, w2) - conv(m2, w1) + (g1 * mgc[1] - g2 * mgc[0]),
        )
        for i in range(7):
            c[i].append(d[i] / (k + 1))


def _horner(coefficients, h):
    acc = coefficients[-1]
    for a in reversed(coefficients[:-1]):
        acc = acc * h + a
    return acc


@functools.cache
def _taylor(body_key, y0, times, dps, order, binary=False):
    mass, gravity, inertia, com, rotor = body_key
    # binary: the exact values of the doubles (the reference of the double start), else the
    # decimal each double prints as
    _mpf = (lambda x: mp.mpf(float(x))) if binary else _decimal
    with mp.workdps(dps):
        inv = [1 / _mpf(v) for v in inertia]
        mg = _mpf(mass) * _mpf(gravity)
        mgc = [mg * _mpf(v) for v in com]
        hr = [_mpf(v) for v in rotor]
        y = [_mpf(v) for v in y0]
        tol = mp.mpf(10) ** (-(dps - 2))
        tiny = mp.mpf(10) ** (-300)
        t = mp.mpf(0)
        out = []
        for target in times:
            target = _mpf(target)
            while t < target:
                c = [[v] for v in y]
                _series_step(c, inv, mgc, order, hr)
                last = max(max(abs(ci[-1]) for ci in c), tiny)
                prev = max(max(abs(ci[-2]) for ci in c), tiny)
                h = min(
                    (tol / last) ** (mp.mpf(1) / order), (tol / prev) ** (mp.mpf(1) / (order - 1))
                )
                h *= mp.mpf(SAFETY)
                if t + h > target:
                    h = target - t
                y = [_horner(ci, h) for ci in c]
                t += h
            out.append(list(y) if binary else [float(v) for v in y])
        return out if binary else np.array(out)


def _body_key(body) -> tuple:
    rotor = tuple(getattr(body, "rotor", (0.0, 0.0, 0.0)))
    return (float(body.mass), float(body.gravity), tuple(body.inertia), tuple(body.com), rotor)


def taylor_states(body, y0, times, dps: int = DPS, order: int = ORDER) -> np.ndarray:
    """Body-form states (len(times), 7) of `body` from the body-form start y0, by the 34-digit
    Taylor integration above, rounded to doubles."""
    key = _body_key(body)
    return _taylor(
        key, tuple(float(v) for v in y0), tuple(float(t) for t in times), int(dps), int(order)
    )


def taylor_states_mp(body, y0, times, dps: int = 50, order: int = 55) -> list:
    """As taylor_states, from the exact binary values of the double start and parameters, the
    states left as mpmath numbers (rows of 7) at `dps` digits."""
    key = _body_key(body)
    return _taylor(
        key, tuple(float(v) for v in y0), tuple(float(t) for t in times), int(dps), int(order),
        True,
    )  # fmt: skip


def odefun_solution(body, y0, dps: int = DPS, binary: bool = False):
    """mpmath.odefun's solution of the body-form equations (mpmath's own Taylor integrator); the
    start and parameters taken as their decimal strings, or (binary) as the exact values of the
    doubles. Call it inside mp.workdps(dps)."""
    _mpf = (lambda x: mp.mpf(float(x))) if binary else _decimal
    inertia = [_mpf(v) for v in body.inertia]
    mg = _mpf(body.mass) * _mpf(body.gravity)
    chi = [_mpf(v) for v in body.com]
    hr = [_mpf(v) for v in getattr(body, "rotor", (0.0, 0.0, 0.0))]

    def f(_t, y):
        q0, q1, q2, q3, m1, m2, m3 = y
        w1 = (m1 - hr[0]) / inertia[0]
        w2 = (m2 - hr[1]) / inertia[1]
        w3 = (m3 - hr[2]) / inertia[2]
        g1 = 2 * (q1 * q3 - q0 * q2)
        g2 = 2 * (q2 * q3 + q0 * q1)
        g3 = q0 * q0 - q1 * q1 - q2 * q2 + q3 * q3
        return [
            (-q1 * w1 - q2 * w2 - q3 * w3) / 2,
            (q0 * w1 + q2 * w3 - q3 * w2) / 2,
            (q0 * w2 - q1 * w3 + q3 * w1) / 2,
            (q0 * w3 + q1 * w2 - q2 * w1) / 2,
            m2 * w3 - m3 * w2 + mg * (g2 * chi[2] - g3 * chi[1]),
            m3 * w1 - m1 * w3 + mg * (g3 * chi[0] - g1 * chi[2]),
            m1 * w2 - m2 * w1 + mg * (g1 * chi[1] - g2 * chi[0]),
        ]

    return mp.odefun(f, 0, [_mpf(v) for v in y0])


def odefun_states(body, y0, times, dps: int = DPS) -> np.ndarray:
    """The same equations through mpmath.odefun (mpmath's own Taylor integrator)."""
    with mp.workdps(dps):
        sol = odefun_solution(body, y0, dps)
        return np.array([[float(v) for v in sol(_mpf(t))] for t in times])


def exact_attitude(top, times) -> np.ndarray:
    """(phi, theta, psi) of the exact solution at the times, shape (n, 3)."""
    return np.asarray(top.euler(np.asarray(times, dtype=float)), dtype=float).reshape(-1, 3)


def attitude_error(form: int, y: np.ndarray, angles: np.ndarray) -> float:
    """Largest attitude error of one state against exact Euler angles (phi, theta, psi): in the
    Euler form the angle differences (phi and psi wrapped), in the body form the quaternion
    difference (q and -q are one attitude)."""
    phi, theta, psi = (float(v) for v in angles)
    if form == 0:
        d = np.array([y[0] - phi, y[1] - theta, y[2] - psi])
        d[[0, 2]] = np.mod(d[[0, 2]] + math.pi, 2 * math.pi) - math.pi
        return float(np.max(np.abs(d)))
    qe = np.array(from_euler(phi, theta, psi))
    q = np.asarray(y[:4])
    return float(min(np.max(np.abs(q - qe)), np.max(np.abs(q + qe))))
