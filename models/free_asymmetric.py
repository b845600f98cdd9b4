"""The exact free flow of a rigid body with three different principal moments, compiled.

Body momentum by Jacobi elliptic functions, attitude by the reconstruction of Celledoni, Fasso,
Safstrom and Zanna, "The exact computation of the free rigid body motion and its use in
splitting methods", SIAM J. Sci. Comput. 30 (2008) 2084: the rotation is split into one that
depends on m alone and one about the fixed L, whose angle is an elliptic integral of the third
kind. What is taken from there is that split and the use of the third-kind integral; the
formulas below are derived here, in our own frame and notation.

Momentum. Sort the axes by moment (lo, mid, hi). With L^2 = |m|^2, 2E = sum m_i^2 / I_i, m
circles the axis c = hi when L^2 > 2 E I_mid, else c = lo; b = mid, a the other. With
P = 2 E I_c - L^2 and D_a = L^2 - 2 E I_a (Landau and Lifshitz, Mechanics, sec. 37):

    m_a = A_a cn(tau | k^2),  m_b = A_b sn,  m_c = s |A_c| dn,      s = sign(m_c), constant
    A_a^2 = P I_a / (I_c - I_a),  A_b^2 = P I_b / (I_c - I_b),  A_c^2 = D_a I_c / (I_c - I_a)
    k^2 = (I_b - I_a) P / ((I_c - I_b) D_a),
    1 - k^2 = (I_c - I_a) (L^2 - 2 E I_b) / ((I_c - I_b) D_a),
    tau' = e s sign(I_c - I_b) sqrt((I_c - I_b) D_a / (I_a I_b I_c)),  e = +1 if (a, b, c) is
    a cyclic order of the axes, else -1 (m' = m x w in the permuted frame),

every quantity a ratio of two numbers of one sign, and P, D_a and L^2 - 2 E I_b formed from the
components (sums of m_i^2 (1 - I_x / I_i)), so that 1 - k^2 keeps its digits next to the
separatrix. The state gives the amplitude phi = am(tau) directly (cos phi = m_a / A_a,
sin phi = m_b / A_b); one step is phi -> am(F(phi) + tau' h), with F by Carlson's R_F and am by
the AGM (elliptic.py). m_c comes from dn^2 = (1 - k^2) + k^2 cn^2, a sum of two positive terms.

Attitude. Let u(m) be the smallest rotation taking m / |m| to z = s e_c (u is never the half
turn: s m_c > 0 on the whole orbit). With q body to space, q(t) = q(0) u(m(0))^* r(psi) u(m(t)),
r(psi) the turn by psi about z: then q(t) maps m(t) to the fixed L for any psi, and
w = psi' m/|m| + v with v the body angular velocity of u^*. So psi' = 2E / |L| - (m/|m|) . v,
and for the smallest rotation (m/|m|) . v = e s (n_a n_b' - n_b n_a') / (1 + s n_c), n = m / |L|.
On the orbit n_a dn_b - n_b dn_a = (A_a A_b / L^2) dphi, 1 + s n_c = 1 + alpha dn with
alpha = |A_c| / L, and 1 - alpha^2 dn^2 = (A_a / L)^2 (1 + nu sin^2 phi),
nu = I_c (I_b - I_a) / (I_a (I_c - I_b)), a constant of the body. So

    psi(h) - psi(0) = 2E h / L - e s beta [J1 - alpha J2]_(phi0)^(phi1),   beta = A_b / A_a,
    J1(phi) = int dphi / (1 + nu sin^2) = atan(sqrt(1 + nu) tan phi) / sqrt(1 + nu),
    J2(phi) = int dn dphi / (1 + nu sin^2)
            = F(phi) - (nu + k^2) / 3 s^3 R_J(c^2, dn^2, 1, 1 + nu s^2),  s, c = sin, cos phi

(DLMF 19.25.5 for the third kind, n = -nu), each extended past |phi| = pi/2 by its half-period
(J(phi + pi) = J(phi) + 2 J(pi / 2)).

Degenerate states: |m| = 0 (nothing moves); P = 0 or m_c = 0 (m along an axis, or on the
separatrix exactly at the middle axis: a steady rotation, w parallel to m); 1 - k^2 = 0 exactly
(on the separatrix, am(u | 1) = atan(sinh u), no half-periods). Two equal moments are handled
by the same formulas (k = 0, or the steady branch); I1 = I2 goes to free_symmetric instead.
"""

