"""Jacobi's elliptic functions sn, cn, dn for arrays of real arguments, as the exact Lagrange-top
solution evaluates them (scipy's ellipj takes m only, not its complement).

The argument comes as a double-double r = rh + rl reduced to one period, |r| <= K. Near r = +/-K
(the upper turning point, where cn -> 0 and the axis may pass close to the vertical) cn must keep
its relative accuracy, which sn(r) computed from r cannot give: there the quarter-period shift
(DLMF 22.4.3) evaluates sn(K - v) = cn(v) / dn(v), cn(K - v) = k' sn(v) / dn(v),
dn(K - v) = k' / dn(v) at v = K - |r|, taken from the double-double without cancellation.
"""

from __future__ import annotations

import math

import numpy as np

from . import double_double as dd

EPS = 2.220446049250313e-16


def sn_cn(u, m, mc):
    """sn(u | m) and cn(u | m) by the arithmetic-geometric mean and descending Landen steps
    (DLMF 22.20(ii)), started from sqrt(mc) rather than sqrt(1 - m) so that near m = 1 the
    complement keeps its full precision."""
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


def sn_cn_dn_reduced(rh, rl, quarter, m, mc, kprime):
    """sn, cn, dn at r = rh + rl, |r| <= K = quarter (a double-double pair), and delta: the
    functions are those of a point r - delta that the double arithmetic represents exactly
    (|delta| <= ulp(K)), for first-order corrections by the caller."""
    rh = np.asarray(rh, dtype=np.float64)
    rl = np.asarray(rl, dtype=np.float64)
    sign = np.where(rh < 0.0, -1.0, 1.0)
    ah, al = sign * rh, sign * rl
    near = ah > 0.5 * quarter[0]
    vh, vl = dd.add(quarter[0], quarter[1], -ah, -al)
    arg = np.where(near, vh, ah)
    s, c = sn_cn(arg, m, mc)
    d = np.sqrt(mc + m * c * c)
    sn = np.where(near, c / d, s) * sign
    cn = np.where(near, kprime * s / d, c)
    dn = np.where(near, kprime / d, d)
    # Evaluated at sign (K - vh) near K, at sign ah elsewhere.
    delta = np.where(near, -vl, al) * sign
    return sn, cn, dn, delta
