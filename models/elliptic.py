"""Elliptic integrals and the Jacobi amplitude in float64, compiled, for the step loop of the
exact free flow (free_asymmetric.py). models/carlson.py holds the multiprecision versions the
exact Lagrange-top solution uses at set-up; these run every step and allocate nothing.

Algorithms (the same as carlson.py, in double precision):
- R_F and R_J: Carlson, "Numerical computation of real or complex elliptic integrals",
  Numerical Algorithms 10 (1995) 13-26: duplication until the arguments agree to
  (r/3)^(1/6) or (r/4)^(1/6) with r = 2^-53, then the fifth-order series (DLMF 19.36.1,
  19.36.2). R_J sums R_C(alpha_m, beta_m) over the duplication steps (Carlson's real form, a sum
  of positive terms; see carlson.py for why).
- R_C: DLMF 19.2.17 and 19.2.18 as atan(w) / w and artanh(w) / w with w^2 = (y - x) / x, and
  their common series for small w^2.
- The amplitude am(u | m): the arithmetic-geometric mean and its descent, Abramowitz and Stegun,
  Handbook of Mathematical Functions (1964), 16.4.2-16.4.3: phi_N = 2^N a_N u, then
  phi_(n-1) = (phi_n + asin(c_n sin(phi_n) / a_n)) / 2 (the asin taken as an atan2 free of
  cancellation). sn = sin am, cn = cos am. The descent is written as a recursion so that the
  c_n / a_n need no array (no allocation per call).
  m = 1 (mc = 0) is the separatrix: am(u | 1) = atan(sinh u), the Gudermannian (A&S 16.15).
Checked against mpmath (elliprf, elliprj, ellipf, ellipfun) in tests/test_elliptic.py.
"""

from __future__ import annotations

import math

from numba import njit

_EPS = 2.0**-53
_RF_Q = (3.0 * _EPS) ** (-1.0 / 6.0)
_RJ_Q = (0.25 * _EPS) ** (-1.0 / 6.0)


@njit(cache=True, error_model="numpy")
def rf(x, y, z):
    """Carlson's R_F(x, y, z) for x, y, z >= 0, at most one of them zero."""
    a0 = (x + y + z) / 3.0
    q = _RF_Q * max(abs(a0 - x), abs(a0 - y), abs(a0 - z))
    x0, y0 = x, y
    a = a0
    fac = 1.0
    while fac * abs(a) <= q:
        sx = math.sqrt(x)
        sy = math.sqrt(y)
        sz = math.sqrt(z)
        lam = sx * (sy + sz) + sy * sz
        x = 0.25 * (x + lam)
        y = 0.25 * (y + lam)
        z = 0.25 * (z + lam)
        a = 0.25 * (a + lam)
        fac *= 4.0
    bx = (a0 - x0) / (fac * a)
    by = (a0 - y0) / (fac * a)
    bz = -(bx + by)
    e2 = bx * by - bz * bz
    e3 = bx * by * bz
    return (1.0 - e2 / 10.0 + e3 / 14.0 + e2 * e2 / 24.0 - 3.0 * e2 * e3 / 44.0) / math.sqrt(a)


@njit(cache=True, error_model="numpy")
def rc(x, y):
    """Carlson's R_C(x, y) for x >= 0, y > 0."""
    if x == 0.0:
        return 0.5 * math.pi / math.sqrt(y)
    w2 = (y - x) / x
    if abs(w2) < 1e-3:
        # atan(w) / w = sum (-w2)^k / (2 k + 1): 1e-3^6 / 13 is below 2^-53
        total = 0.0
        term = 1.0
        for k in range(7):
            total += term / (2 * k + 1)
            term *= -w2
        return total / math.sqrt(x)
    if w2 > 0.0:
        w = math.sqrt(w2)
        return math.atan(w) / (w * math.sqrt(x))
    w = math.sqrt(-w2)
    # artanh(w) = (log1p(w) - log(1 - w)) / 2, with (1 - w)(1 + w) = y / x known exactly
    return (math.log1p(w) - 0.5 * math.log(y / x)) / (w * math.sqrt(x))


@njit(cache=True, error_model="numpy")
def rj(x, y, z, p):
    """Carlson's R_J(x, y, z, p) for x, y, z >= 0 (at most one zero) and p > 0."""
    a0 = (x + y + z + 2.0 * p) / 5.0
    q = _RJ_Q * max(abs(a0 - x), abs(a0 - y), abs(a0 - z), abs(a0 - p))
    x0, y0, z0 = x, y, z
    a = a0
    fac = 1.0
    total = 0.0
    while fac * abs(a) <= q:
        sx = math.sqrt(x)
        sy = math.sqrt(y)
        sz = math.sqrt(z)
        lam = sx * (sy + sz) + sy * sz
        alpha = p * (sx + sy + sz) + sx * sy * sz
        total += rc(alpha * alpha, p * (p + lam) * (p + lam)) / fac
        x = 0.25 * (x + lam)
        y = 0.25 * (y + lam)
        z = 0.25 * (z + lam)
        p = 0.25 * (p + lam)
        a = 0.25 * (a + lam)
        fac *= 4.0
    bx = (a0 - x0) / (fac * a)
    by = (a0 - y0) / (fac * a)
    bz = (a0 - z0) / (fac * a)
    bp = -(bx + by + bz) / 2.0
    xyz = bx * by * bz
    e2 = bx * by + bx * bz + by * bz - 3.0 * bp * bp
    e3 = xyz + 2.0 * e2 * bp + 4.0 * bp * bp * bp
    e4 = (2.0 * xyz + e2 * bp + 3.0 * bp * bp * bp) * bp
    e5 = xyz * bp * bp
    series = (
        1.0
        - 3.0 * e2 / 14.0
        + e3 / 6.0
        + 9.0 * e2 * e2 / 88.0
        - 3.0 * e4 / 22.0
        - 9.0 * e2 * e3 / 52.0
        + 3.0 * e5 / 26.0
    )
    return series / (fac * a * math.sqrt(a)) + 3.0 * total


@njit(cache=True, error_model="numpy")
def _descend(u, a, b, c, scale):
    """phi_n of the AGM descent at the level holding (a_n, b_n, c_n), scale = 2^n."""
    if abs(c) <= _EPS * a or scale > 2.0**40:
        return scale * a * u
    a1 = 0.5 * (a + b)
    c1 = 0.5 * (a - b)
    b1 = math.sqrt(a * b)
    phi1 = _descend(u, a1, b1, c1, 2.0 * scale)
    # asin(rho sin phi1) as an atan2 whose cosine side is sqrt(1 - rho^2 sin^2 phi1) written
    # without cancellation: 1 - rho^2 = (b1 / a1)^2 (since b1^2 = a b), so the side is
    # hypot(b1 / a1, rho cos phi1). asin itself loses digits where its argument nears 1,
    # which happens next to the separatrix (m near 1, phi near pi/2).
    rho = c1 / a1
    y = math.atan2(rho * math.sin(phi1), math.hypot(b1 / a1, rho * math.cos(phi1)))
    return 0.5 * (phi1 + y)


@njit(cache=True, error_model="numpy")
def am(u, m, mc):
    """The Jacobi amplitude am(u | m), continuous in u, for 0 <= m <= 1 with mc = 1 - m given
    by the caller (near m = 1 it carries the digits m has lost)."""
    if mc == 0.0:
        return math.atan(math.sinh(u))
    return _descend(u, 1.0, math.sqrt(mc), math.sqrt(m), 1.0)