from __future__ import annotations

import math

from numba import njit

from .elliptic import am, rf, rj
from .quaternion import qmul


@njit(cache=True, error_model="numpy")
def _j1(sqrt1nu, x):
    """J1 on |x| <= pi/2: atan(sqrt(1 + nu) tan x) / sqrt(1 + nu), continuous at +-pi/2."""
    return math.atan2(sqrt1nu * math.sin(x), math.cos(x)) / sqrt1nu


@njit(cache=True, error_model="numpy")
def _j2(nu, k2, mc, sx, cx):
    """J2 on |x| <= pi/2 from sin x, cos x; also returns F(x) (the first term)."""
    c2 = cx * cx
    dn2 = mc + k2 * c2
    f = sx * rf(c2, dn2, 1.0)
    third = sx * sx * sx * rj(c2, dn2, 1.0, 1.0 + nu * sx * sx)
    return f - (nu + k2) / 3.0 * third, f


@njit(cache=True, error_model="numpy")
def _smallest_raw(l, mx, my, mz, c, s):
    """(l + |m_c|, m x z), z = s e_c: the smallest rotation taking m / l to z, unnormalised."""
    if c == 0:
        v0, v1, v2, mcc = 0.0, s * mz, -s * my, mx
    elif c == 1:
        v0, v1, v2, mcc = -s * mz, 0.0, s * mx, my
    else:
        v0, v1, v2, mcc = s * my, -s * mx, 0.0, mz
    return l + abs(mcc), v0, v1, v2


@njit(cache=True, error_model="numpy")
def _place(a, b, c, va, vb, vc):
    """(x0, x1, x2) with x_a = va, x_b = vb, x_c = vc ((a, b, c) a permutation of 0, 1, 2)."""
    x0 = va if a == 0 else (vb if b == 0 else vc)
    x1 = va if a == 1 else (vb if b == 1 else vc)
    x2 = va if a == 2 else (vb if b == 2 else vc)
    return x0, x1, x2


@njit(cache=True, error_model="numpy")
def _steady(h, m0, m1, m2, p):
    """A steady rotation (w parallel to m): the body turns about w by |w| h, m stays.
    Returns X - 1 of that turn (cos - 1 as -2 sin^2 of the half)."""
    w0 = m0 * p[3]
    w1 = m1 * p[4]
    w2 = m2 * p[5]
    wn = math.sqrt(w0 * w0 + w1 * w1 + w2 * w2)
    if wn == 0.0:
        return 0.0, 0.0, 0.0, 0.0
    half = 0.5 * h * wn
    sh = math.sin(half) / wn
    t = math.sin(0.5 * half)
    return -2.0 * t * t, sh * w0, sh * w1, sh * w2


