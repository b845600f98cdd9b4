"""Elliptic integrals for real arguments in mpmath's multiprecision arithmetic, at the caller's
working precision: Carlson's R_F, R_J and R_C, and the complete integrals K and Pi by the
arithmetic-geometric mean.

The exact Lagrange-top solution computes its per-case constants (quarter period, per-period
advances, start phase) once, at high precision. mpmath's own elliprj handles complex arguments
and costs about 15 ms at 40 digits on a loaded 2-core machine; these lean real-argument versions
cost about a millisecond each, which keeps a case's set-up fast.

Algorithms:
- R_F and R_J: Carlson, "Numerical computation of real or complex elliptic integrals",
  Numerical Algorithms 10 (1995) 13-26: duplication until the arguments agree to
  (r/3)^(1/6) or (r/4)^(1/6), then the fifth-order series (DLMF 19.36.1, 19.36.2). R_J sums
  R_C(alpha_m, beta_m) with alpha_m = (p_m (sx + sy + sz) + sx sy sz)^2 and
  beta_m = p_m (p_m + lambda_m)^2 over the steps (Carlson's earlier real form): both are sums
  of positive terms, so a small p costs no digits (the 1995 form R_C(1, 1 + e_m) does: 1 + e_m
  cancels there).
- R_C: DLMF 19.2.17 and 19.2.18 written as atan(w) / w and artanh(w) / w with
  w^2 = (y - x) / x, well conditioned in w^2, and their common series for small w^2.
- K(m) = pi / (2 M(1, k')) and Pi(n | m) by DLMF 19.8.6 (AGM with the auxiliary p_n, Q_n),
  for n < 1, quadratically convergent.
Checked against mpmath.elliprf / elliprj / elliprc / ellippi in tests/test_carlson.py.
"""

from __future__ import annotations

import mpmath as mp


def _tolerance():
    # One unit in the last place of the working precision.
    return mp.ldexp(mp.mpf(1), -mp.mp.prec)


def rf(x, y, z):
    """R_F(x, y, z) for x, y, z >= 0, at most one of them zero."""
    x, y, z = mp.mpf(x), mp.mpf(y), mp.mpf(z)
    a0 = (x + y + z) / 3
    q = (3 * _tolerance()) ** (-mp.mpf(1) / 6) * max(abs(a0 - x), abs(a0 - y), abs(a0 - z))
    a, fac = a0, 1
    xm, ym, zm = x, y, z
    while fac * abs(a) <= q:
        sx, sy, sz = mp.sqrt(xm), mp.sqrt(ym), mp.sqrt(zm)
        lam = sx * (sy + sz) + sy * sz
        xm, ym, zm, a = (xm + lam) / 4, (ym + lam) / 4, (zm + lam) / 4, (a + lam) / 4
        fac *= 4
    big_x = (a0 - x) / (fac * a)
    big_y = (a0 - y) / (fac * a)
    big_z = -(big_x + big_y)
    e2 = big_x * big_y - big_z * big_z
    e3 = big_x * big_y * big_z
    series = 1 - e2 / 10 + e3 / 14 + e2 * e2 / 24 - 3 * e2 * e3 / 44
    return series / mp.sqrt(a)


def rc(x, y):
    """R_C(x, y) for x >= 0, y > 0."""
    x, y = mp.mpf(x), mp.mpf(y)
    if x == 0:
        return mp.pi / (2 * mp.sqrt(y))
    w2 = (y - x) / x
    if abs(w2) < mp.mpf(2) ** -16:
        # atan(w) / w = artanh(sqrt(-w2)) / sqrt(-w2) = sum (-w2)^k / (2 k + 1)
        tol = _tolerance()
        total, term, k = mp.mpf(0), mp.mpf(1), 0
        while abs(term) > tol:
            total += term / (2 * k + 1)
            term *= -w2
            k += 1
        return total / mp.sqrt(x)
    if w2 > 0:
        w = mp.sqrt(w2)
        return mp.atan(w) / (w * mp.sqrt(x))
    w = mp.sqrt(-w2)
    # artanh(w) = log((1 + w) / (1 - w)) / 2 with (1 - w)(1 + w) = y / x known without loss
    return (mp.log1p(w) - mp.log(y / x) / 2) / (w * mp.sqrt(x))


