"""The exact solution of the symmetric heavy (Lagrange) top, as a reference for the benchmarks.

Physics (Goldstein, Classical Mechanics, sec. 5.7; Landau and Lifshitz, Mechanics, sec. 35):
u = cos(theta) obeys udot^2 = f(u) = (alpha - beta u)(1 - u^2) - (b - a u)^2 with
alpha = 2 (H - p_psi^2 / (2 I3)) / I1, beta = 2 M g l / I1, a = p_psi / I1, b = p_phi / I1.
For beta > 0, f has roots u1 <= u2 <= 1 <= u3 and
u(t) = u1 + (u2 - u1) sn^2(tau | m),  tau = lambda (t - t1),  m = (u2 - u1) / (u3 - u1),
lambda = sqrt(beta (u3 - u1)) / 2, nutation period 2 K(m) / lambda.
The rates split into partial fractions,
    phidot = (b - a u) / (1 - u^2) = (b - a) / (2 (1 - u)) + (b + a) / (2 (1 + u))
    psidot = p_psi / I3 - a - (b - a) / (2 (1 - u)) + (b + a) / (2 (1 + u)),
and 1 -/+ u = (1 -/+ u1)(1 - n sn^2) turns each term into an incomplete elliptic integral of the
third kind Pi(n; am(tau) | m), built here from Carlson's symmetric forms R_F and R_J (scipy has
no incomplete Pi): Pi(n; am r | m) = sn R_F(cn^2, dn^2, 1) + n/3 sn^3 R_J(cn^2, dn^2, 1, 1 - n sn^2)
for |r| <= K (Carlson, Numerical Algorithms 10 (1995), and DLMF 19.25.14). Over a whole nutation
period am advances by pi and Pi by 2 Pi(n | m), so tau is reduced to r in [-K, K] plus whole
periods: cost and accuracy do not depend on t.

Numerical care, all of it so that no quantity is a difference of nearly equal numbers:
- the cubic is expanded about the start, g(x) = f(u0 + x), with coefficients taken straight from
  the state (g(0) = (sin(theta0) p_theta / I1)^2, the transverse kinetic energy for alpha - beta
  u0), so that near-coincident roots (small nutation) keep their separation to full precision;
  the large root is found first and the two small ones by deflation;
- 1 - u and 1 + u are sums of non-negative terms, (1 - u2) + (u2 - u1) cn^2 and
  (1 + u1) + (u2 - u1) sn^2, and theta = 2 atan2(sqrt(1 - u), sqrt(1 + u)).
A centre of mass below the pivot (M g l < 0) is solved by the reflection theta -> pi - theta,
psi -> -psi, which maps it onto beta > 0 with a -> -a; M g l = 0 (the free symmetric top) is the
same formula with m = 0 and lambda = sqrt(alpha + a^2) / 2 = |L| / (2 I1).

Passing through the vertical (u2 = 1 or u1 = -1 exactly: p_phi = +/- p_psi) the Euler angles
jump: the smooth solution runs through theta = 0 with a sign change, and R(phi, -theta, psi) =
R(phi + pi, theta, psi - pi); phi gains +pi and psi -pi at each pass, so phi stays unfolded and
the rotation continuous. A sleeping top (axis on the vertical, no transverse momentum) keeps phi
at its start and turns psi at the spin rate.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import elliprc, elliprf, elliprj

from .body import P_I1, P_I3, P_MGZ, RigidBody
from .forms import (
    B_M1,
    B_M2,
    B_M3,
    E_PHI,
    E_PPHI,
    E_PPSI,
    E_PSI,
    E_PTHETA,
    E_THETA,
    FORM_BODY,
    FORM_EULER,
    form_code,
)
from .quaternion import rotate, to_euler, vertical_in_body

# Below this nutation amplitude (in cos theta) a motion is labelled uniform precession; the
# formulas themselves need no threshold and still carry the tiny nutation.
UNIFORM_GAP = 1e-13
# Relative size of phidot at a turning point, against a (u2 - u1), below which the trace has
# cusps: smaller loops or dents than this cannot be told apart in double precision.
CUSP_RTOL = 1e-12
# Near the separatrix (1 - m -> 0) the distance u3 - u2 can be a difference of nearly equal
# energies, known only to about 1e-16 / (1 - m) relative; the start is refused when the
# estimated relative error of u3 - u2 exceeds this. Measured against 30-digit mpmath on such
# starts, the period is off by 1.2e-12 at 1 - m = 2.6e-6 (estimate 1.4e-10, refused) and by
# 4e-16 at 2.6e-4 (estimate 1.4e-12).
SEPARATRIX_RTOL = 1e-10
EPS = 2.220446049250313e-16

MOTIONS = (
    "uniform-precession",
    "unidirectional",
    "cusps",
    "loops",
    "sleeping",
    "sleeping-unstable",
    "hanging",
    "through-vertical",
    "through-down",
    "through-both",
    "free-precession",
    "free-spin",
    "rest",
)


# Below this distance of u2 from 1 (or of u1 from -1) the root is refined about the pole.
POLE_POLISH = 1e-4
# Closer than this (in 1 - |u|) a motion is labelled as passing through the vertical.
POLE_GAP = 1e-14


def _pole_root(h3, h2, h1, h0, w):
    """Smallest positive root of h(w) = h3 w^3 + h2 w^2 + h1 w + h0 (h0 < 0 < h1), which is
    f(1 -/+ w) and sets 1 -/+ u at the turning point; w is the estimate from the deflation.

    Iterates w = -h0 / (h1 + h2 w + h3 w^2), which contracts fast for a small root and, unlike
    Newton in this form, never subtracts two nearly equal numbers."""
    if not h1 > 0.0:
        return max(w, 0.0)
    x = -h0 / h1
    for _ in range(60):
        q = h1 + x * (h2 + h3 * x)
        if not q > 0.0:
            return max(w, 0.0)
        xn = -h0 / q
        if xn == x:
            break
        x = xn
    return x


def _jacobi_sn_cn(u, m, mc):
    """sn(u | m) and cn(u | m) by the arithmetic-geometric mean and descending Landen steps
    (DLMF 22.20(ii)), started from sqrt(mc) rather than sqrt(1 - m) so that near m = 1 the
    complement keeps its full precision (scipy's ellipj takes m only)."""
    a = [1.0]
    c = [math.sqrt(m)]
    b = math.sqrt(mc)
    while abs(c[-1]) > EPS * a[-1] and len(a) < 40:
        an = 0.5 * (a[-1] + b)
        c.append(0.5 * (a[-1] - b))
        b = math.sqrt(a[-1] * b)
        a.append(an)
    n = len(a) - 1
    phi = (2.0**n) * a[n] * np.asarray(u, dtype=np.float64)
    for k in range(n, 0, -1):
        phi = 0.5 * (phi + np.arcsin(c[k] / a[k] * np.sin(phi)))
    return np.sin(phi), np.cos(phi)


class ExactUnavailable(ValueError):
    """The exact solution cannot be given for this body or start; the message says why."""


def _cubic_roots(c3, c2, c1, c0, w_minus):
    """Roots x1 <= 0 <= x2 (<= x3) of g(x) = c3 x^3 + c2 x^2 + c1 x + c0, c3 >= 0, c0 >= 0.

    g(0) = f(u0) >= 0 and g(1 - u0) = f(1) <= 0, so x3 >= w_minus = 1 - u0. Returns x3 = inf
    when c3 = 0 (the free top: f is a quadratic).
    """

    def g(x):
        return ((c3 * x + c2) * x + c1) * x + c0

    def quadratic(q2, q1, q0):
        # Stable form: no cancellation between -q1 and the square root.
        d = q1 * q1 - 4.0 * q2 * q0
        sq = math.sqrt(max(d, 0.0))
        t = -0.5 * (q1 + math.copysign(sq, q1))
        if t == 0.0:
            return 0.0, 0.0
        r1, r2 = t / q2, q0 / t
        return (r1, r2) if r1 <= r2 else (r2, r1)

    if c0 == 0.0:
        # A start at a turning point: x = 0 is an exact root.
        if c3 == 0.0:
            other = -c1 / c2
            x1, x2 = (other, 0.0) if other <= 0.0 else (0.0, other)
            return x1, x2, math.inf
        ra, rb = quadratic(c3, c2, c1)
        xs = sorted((0.0, ra, rb))
        return xs[0], xs[1], xs[2]
    if c3 == 0.0:
        x1, x2 = quadratic(c2, c1, c0)
        return x1, x2, math.inf
    # Largest root: right of the inflection point g is increasing and convex, so Newton from
    # any point with g > 0 decreases monotonically onto it.
    lo = w_minus
    hi = lo + 1.0
    while g(hi) <= 0.0:
        hi = lo + 2.0 * (hi - lo)
    x = hi
    for _ in range(400):
        dg = (3.0 * c3 * x + 2.0 * c2) * x + c1
        if dg <= 0.0:
            break
        xn = x - g(x) / dg
        if not xn < x:
            break
        if xn < lo:
            xn = lo
        x = xn
        if x == lo:
            break
    x3 = x
    # Deflate from the constant term upwards, which is stable for the two small roots.
    q0 = -c0 / x3
    q1 = (q0 - c1) / x3
    x1, x2 = quadratic(c3, q1, q0)
    return x1, x2, x3


class LagrangeTop:
    """Exact motion of a symmetric heavy top from a given start (t = 0).

    Build with LagrangeTop.from_state(body, form, y); form is FORM_EULER / FORM_BODY or their
    names. Angles in rad, times in s. Attributes:

    roots                 (u1, u2, u3) of f(u), u = cos(theta); u3 >= 1 for M g l > 0, u3 <= -1
                          for M g l < 0, inf for the free top (f is then a quadratic)
    theta_min, theta_max  the nutation range
    nutation_period       2 K(m) / lambda; for uniform precession and a sleeping top the
                          small-oscillation limit; inf where there is none
    precession_per_period, spin_per_period   phi and psi gained over one nutation period
                          (including the +/- pi of each pass through the vertical)
    mean_precession_rate, mean_spin_rate     the same divided by the period
    motion                one of MOTIONS
    sleeping_margin       p_psi^2 - 4 I1 M g l: > 0 means a top spinning with its axis straight
                          up would be stable
    A sleeping or hanging top (axis exactly on the vertical, no transverse momentum) keeps phi
    at the start's value and turns psi at p_psi / I3: only phi + psi (or phi - psi) is defined.
    Refusals raise ExactUnavailable with the reason.
    """

    def __init__(self):
        raise TypeError("use LagrangeTop.from_state(body, form, y)")

    # ----------------------------------------------------------------- construction
    @classmethod
    def from_state(cls, body: RigidBody, form, y) -> LagrangeTop:
        if not isinstance(body, RigidBody):
            raise ExactUnavailable(f"body: expected a RigidBody, got {type(body).__name__}")
        if not body.lagrange_top:
            raise ExactUnavailable(
                "body: the exact solution needs a symmetric top (I1 == I2) with its centre of "
                "mass on the figure axis"
            )
        if isinstance(form, str):
            try:
                form = form_code(form)
            except ValueError as exc:
                raise ExactUnavailable(str(exc)) from None
        if form not in (FORM_EULER, FORM_BODY):
            raise ExactUnavailable(f"form: expected FORM_EULER or FORM_BODY, got {form!r}")
        y = np.asarray(y, dtype=np.float64).ravel()
        size = 6 if form == FORM_EULER else 7
        if y.shape[0] != size:
            raise ExactUnavailable(f"y: expected {size} values for this form, got {y.shape[0]}")
        if not np.all(np.isfinite(y)):
            raise ExactUnavailable("y: the start has non-finite values")
        self = object.__new__(cls)
        p = body.params()
        self.i1 = float(p[P_I1])
        self.i3 = float(p[P_I3])
        self.mgl = float(p[P_MGZ])
        if form == FORM_EULER:
            st = self._start_from_euler(y)
        else:
            st = self._start_from_body(y)
        self._setup(st)
        return self

    def _start_from_euler(self, y):
        phi, theta, psi = float(y[E_PHI]), float(y[E_THETA]), float(y[E_PSI])
        p_phi, p_theta, p_psi = float(y[E_PPHI]), float(y[E_PTHETA]), float(y[E_PPSI])
        if not 0.0 < theta < math.pi:
            raise ExactUnavailable(
                f"theta: the Euler-form start needs 0 < theta < pi, got {theta!r}; give a "
                "start on the vertical in the body form"
            )
        i1 = self.i1
        s = math.sin(theta)
        w_minus = 2.0 * math.sin(0.5 * theta) ** 2
        w_plus = 2.0 * math.cos(0.5 * theta) ** 2
        u0 = math.cos(theta)
        # A = p_phi - p_psi cos(theta), from the side of the nearer pole: p_phi -/+ p_psi is
        # exact when the two are close (Sterbenz), and 1 -/+ cos(theta) is taken from the half
        # angle, so that A keeps its relative accuracy where it is small near the vertical.
        if u0 >= 0.0:
            big_a = (p_phi - p_psi) + p_psi * w_minus
        else:
            big_a = (p_phi + p_psi) - p_psi * w_plus
        return dict(
            phi0=phi,
            psi0=psi,
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
            theta0=theta,
        )

    def _start_from_body(self, y):
        q = y[:4]
        nq = math.sqrt(float(q @ q))
        if nq == 0.0:
            raise ExactUnavailable("y: the attitude quaternion is zero")
        q0, q1, q2, q3 = (float(v) / nq for v in q)
        m1, m2, m3 = float(y[B_M1]), float(y[B_M2]), float(y[B_M3])
        i1 = self.i1
        g1, g2, _ = vertical_in_body(q0, q1, q2, q3)
        w_minus = 2.0 * (q1 * q1 + q2 * q2)
        w_plus = 2.0 * (q0 * q0 + q3 * q3)
        u0 = 0.5 * (w_plus - w_minus)
        big_a = m1 * g1 + m2 * g2  # p_phi - p_psi cos(theta), from L.(e_z - cos(theta) e3)
        s_ptheta = m1 * g2 - m2 * g1  # sin(theta) p_theta
        pole = 0
        if q1 == 0.0 and q2 == 0.0:
            pole = 1
        elif q0 == 0.0 and q3 == 0.0:
            pole = -1
        if pole == 0:
            phi, _, psi = to_euler(q0, q1, q2, q3)
        else:
            big_a = s_ptheta = 0.0
            w_minus, w_plus, u0 = (0.0, 2.0, 1.0) if pole == 1 else (2.0, 0.0, -1.0)
            wx, wy, _ = rotate(q0, q1, q2, q3, m1 / i1, m2 / i1, m3 / self.i3)
            if wx == 0.0 and wy == 0.0:
                phi, _, psi = to_euler(q0, q1, q2, q3)  # sleeping: only phi + psi matters
            elif pole == 1:
                # The axis leaves the vertical along omega x e_z; R = Rz(phi + psi) there.
                phi = math.atan2(wy, wx)
                psi = 2.0 * math.atan2(q3, q0) - phi
            else:
                # Along omega x (-e_z); at theta = pi, q = (0, cos, sin, 0)((phi - psi) / 2).
                phi = math.atan2(-wy, -wx)
                psi = phi - 2.0 * math.atan2(q2, q1)
        return dict(
            phi0=phi,
            psi0=psi,
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
            theta0=2.0 * math.atan2(math.sqrt(w_minus), math.sqrt(w_plus)),
        )

    # ----------------------------------------------------------------- the solution
    def _setup(self, st):
        i1, i3, mgl = self.i1, self.i3, self.mgl
        self.p_phi = st["p_phi"]
        self.p_psi = st["p_psi"]
        self.sleeping_margin = self.p_psi**2 - 4.0 * i1 * mgl
        self.phi0 = st["phi0"]
        self.psi0 = st["psi0"]
        # Work on the reflected problem when the centre of mass is below the pivot.
        self._flip = mgl < 0.0
        if self._flip:
            st = dict(st)
            st["w_minus"], st["w_plus"] = st["w_plus"], st["w_minus"]
            st["u0"] = -st["u0"]
            st["a"] = -st["a"]
            st["bma"], st["bpa"] = st["bpa"], st["bma"]
            st["udot0"] = -st["udot0"]
            st["psi0"] = -st["psi0"]
            st["pole"] = -st["pole"]
        beta = 2.0 * abs(mgl) / i1
        a, k0, u0 = st["a"], st["k0"], st["u0"]
        self._beta, self._a = beta, a
        self._bma, self._bpa = st["bma"], st["bpa"]
        self._w3 = a * i1 / i3  # spin rate p_psi / I3 of the (reflected) problem
        self._phi0i, self._psi0i = st["phi0"], st["psi0"]
        self._au0 = st["au0"]
        self._theta0 = st["theta0"]
        pole = st["pole"]
        self._steady = None
        inf = math.inf
        if k0 == 0.0 and (pole != 0 or beta == 0.0):
            # No transverse momentum with no torque: the axis stays where it is.
            self._steady = 1.0 if pole == 1 else (-1.0 if pole == -1 else u0)
            self._roots_i = (self._steady, self._steady, inf)
            if beta == 0.0:
                self.motion = "free-spin" if a != 0.0 else "rest"
                period = inf
            elif pole == 1:
                disc = a * a - 2.0 * beta  # I1^2 a^2 - 2 I1^2 beta = the sleeping margin
                self.motion = "sleeping" if disc > 0.0 else "sleeping-unstable"
                period = 2.0 * math.pi / math.sqrt(disc) if disc > 0.0 else inf
                self._roots_i = (1.0, 1.0, a * a / beta - 1.0)
                if disc <= 0.0:
                    self._roots_i = (a * a / beta - 1.0, 1.0, 1.0)
            else:
                self.motion = "hanging"
                period = 2.0 * math.pi / math.sqrt(a * a + 2.0 * beta)
            self.nutation_period = period
            self.precession_per_period = 0.0 if period < inf else inf
            self.spin_per_period = self._w3 * period if period < inf else inf
            self.mean_precession_rate = 0.0
            self.mean_spin_rate = self._w3
            self._finish()
            return

        w_minus, w_plus = st["w_minus"], st["w_plus"]
        c3 = beta
        c2 = 2.0 * beta * u0 - k0 - a * a
        c1 = -beta * w_minus * w_plus - 2.0 * u0 * k0 + 2.0 * a * st["au0"]
        c0 = st["c0"]
        if c3 == 0.0 and c2 == 0.0:
            raise ExactUnavailable("start: a free top with no angular momentum is at rest")
        x1, x2, x3 = _cubic_roots(c3, c2, c1, c0, w_minus)
        # Keep the roots inside the physical range, and put the exact ones where they belong.
        x2 = min(x2, w_minus)
        x1 = max(x1, -w_plus)
        if self._bma == 0.0 and beta == 0.0:
            x2 = w_minus  # u = 1 is a root of the free top's quadratic
        if self._bpa == 0.0:
            x1 = -w_plus
        # Near a pole 1 - u2 (or 1 + u1) is tiny and its relative accuracy matters (it divides
        # the third-kind terms), and near the separatrix u2 and u3 crowd together at 1: solve
        # for them on the cubic expanded about the pole, h(w) = f(1 - w), whose coefficients
        # come from the state without cancellation (h(0) = -(b - a)^2 exactly).
        om2, op1 = w_minus - x2, w_plus + x1
        d32 = x3 - x2
        d32_err = 4.0 * EPS * (abs(x2) + abs(x3))
        k_top = k0 - beta * w_minus  # alpha - beta
        k_bot = k0 + beta * w_plus  # alpha + beta
        h1_top = 2.0 * k_top - 2.0 * a * self._bma
        h0_top = -(self._bma**2)
        w1 = w_minus - x1
        near_top = self._bma == 0.0 or om2 < POLE_POLISH or d32 < POLE_POLISH
        if beta > 0.0 and near_top and w1 > 100.0 * (om2 + d32):
            # h = -beta (w - w1)(w - w2)(w - w3) with the far root w1 = 1 - u1 known well:
            # w2 w3 and w2 + w3 follow from h(0) and h'(0).
            prod = h0_top / (beta * w1)
            tot = (-h1_top / beta - prod) / w1
            sq = math.sqrt(max(tot * tot - 4.0 * prod, 0.0))
            tq = 0.5 * (tot + math.copysign(sq, tot))
            ra, rb = (tq, prod / tq) if tq != 0.0 else (0.0, 0.0)
            w2, w3 = max(ra, rb), min(ra, rb)
            if w2 < 0.0 or w3 > 0.0:
                raise ExactUnavailable("start: the roots of f(u) near u = 1 are not admissible")
            # 1 - u0 = x2 + w2 exactly: take the smaller of the two from its own expansion
            # and the other by subtraction (no cancellation either way). This also keeps an
            # exact x2 = 0 (a start at the turning point) exact.
            if w2 < x2:
                om2, x2 = w2, w_minus - w2
            else:
                om2 = w_minus - x2
            d32 = om2 - w3
            x3 = w_minus - w3
            # h'(0) = 2 (alpha - beta) - 2 a (b - a) is a difference of energies here.
            d32_err = 4.0 * EPS * (k0 + beta * w_minus + abs(a * self._bma)) / (beta * w1)
        elif beta > 0.0 and self._bma == 0.0:
            # All three roots crowd near u = 1: keep the expansion about u0, but put the
            # exact root u = 1 in place of the nearer of x2 and x3.
            if abs(x2 - w_minus) <= abs(x3 - w_minus):
                x2, om2 = w_minus, 0.0
            else:
                x3 = w_minus
            d32 = x3 - x2
        elif self._bma != 0.0 and om2 < POLE_POLISH:
            w2 = _pole_root(0.0, -k_top - a * a, h1_top, h0_top, om2)
            if w2 < x2:
                om2, x2 = w2, w_minus - w2
        if self._bpa != 0.0 and op1 < POLE_POLISH:
            w1b = _pole_root(
                beta,
                -k_bot - 2.0 * beta - a * a,
                2.0 * k_bot + 2.0 * a * self._bpa,
                -(self._bpa**2),
                op1,
            )
            if w1b < -x1:
                op1, x1 = w1b, w1b - w_plus
        gap = x2 - x1
        if not (math.isfinite(x1) and math.isfinite(x2) and gap >= 0.0):
            raise ExactUnavailable("start: the cubic f(u) has no admissible pair of roots")
        if beta > 0.0:
            span = d32 + gap
            m = gap / span
            mc = d32 / span
            kappa = beta * span
        else:
            m, mc, kappa = 0.0, 1.0, -c2
        if gap > 0.0 and beta > 0.0:
            rel = d32_err / d32 if d32 > 0.0 else math.inf
            if rel > SEPARATRIX_RTOL:
                where = "on" if d32 == 0.0 else f"within 1 - m = {mc:.1e} of"
                raise ExactUnavailable(
                    f"start: {where} the separatrix (u2 = u3): the axis creeps towards the "
                    "vertical, the nutation period diverges, and u3 - u2 is known only to "
                    f"{min(rel, 1.0):.0e} relative in double precision"
                )
        lam = 0.5 * math.sqrt(kappa)
        kc = float(elliprf(0.0, mc, 1.0))
        om1, op2 = w_minus - x1, w_plus + x2
        self._x = (x1, x2, x3)
        self._roots_i = (u0 + x1, u0 + x2, u0 + x3 if beta > 0.0 else inf)
        self._gap, self._m, self._mc, self._lam, self._kc = gap, m, mc, lam, kc
        self._om1, self._om2, self._op1, self._op2 = om1, om2, op1, op2
        self._top_pass = gap > 0.0 and om2 == 0.0
        self._bottom_pass = gap > 0.0 and op1 == 0.0
        # Characteristic n of the two third-kind integrals: 1 - u = om1 (1 - n1 sn^2) etc.
        self._n1 = gap / om1 if self._bma != 0.0 else 0.0
        self._n2 = -gap / op1 if self._bpa != 0.0 else 0.0
        # Phase at the start: sn^2(tau0) = (u0 - u1) / (u2 - u1), sign from udot.
        if gap == 0.0 or x1 == 0.0:
            tau0 = 0.0
        elif x2 == 0.0:
            tau0 = kc
        else:
            sn2, cn2 = -x1 / gap, x2 / gap
            f0 = math.sqrt(sn2) * float(elliprf(cn2, mc + m * cn2, 1.0))
            tau0 = f0 if st["udot0"] > 0.0 else -f0
        self._tau0 = tau0
        period = 2.0 * kc / lam
        # Complete integrals: Pi(n | m) = K + n/3 R_J(0, mc, 1, 1 - n), with 1 - n as a ratio.
        big1 = 0.0
        if self._bma != 0.0:
            big1 = kc + self._n1 / 3.0 * float(elliprj(0.0, mc, 1.0, om2 / om1))
        big2 = 0.0
        if self._bpa != 0.0:
            n2 = self._n2
            if n2 < -1.0:
                # DLMF 19.7.8 at phi = pi/2, as in _pi_terms.
                nn = m / n2
                big2 = -nn / 3.0 * float(elliprj(0.0, mc, 1.0, 1.0 - nn)) + float(
                    elliprc(0.0, (op2 / op1) * (1.0 - nn))
                )
            else:
                big2 = kc + n2 / 3.0 * float(elliprj(0.0, mc, 1.0, op2 / op1))
        part1 = self._bma * big1 / (om1 * lam) if self._bma != 0.0 else 0.0
        part2 = self._bpa * big2 / (op1 * lam) if self._bpa != 0.0 else 0.0
        passes = int(self._top_pass) + int(self._bottom_pass)
        dphi = part1 + part2 + math.pi * passes
        dpsi = (self._w3 - a) * period - part1 + part2 - math.pi * passes
        self._p1_0, self._p2_0 = self._pi_terms(np.array([tau0]))[:2]
        self._p1_0, self._p2_0 = float(self._p1_0[0]), float(self._p2_0[0])
        self._dphi_i = part1 + part2
        self._dpsi_i = part2 - part1
        self.nutation_period = period
        self.precession_per_period = dphi
        self.spin_per_period = dpsi
        self.mean_precession_rate = dphi / period
        self.mean_spin_rate = dpsi / period
        self.motion = self._classify()
        self._finish()

    def _classify(self):
        if self._beta == 0.0:
            return "free-precession"
        up = self._gap > 0.0 and self._om2 <= POLE_GAP
        down = self._gap > 0.0 and self._op1 <= POLE_GAP
        if self._flip:
            up, down = down, up
        if up and down:
            return "through-both"
        if up:
            return "through-vertical"
        if down:
            return "through-down"
        if self._gap <= UNIFORM_GAP:
            return "uniform-precession"
        x1, x2, _ = self._x
        au0, a = self._au0, self._a
        r1 = au0 - a * x1  # (b - a u) at the two turning points, proportional to phidot
        r2 = au0 - a * x2
        # A is resolved only to about eps |p_psi| in the start itself.
        tol = max(CUSP_RTOL * abs(a) * self._gap, 8.0 * EPS * (abs(a) + abs(self._bma)))
        if min(abs(r1), abs(r2)) <= tol:
            return "cusps"
        if (r1 > 0.0) == (r2 > 0.0):
            return "unidirectional"
        return "loops"

    def _finish(self):
        r1, r2, r3 = self._roots_i
        if self._flip:
            r1, r2, r3 = -r2, -r1, -r3
        self.roots = (r1, r2, r3)
        self.theta_min = 2.0 * math.atan2(math.sqrt(max(1.0 - r2, 0.0)), math.sqrt(1.0 + r2))
        self.theta_max = 2.0 * math.atan2(math.sqrt(max(1.0 - r1, 0.0)), math.sqrt(1.0 + r1))
        if self._steady is not None:
            self.theta_min = self.theta_max = self._theta0
        else:
            # Accurate extremes from the stored 1 -/+ u (no cancellation near the poles).
            tmin = 2.0 * math.atan2(math.sqrt(self._om2), math.sqrt(self._op2))
            tmax = 2.0 * math.atan2(math.sqrt(self._om1), math.sqrt(self._op1))
            if self._flip:
                tmin, tmax = math.pi - tmax, math.pi - tmin
            self.theta_min, self.theta_max = tmin, tmax
        if self._flip:
            self.spin_per_period = -self.spin_per_period
            self.mean_spin_rate = -self.mean_spin_rate

    def _pi_terms(self, tau):
        """Pi(n1; am r), Pi(n2; am r), whole periods j, sn^2 and cn^2 of tau = 2 j K + r."""
        kc, m, mc, gap = self._kc, self._m, self._mc, self._gap
        j = np.rint(tau / (2.0 * kc))
        r = tau - 2.0 * kc * j
        sn, cn = _jacobi_sn_cn(r, m, mc)
        sn2, cn2 = sn * sn, cn * cn
        dn2 = mc + m * cn2
        rf = elliprf(cn2, dn2, 1.0)
        p1 = np.zeros_like(r)
        p2 = np.zeros_like(r)
        sn3 = sn * sn2
        if self._bma != 0.0:
            pj = (self._om2 + gap * cn2) / self._om1
            p1 = sn * rf + self._n1 / 3.0 * sn3 * elliprj(cn2, dn2, 1.0, pj)
        if self._bpa != 0.0:
            n2 = self._n2
            pj = (self._op1 + gap * sn2) / self._op1
            if n2 < -1.0:
                # Large negative n (axis passing close to the downward vertical): the form
                # below cancels to 1/sqrt(-n); use DLMF 19.7.8 with the partner n' = m / n.
                nn = m / n2
                # Both terms are odd in sn (DLMF states it for 0 < phi <= pi/2).
                p2 = -nn / 3.0 * sn3 * elliprj(cn2, dn2, 1.0, 1.0 - nn * sn2)
                p2 = p2 + sn * elliprc(cn2 * dn2, pj * (1.0 - nn * sn2))
            else:
                p2 = sn * rf + n2 / 3.0 * sn3 * elliprj(cn2, dn2, 1.0, pj)
        return p1, p2, j, sn2, cn2

    def euler(self, t) -> np.ndarray:
        """(phi, theta, psi) at the times t (s), shape (n, 3); phi and psi unfolded."""
        t = np.atleast_1d(np.asarray(t, dtype=np.float64)).ravel()
        out = np.empty((t.shape[0], 3))
        if self._steady is not None:
            out[:, 0] = self._phi0i
            out[:, 1] = self.theta_min
            out[:, 2] = self._psi0i + self._w3 * t
        else:
            lam, kc = self._lam, self._kc
            tau = lam * t + self._tau0
            p1, p2, j, sn2, cn2 = self._pi_terms(tau)
            omu = self._om2 + self._gap * cn2
            opu = self._op1 + self._gap * sn2
            # The reflected problem's theta is pi minus the body's: swap the two halves.
            if self._flip:
                omu, opu = opu, omu
            out[:, 1] = 2.0 * np.arctan2(np.sqrt(omu), np.sqrt(opu))
            half1 = 0.5 * self._bma / (self._om1 * lam) if self._bma != 0.0 else 0.0
            half2 = 0.5 * self._bpa / (self._op1 * lam) if self._bpa != 0.0 else 0.0
            s1 = half1 * (p1 - self._p1_0)
            s2 = half2 * (p2 - self._p2_0)
            count = np.zeros_like(t)
            if self._top_pass:
                count += np.floor((tau - kc) / (2.0 * kc)) - math.floor(
                    (self._tau0 - kc) / (2.0 * kc)
                )
            if self._bottom_pass:
                count += np.floor(tau / (2.0 * kc)) - math.floor(self._tau0 / (2.0 * kc))
            # Whole periods carry the complete integrals; the pole passes are counted exactly.
            out[:, 0] = self._phi0i + j * self._dphi_i + s1 + s2 + math.pi * count
            out[:, 2] = (
                self._psi0i
                + (self._w3 - self._a) * t
                + j * self._dpsi_i
                - s1
                + s2
                - math.pi * count
            )
        if self._flip:
            out[:, 2] = -out[:, 2]
        return out

    def axis(self, t) -> np.ndarray:
        """The figure axis R e3 in space at the times t, shape (n, 3)."""
        e = self.euler(t)
        phi, theta = e[:, 0], e[:, 1]
        st = np.sin(theta)
        return np.column_stack((np.sin(phi) * st, -np.cos(phi) * st, np.cos(theta)))

    def summary(self) -> dict:
        def clean(v):
            v = float(v)
            return v if math.isfinite(v) else None

        return {
            "motion": self.motion,
            "theta_min": clean(self.theta_min),
            "theta_max": clean(self.theta_max),
            "nutation_period": clean(self.nutation_period),
            "precession_per_period": clean(self.precession_per_period),
            "spin_per_period": clean(self.spin_per_period),
            "mean_precession_rate": clean(self.mean_precession_rate),
            "mean_spin_rate": clean(self.mean_spin_rate),
            "roots": [clean(r) for r in self.roots],
            "sleeping_margin": clean(self.sleeping_margin),
            "p_phi": clean(self.p_phi),
            "p_psi": clean(self.p_psi),
        }