@njit(cache=True, error_model="numpy")
def free_asymmetric_turn(h, y, p):
    """The exact free flow over h of the body state y = (q, m) with moments p[0:3], as the
    body-fixed turn X (q(h) = q(0) X, before renormalisation) less one, and the change of m:
    returns (X0 - 1, X1, X2, X3, dm1, dm2, dm3); y is unchanged. Degenerate states as in the
    module docstring."""
    mm = (y[4], y[5], y[6])
    # Sort the axes by moment: lo, mid, hi.
    lo, mid, hi = 0, 1, 2
    if p[lo] > p[mid]:
        lo, mid = mid, lo
    if p[mid] > p[hi]:
        mid, hi = hi, mid
    if p[lo] > p[mid]:
        lo, mid = mid, lo
    # Scale m so that no square underflows or overflows (the flow is homogeneous in m).
    big = max(abs(mm[0]), abs(mm[1]), abs(mm[2]))
    if big == 0.0 or not math.isfinite(big):
        return 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0
    scale = 1.0 / big
    ib = p[mid]
    d2 = 0.0  # L^2 - 2 E I_mid, from the components
    for i in range(3):
        if i != mid:
            x = mm[i] * scale
            d2 += x * x * (1.0 - ib / p[i])
    if d2 >= 0.0:
        c, a = hi, lo
    else:
        c, a = lo, hi
    b = mid
    ia, ic = p[a], p[c]
    ma, mb, mcv = mm[a] * scale, mm[b] * scale, mm[c] * scale
    pp = ma * ma * (ic / ia - 1.0) + mb * mb * (ic / ib - 1.0)  # 2 E I_c - L^2
    if pp == 0.0 or mcv == 0.0:
        r0, r1, r2, r3 = _steady(h, mm[0], mm[1], mm[2], p)
        return r0, r1, r2, r3, 0.0, 0.0, 0.0
    da = mb * mb * (1.0 - ia / ib) + mcv * mcv * (1.0 - ia / ic)  # L^2 - 2 E I_a
    dca = ic - ia
    dcb = ic - ib
    dba = ib - ia
    k2 = dba * pp / (dcb * da)
    mc = dca * d2 / (dcb * da)
    nu = ic * dba / (ia * dcb)
    beta = math.sqrt(ib * dca / (ia * dcb))
    acmc = ic * d2 / dcb  # A_c^2 (1 - k^2)
    ack2 = ic * dba * pp / (dcb * dca)  # A_c^2 k^2
    l2 = ma * ma + mb * mb + mcv * mcv
    ln = math.sqrt(l2)
    alpha = math.sqrt(da * ic / dca) / ln
    s = 1.0 if mcv > 0.0 else -1.0
    e = 1.0 if (b - a) % 3 == 1 else -1.0
    sdcb = 1.0 if dcb > 0.0 else -1.0
    rate = e * s * sdcb * math.sqrt(dcb * da / (ia * ib * ic)) / scale
    tau = rate * h
    # The phase: phi0 = j pi + phr with |phr| <= pi/2, (-1)^j = sg.
    sg = 1.0 if ma >= 0.0 else -1.0
    phr = math.atan2(sg * mb / beta, sg * ma)
    sr, cr = math.sin(phr), math.cos(phr)
    j2a, f0 = _j2(nu, k2, mc, sr, cr)
    # The advance of the amplitude as the difference of two amplitudes from the same routine:
    # what am and F round is then common to both ends and cancels.
    dph = am(f0 + tau, k2, mc) - am(f0, k2, mc)
    ph1 = phr + dph
    turns = math.floor(ph1 / math.pi + 0.5)
    ph1r = ph1 - turns * math.pi
    s1, c1 = math.sin(ph1r), math.cos(ph1r)
    # New momentum as the old one plus an increment, never rebuilt from the amplitudes: these
    # are the same numbers every step (E and L hardly move), and what they round would add up
    # linearly. (m_a / A_a, m_b / A_b) turns by dph; m_c^2 changes by nu times m_a^2's change
    # (both from dn^2 = 1 - k^2 + k^2 cn^2). Measured before: the order tests' round-off floor
    # rose linearly with the number of steps, to 1e-11 after 2e4 free flows.
    half = math.sin(0.5 * dph)
    cm1 = -2.0 * half * half
    sd = math.sin(dph)
    dma = ma * cm1 - mb * sd / beta
    dmb = mb * cm1 + beta * ma * sd
    dc2 = nu * dma * (2.0 * ma + dma)
    mc2 = mcv * mcv + dc2
    if mc2 > 0.0:
        dmc = dc2 / (mcv + s * math.sqrt(mc2))
    else:
        # round-off below the orbit's least |m_c| (next to the separatrix): from the amplitude
        dmc = s * math.sqrt(max(acmc + ack2 * c1 * c1, 0.0)) - mcv
    j2b, _ = _j2(nu, k2, mc, s1, c1)
    sqrt1nu = math.sqrt(1.0 + nu)
    dj1 = _j1(sqrt1nu, ph1r) - _j1(sqrt1nu, phr)
    dj2 = j2b - j2a
    if turns != 0.0:
        dj1 += turns * math.pi / sqrt1nu
        if mc > 0.0:
            half2 = rf(0.0, mc, 1.0) - (nu + k2) / 3.0 * rj(0.0, mc, 1.0, 1.0 + nu)
            dj2 += turns * 2.0 * half2
    e2 = 0.0  # 2 E in the scaled momentum
    for i in range(3):
        x = mm[i] * scale
        e2 += x * x / p[i]
    # 2E / L in the true momentum is (e2 / ln) / scale; the phase term is an angle.
    dpsi = e2 / ln * h / scale - e * s * beta * (dj1 - alpha * dj2)
    # Attitude: X = u(m0)^* r(dpsi) u(m1) = r'(dpsi) Y, r' the turn by dpsi about m0 and
    # Y = u(m0)^* u(m1). With u ~ (w, v), w = l + |m_c|, v = m x z, the vector part of
    # conj(u0) u1 is w0 dv - dw v0 - v0 x dv (dv = dm x z, dw = s dm_c): small, and formed
    # from the increments, not as a difference of two nearly equal quaternions.
    dm0, dm1, dm2 = _place(a, b, c, dma, dmb, dmc)
    o0, o1, o2 = _place(a, b, c, ma, mb, mcv)
    w0, v0x, v0y, v0z = _smallest_raw(ln, o0, o1, o2, c, s)
    dw, dvx, dvy, dvz = _smallest_raw(0.0, dm0, dm1, dm2, c, s)
    dw = s * dmc
    w1 = w0 + dw
    v1x, v1y, v1z = v0x + dvx, v0y + dvy, v0z + dvz
    yx = w0 * dvx - dw * v0x - (v0y * dvz - v0z * dvy)
    yy = w0 * dvy - dw * v0y - (v0z * dvx - v0x * dvz)
    yz = w0 * dvz - dw * v0z - (v0x * dvy - v0y * dvx)
    ys = w0 * w1 + v0x * v1x + v0y * v1y + v0z * v1z
    nrm = 1.0 / math.sqrt(
        (w0 * w0 + v0x * v0x + v0y * v0y + v0z * v0z)
        * (w1 * w1 + v1x * v1x + v1y * v1y + v1z * v1z)
    )
    yx *= nrm
    yy *= nrm
    yz *= nrm
    y0 = ys * nrm
    ey = -(yx * yx + yy * yy + yz * yz) / (1.0 + y0)  # Y0 - 1
    qp = math.sin(0.25 * dpsi)
    er = -2.0 * qp * qp  # cos(dpsi / 2) - 1
    sh = math.sin(0.5 * dpsi) / ln
    rx, ry, rz = sh * o0, sh * o1, sh * o2
    # X - 1 = (r' - 1) Y + (Y - 1)
    x0, x1, x2, x3 = qmul(er, rx, ry, rz, 1.0 + ey, yx, yy, yz)
    inv = 1.0 / scale
    return x0 + ey, x1 + yx, x2 + yy, x3 + yz, dm0 * inv, dm1 * inv, dm2 * inv


