"""The start of an exact Lagrange-top motion: the given state as the solution needs it.

The same code runs in double and in multiprecision (exact_arith.py), from the doubles of the
given state taken as exact. Every quantity is formed so that none is a difference of nearly equal
numbers: 1 -/+ cos(theta) from the half angle (or the quaternion's parts), and
A = p_phi - p_psi cos(theta) from the side of the nearer pole.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any

from .exact_arith import Arithmetic
from .forms import B_M1, B_M2, B_M3, E_PHI, E_PPHI, E_PPSI, E_PSI, E_PTHETA, E_THETA, FORM_EULER


class ExactUnavailable(ValueError):
    """The exact solution cannot be given for this body or start; the message says why."""


@dataclass(frozen=True)
class ExactInput:
    """What an exact motion is built from: the state (doubles, taken as exact) and the body."""

    form: int
    y: tuple[float, ...]
    i1: float
    i3: float
    mgl: float
    # Body form only: the weight acts as M g l |q|^2, as in the body-form equations, whose
    # vertical Gamma(q) = R(q)^T e_z is the unnormalised quadratic of q (models/dynamics.py).
    # A start whose |q| is 1 only to rounding then moves as the unit-quaternion top with that
    # weight; False gives the top the start describes (the quaternion normalised, M g l as is).
    weight_by_norm: bool = False
    # A rotor on the figure axis (a gyrostat), kg m^2/s: p_psi = I3 w3 + h3. The u-equation is
    # the top's with this p_psi; only the shell's own spin rate (p_psi - h3) / I3 moves.
    h3: float = 0.0


def weight_factor(inp: ExactInput, ar: Arithmetic):
    """The factor on M g l in ar: |q|^2 of the given quaternion when inp.weight_by_norm (the
    doubles' squares summed in ar), else 1."""
    if not (inp.weight_by_norm and inp.form != FORM_EULER):
        return ar.real(1.0)
    q = [ar.real(v) for v in inp.y[:4]]
    return q[0] ** 2 + q[1] ** 2 + q[2] ** 2 + q[3] ** 2


@dataclass(frozen=True)
class Start:
    """The start in one arithmetic. u = cos(theta); a = p_psi / I1, b = p_phi / I1.

    w_minus, w_plus   1 - u0 and 1 + u0
    k0                (p_theta^2 + (A / sin theta)^2) / I1^2 = alpha - beta u0
    c0, udot0         f(u0) = (sin(theta) p_theta / I1)^2 and du/dt at the start
    au0, bma, bpa     b - a u0 = A / I1, b - a, b + a
    pole              +1 / -1 when the figure axis starts exactly up / down, else 0
    """

    phi0: Any
    psi0: Any
    theta0: Any
    w_minus: Any
    w_plus: Any
    u0: Any
    k0: Any
    c0: Any
    udot0: Any
    a: Any
    au0: Any
    bma: Any
    bpa: Any
    p_phi: Any
    p_psi: Any
    pole: int

    def reflected(self) -> Start:
        """The start of the mirror problem theta -> pi - theta, psi -> -psi, which maps a centre
        of mass below the pivot (M g l < 0) onto M g l > 0 with a -> -a."""
        return replace(
            self,
            w_minus=self.w_plus,
            w_plus=self.w_minus,
            u0=-self.u0,
            a=-self.a,
            bma=self.bpa,
            bpa=self.bma,
            udot0=-self.udot0,
            psi0=-self.psi0,
            pole=-self.pole,
        )


def start_of(inp: ExactInput, ar: Arithmetic) -> Start:
    """The start of inp in the arithmetic ar (raises ExactUnavailable for an unusable start)."""
    if inp.form == FORM_EULER:
        return _from_euler(inp, ar)
    return _from_body(inp, ar)


def _from_euler(inp: ExactInput, ar: Arithmetic) -> Start:
    y = inp.y
    if not 0.0 < y[E_THETA] < math.pi:
        raise ExactUnavailable(
            f"theta: the Euler-form start needs 0 < theta < pi, got {y[E_THETA]!r}; give a "
            "start on the vertical in the body form"
        )
    phi, theta, psi = ar.real(y[E_PHI]), ar.real(y[E_THETA]), ar.real(y[E_PSI])
    p_phi, p_theta, p_psi = ar.real(y[E_PPHI]), ar.real(y[E_PTHETA]), ar.real(y[E_PPSI])
    i1 = ar.real(inp.i1)
    s = ar.sin(theta)
    w_minus = 2 * ar.sin(theta / 2) ** 2
    w_plus = 2 * ar.cos(theta / 2) ** 2
    u0 = ar.cos(theta)
    # A from the side of the nearer pole: p_phi -/+ p_psi is exact when the two are close
    # (Sterbenz), so A keeps its relative accuracy where it is small near the vertical.
    if u0 >= 0:
        big_a = (p_phi - p_psi) + p_psi * w_minus
    else:
        big_a = (p_phi + p_psi) - p_psi * w_plus
    return Start(
        phi0=phi,
        psi0=psi,
        theta0=theta,
        w_minus=w_minus,
        w_plus=w_plus,
        u0=u0,
        k0=(p_theta * p_theta + (big_a / s) ** 2) / (i1 * i1),
        c0=(s * p_theta / i1) ** 2,
        udot0=-s * p_theta / i1,
        a=p_psi / i1,
        au0=big_a / i1,
        bma=(p_phi - p_psi) / i1,
        bpa=(p_phi + p_psi) / i1,
        p_phi=p_phi,
        p_psi=p_psi,
        pole=0,
    )


def _fold(ar: Arithmetic, x):
    return ar.atan2(ar.sin(x), ar.cos(x))


def _from_body(inp: ExactInput, ar: Arithmetic) -> Start:
    y = inp.y
    if y[0] == 0.0 and y[1] == 0.0 and y[2] == 0.0 and y[3] == 0.0:
        raise ExactUnavailable("y: the attitude quaternion is zero")
    raw = [ar.real(v) for v in y[:4]]
    nq = ar.sqrt(raw[0] ** 2 + raw[1] ** 2 + raw[2] ** 2 + raw[3] ** 2)
    q0, q1, q2, q3 = (v / nq for v in raw)
    m1, m2, m3 = ar.real(y[B_M1]), ar.real(y[B_M2]), ar.real(y[B_M3])
    i1, i3 = ar.real(inp.i1), ar.real(inp.i3)
    # Gamma = R^T e_z, the vertical seen from the body (its first two components).
    g1 = 2 * (q1 * q3 - q0 * q2)
    g2 = 2 * (q2 * q3 + q0 * q1)
    w_minus = 2 * (q1 * q1 + q2 * q2)
    w_plus = 2 * (q0 * q0 + q3 * q3)
    u0 = (w_plus - w_minus) / 2
    big_a = m1 * g1 + m2 * g2  # p_phi - p_psi cos(theta), from L.(e_z - cos(theta) e3)
    s_ptheta = m1 * g2 - m2 * g1  # sin(theta) p_theta
    pole = 0
    if y[1] == 0.0 and y[2] == 0.0:
        pole = 1
    elif y[0] == 0.0 and y[3] == 0.0:
        pole = -1
    # z-x-z angles from the half-angle parts: (phi + psi) / 2 and (phi - psi) / 2.
    splus, sminus = ar.atan2(q3, q0), ar.atan2(q2, q1)
    phi, psi = _fold(ar, splus + sminus), _fold(ar, splus - sminus)
    if pole != 0:
        big_a = s_ptheta = ar.real(0.0)
        w_minus, w_plus, u0 = (
            (ar.real(0.0), ar.real(2.0), ar.real(1.0))
            if pole == 1
            else (ar.real(2.0), ar.real(0.0), ar.real(-1.0))
        )
        w3 = (m3 - ar.real(inp.h3)) / i3  # the shell's rate: a rotor's momentum is no turn
        wx, wy = _space_rate(q0, q1, q2, q3, m1 / i1, m2 / i1, w3)
        if wx == 0 and wy == 0:
            pass  # sleeping: only phi + psi (or phi - psi) matters, keep the split above
        elif pole == 1:
            # The axis leaves the vertical along omega x e_z; R = Rz(phi + psi) there.
            phi = ar.atan2(wy, wx)
            psi = 2 * splus - phi
        else:
            # Along omega x (-e_z); at theta = pi, q = (0, cos, sin, 0)((phi - psi) / 2).
            phi = ar.atan2(-wy, -wx)
            psi = phi - 2 * sminus
    return Start(
        phi0=phi,
        psi0=psi,
        theta0=2 * ar.atan2(ar.sqrt(w_minus), ar.sqrt(w_plus)),
        w_minus=w_minus,
        w_plus=w_plus,
        u0=u0,
        k0=(m1 * m1 + m2 * m2) / (i1 * i1),
        c0=(s_ptheta / i1) ** 2,
        udot0=-s_ptheta / i1,
        a=m3 / i1,
        au0=big_a / i1,
        bma=(big_a - m3 * w_minus) / i1,
        bpa=(big_a + m3 * w_plus) / i1,
        p_phi=big_a + m3 * u0,
        p_psi=m3,
        pole=pole,
    )


def _space_rate(q0, q1, q2, q3, x, y, z):
    """The first two space components of q (x, y, z) conj(q) (the angular velocity in space)."""
    tx = 2 * (q2 * z - q3 * y)
    ty = 2 * (q3 * x - q1 * z)
    tz = 2 * (q1 * y - q2 * x)
    return x + q0 * tx + (q2 * tz - q3 * ty), y + q0 * ty + (q3 * tx - q1 * tz)