def rj(x, y, z, p):
    """R_J(x, y, z, p) for x, y, z >= 0 (at most one zero) and p > 0."""
    x, y, z, p = mp.mpf(x), mp.mpf(y), mp.mpf(z), mp.mpf(p)
    a0 = (x + y + z + 2 * p) / 5
    spread = max(abs(a0 - x), abs(a0 - y), abs(a0 - z), abs(a0 - p))
    q = (_tolerance() / 4) ** (-mp.mpf(1) / 6) * spread
    a, fac, total = a0, 1, mp.mpf(0)
    xm, ym, zm, pm = x, y, z, p
    while fac * abs(a) <= q:
        sx, sy, sz = mp.sqrt(xm), mp.sqrt(ym), mp.sqrt(zm)
        lam = sx * (sy + sz) + sy * sz
        alpha = pm * (sx + sy + sz) + sx * sy * sz
        total += rc(alpha * alpha, pm * (pm + lam) ** 2) / fac
        xm, ym, zm = (xm + lam) / 4, (ym + lam) / 4, (zm + lam) / 4
        pm, a = (pm + lam) / 4, (a + lam) / 4
        fac *= 4
    big_x = (a0 - x) / (fac * a)
    big_y = (a0 - y) / (fac * a)
    big_z = (a0 - z) / (fac * a)
    big_p = -(big_x + big_y + big_z) / 2
    xyz = big_x * big_y * big_z
    e2 = big_x * big_y + big_x * big_z + big_y * big_z - 3 * big_p * big_p
    e3 = xyz + 2 * e2 * big_p + 4 * big_p**3
    e4 = (2 * xyz + e2 * big_p + 3 * big_p**3) * big_p
    e5 = xyz * big_p * big_p
    series = (
        1 - 3 * e2 / 14 + e3 / 6 + 9 * e2 * e2 / 88 - 3 * e4 / 22 - 9 * e2 * e3 / 52 + 3 * e5 / 26
    )
    return series / (fac * a * mp.sqrt(a)) + 3 * total


def complete_first(mc):
    """K(m) with the complement mc = 1 - m > 0 given (so that m near 1 keeps its digits)."""
    return mp.pi / (2 * mp.agm(1, mp.sqrt(mp.mpf(mc))))


def complete_third(n, one_minus_n, mc):
    """Pi(n | m) = int_0^(pi/2) dt / ((1 - n sin^2 t) sqrt(1 - m sin^2 t)) for n < 1, given with
    1 - n (exact from the caller: near n = 1 it sets the size) and mc = 1 - m.

    The AGM sum cancels to about sqrt(1 - n) of its terms, so it runs with that many guard
    digits more than the caller's precision."""
    guard = 8 + int(-mp.log10(min(mp.mpf(one_minus_n), mp.mpf(1)))) // 2
    with mp.workdps(mp.mp.dps + guard):
        n, omn = mp.mpf(n), mp.mpf(one_minus_n)
        tol = _tolerance()
        a, g = mp.mpf(1), mp.sqrt(mp.mpf(mc))
        p = mp.sqrt(omn)
        q = total = mp.mpf(1)
        while abs(q) > tol * abs(total) or abs(a - g) > 16 * tol * a:
            ag = a * g
            p2 = p * p
            q = q * (p2 - ag) / (2 * (p2 + ag))
            p = (p2 + ag) / (2 * p)
            a, g = (a + g) / 2, mp.sqrt(ag)
            total += q
        out = mp.pi / (4 * a) * (2 + n / omn * total)
    return +out