@njit(cache=True, error_model="numpy")
def free_asymmetric(h, y, p):
    """The exact free flow over h, in place on the body state y; q renormalised by one
    division-free Newton step (its error is round-off)."""
    e0, x1, x2, x3, dm1, dm2, dm3 = free_asymmetric_turn(h, y, p)
    q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
    d0, d1, d2, d3 = qmul(q0, q1, q2, q3, e0, x1, x2, x3)
    r0, r1, r2, r3 = q0 + d0, q1 + d1, q2 + d2, q3 + d3
    g = 0.5 * (1.0 - (r0 * r0 + r1 * r1 + r2 * r2 + r3 * r3))
    y[0] = r0 + r0 * g
    y[1] = r1 + r1 * g
    y[2] = r2 + r2 * g
    y[3] = r3 + r3 * g
    y[4] += dm1
    y[5] += dm2
    y[6] += dm3


@njit(cache=True, error_model="numpy")
def free_asymmetric_increment(h, y, p, d):
    """free_asymmetric(h, y) - y into d, y unchanged (compensated summation): q (X - 1) and
    the momentum's increment, both formed as increments (free_asymmetric_turn)."""
    e0, x1, x2, x3, dm1, dm2, dm3 = free_asymmetric_turn(h, y, p)
    q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
    d0, d1, d2, d3 = qmul(q0, q1, q2, q3, e0, x1, x2, x3)
    n0, n1, n2, n3 = q0 + d0, q1 + d1, q2 + d2, q3 + d3
    g = 0.5 * (1.0 - (n0 * n0 + n1 * n1 + n2 * n2 + n3 * n3))
    d[0] = d0 + n0 * g
    d[1] = d1 + n1 * g
    d[2] = d2 + n2 * g
    d[3] = d3 + n3 * g
    d[4] = dm1
    d[5] = dm2
    d[6] = dm3
