"""The turning points of an exact Lagrange-top motion: the roots of the cubic f(u), u = cos theta.

The same code runs in double and in multiprecision (exact_arith.py). The cubic is expanded about
the start, g(x) = f(u0 + x), with coefficients taken straight from the state (g(0) is the
transverse kinetic energy term), so that near-coincident roots (small nutation) keep their
separation; the large root is found first and the two small ones by deflation. Near a pole,
1 - u2 (or 1 + u1) is tiny and its relative accuracy matters, and near the separatrix u2 and u3
crowd together at 1: there the roots are refined on the cubic expanded about the pole,
h(w) = f(1 -/+ w), whose coefficients again come from the state without cancellation.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from .exact_arith import Arithmetic
from .exact_start import ExactUnavailable, Start

# Below this distance of u2 from 1 (or of u1 from -1) the root is refined about the pole.
POLE_POLISH = 1e-4
EPS = 2.220446049250313e-16


@dataclass(frozen=True)
class Roots:
    """Roots x1 <= 0 <= x2 (<= x3) of g(x) = f(u0 + x), and the distances built from them
    without cancellation: om = 1 - u, op = 1 + u at the two turning points, d32 = u3 - u2 and
    its estimated error in the arithmetic used (double precision: the separatrix refusal)."""

    x1: Any
    x2: Any
    x3: Any
    om1: Any
    om2: Any
    op1: Any
    op2: Any
    d32: Any
    d32_err: Any

    @property
    def gap(self):
        """u2 - u1, the nutation amplitude in cos(theta)."""
        return self.x2 - self.x1


def _copysign(x, s):
    return abs(x) if s >= 0 else -abs(x)


def _quadratic(q2, q1, q0, ar: Arithmetic):
    """Roots of q2 x^2 + q1 x + q0 in increasing order, in the form without cancellation."""
    d = q1 * q1 - 4 * q2 * q0
    sq = ar.sqrt(d) if d > 0 else 0 * d
    t = -(q1 + _copysign(sq, q1)) / 2
    if t == 0:
        return 0 * t, 0 * t
    r1, r2 = t / q2, q0 / t
    return (r1, r2) if r1 <= r2 else (r2, r1)


def pole_root(h3, h2, h1, h0, w):
    """Smallest positive root of h(w) = h3 w^3 + h2 w^2 + h1 w + h0 (h0 < 0 < h1), which is
    f(1 -/+ w) and sets 1 -/+ u at the turning point; w is the estimate from the deflation.

    Iterates w = -h0 / (h1 + h2 w + h3 w^2), which contracts fast for a small root and, unlike
    Newton in this form, never subtracts two nearly equal numbers."""
    if not h1 > 0:
        return max(w, 0 * w)
    x = -h0 / h1
    for _ in range(200):
        q = h1 + x * (h2 + h3 * x)
        if not q > 0:
            return max(w, 0 * w)
        xn = -h0 / q
        if xn == x:
            break
        x = xn
    return x


def cubic_roots(c3, c2, c1, c0, w_minus, ar: Arithmetic):
    """Roots x1 <= 0 <= x2 (<= x3) of g(x) = c3 x^3 + c2 x^2 + c1 x + c0, c3 >= 0, c0 >= 0.

    g(0) = f(u0) >= 0 and g(1 - u0) = f(1) <= 0, so x3 >= w_minus = 1 - u0. Returns x3 = inf
    when c3 = 0 (the free top: f is a quadratic).
    """

    def g(x):
        return ((c3 * x + c2) * x + c1) * x + c0

    zero = 0 * c0
    if c0 == 0:
        # A start at a turning point: x = 0 is an exact root.
        if c3 == 0:
            other = -c1 / c2
            x1, x2 = (other, zero) if other <= 0 else (zero, other)
            return x1, x2, ar.inf
        ra, rb = _quadratic(c3, c2, c1, ar)
        xs = sorted((zero, ra, rb))
        return xs[0], xs[1], xs[2]
    if c3 == 0:
        x1, x2 = _quadratic(c2, c1, c0, ar)
        return x1, x2, ar.inf
    # Largest root: right of the inflection point g is increasing and convex, so Newton from
    # any point with g > 0 decreases monotonically onto it.
    lo = w_minus
    hi = lo + 1
    while g(hi) <= 0:
        hi = lo + 2 * (hi - lo)
    x = hi
    for _ in range(400):
        dg = (3 * c3 * x + 2 * c2) * x + c1
        if dg <= 0:
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
    x1, x2 = _quadratic(c3, q1, q0, ar)
    return x1, x2, x3


def solve_roots(st: Start, beta, ar: Arithmetic) -> Roots:
    """The turning points of the (reflected, beta >= 0) problem started at st: the cubic about
    the start, the exact roots put in place, then the refinements about the two poles."""
    a, k0, u0 = st.a, st.k0, st.u0
    w_minus, w_plus, bma, bpa = st.w_minus, st.w_plus, st.bma, st.bpa
    c3 = beta
    c2 = 2 * beta * u0 - k0 - a * a
    c1 = -beta * w_minus * w_plus - 2 * u0 * k0 + 2 * a * st.au0
    if c3 == 0 and c2 == 0:
        raise ExactUnavailable("start: a free top with no angular momentum is at rest")
    x1, x2, x3 = cubic_roots(c3, c2, c1, st.c0, w_minus, ar)
    # Keep the roots inside the physical range, and put the exact ones where they belong.
    x2 = min(x2, w_minus)
    x1 = max(x1, -w_plus)
    if bma == 0 and beta == 0:
        x2 = w_minus  # u = 1 is a root of the free top's quadratic
    if bpa == 0:
        x1 = -w_plus
    x2, x3, om2, d32, d32_err = _refine_top(st, beta, x1, x2, x3, ar)
    x1, op1 = _refine_bottom(st, beta, x1)
    gap = x2 - x1
    if not (ar.isfinite(x1) and ar.isfinite(x2) and gap >= 0):
        raise ExactUnavailable("start: the cubic f(u) has no admissible pair of roots")
    return Roots(
        x1=x1,
        x2=x2,
        x3=x3,
        om1=w_minus - x1,
        om2=om2,
        op1=op1,
        op2=w_plus + x2,
        d32=d32,
        d32_err=d32_err,
    )


def _refine_top(st: Start, beta, x1, x2, x3, ar: Arithmetic):
    """(x2, x3, 1 - u2, u3 - u2, its error estimate) near the upper pole and the separatrix,
    where 1 - u2 is tiny (it divides the third-kind terms) or u2 and u3 crowd together at 1:
    solved on h(w) = f(1 - w), whose coefficients come from the state without cancellation
    (h(0) = -(b - a)^2 exactly)."""
    a, k0, w_minus, bma = st.a, st.k0, st.w_minus, st.bma
    om2 = w_minus - x2
    d32 = x3 - x2
    d32_err = 4 * EPS * (abs(x2) + abs(x3))
    k_top = k0 - beta * w_minus  # alpha - beta
    h1_top = 2 * k_top - 2 * a * bma
    h0_top = -(bma**2)
    w1 = w_minus - x1
    near_top = bma == 0 or om2 < POLE_POLISH or d32 < POLE_POLISH
    if beta > 0 and near_top and w1 > 100 * (om2 + d32):
        # h = -beta (w - w1)(w - w2)(w - w3) with the far root w1 = 1 - u1 known well:
        # w2 w3 and w2 + w3 follow from h(0) and h'(0).
        prod = h0_top / (beta * w1)
        tot = (-h1_top / beta - prod) / w1
        disc = tot * tot - 4 * prod
        sq = ar.sqrt(disc) if disc > 0 else 0 * disc
        tq = (tot + _copysign(sq, tot)) / 2
        ra, rb = (tq, prod / tq) if tq != 0 else (0 * tq, 0 * tq)
        w2, w3 = max(ra, rb), min(ra, rb)
        if w2 < 0 or w3 > 0:
            raise ExactUnavailable("start: the roots of f(u) near u = 1 are not admissible")
        # 1 - u0 = x2 + w2 exactly: take the smaller of the two from its own expansion and the
        # other by subtraction (no cancellation either way). This also keeps an exact x2 = 0
        # (a start at the turning point) exact.
        if w2 < x2:
            om2, x2 = w2, w_minus - w2
        else:
            om2 = w_minus - x2
        # h'(0) = 2 (alpha - beta) - 2 a (b - a) is a difference of energies here.
        d32_err = 4 * EPS * (k0 + beta * w_minus + abs(a * bma)) / (beta * w1)
        return x2, w_minus - w3, om2, om2 - w3, d32_err
    if beta > 0 and bma == 0:
        # All three roots crowd near u = 1: keep the expansion about u0, but put the exact
        # root u = 1 in place of the nearer of x2 and x3.
        if abs(x2 - w_minus) <= abs(x3 - w_minus):
            x2, om2 = w_minus, 0 * w_minus
        else:
            x3 = w_minus
        return x2, x3, om2, x3 - x2, d32_err
    if bma != 0 and om2 < POLE_POLISH:
        # h(w) = f(1 - w) = -beta w^3 + (2 beta - (alpha - beta) - a^2) w^2 + h1 w + h0
        w2 = pole_root(-beta, 2 * beta - k_top - a * a, h1_top, h0_top, om2)
        if w2 < x2:
            om2, x2 = w2, w_minus - w2
    return x2, x3, om2, d32, d32_err


def _refine_bottom(st: Start, beta, x1):
    """(x1, 1 + u1) near the lower pole, on h(w) = f(-1 + w) (h(0) = -(b + a)^2 exactly)."""
    a, k0, w_plus, bpa = st.a, st.k0, st.w_plus, st.bpa
    op1 = w_plus + x1
    if bpa != 0 and op1 < POLE_POLISH:
        k_bot = k0 + beta * w_plus  # alpha + beta
        # h(w) = beta w^3 - ((alpha + beta) + 2 beta + a^2) w^2 + h1 w + h0
        w1b = pole_root(
            beta,
            -k_bot - 2 * beta - a * a,
            2 * k_bot + 2 * a * bpa,
            -(bpa**2),
            op1,
        )
        if w1b < -x1:
            op1, x1 = w1b, w1b - w_plus
    return x1, op1
