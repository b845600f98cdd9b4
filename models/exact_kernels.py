"""Compiled per-sample loops of the exact Lagrange-top solution (see exact.py for the formulas).

Two kernels around scipy's vectorised Carlson integrals: `phase_kernel` reduces each time to
whole nutation periods and the reduced phase r (double-double), counts the pole passes and
evaluates sn, cn, dn at r; `angles_kernel` adds the within-period terms to the double-double
sums of the phase offsets, per-period advances and linear parts, folds phi and psi with their
turns, and gives theta and what the momentum needs. The constants reach them as one float64
array with the named indices below (pack_periodic), the descending Landen ratios as another.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .double_double import PI, add, linear_remainder, mul, reduce_turns
from .exact_constants import PeriodicMotion, SteadyMotion

(
    K_LAM0,
    K_LAM1,
    K_LAM2,
    K_TAU0H,
    K_TAU0L,
    K_TWOK0,
    K_TWOK1,
    K_TWOK2,
    K_QUARTER0,
    K_QUARTER1,
    K_M,
    K_MC,
    K_KPRIME,
    K_TOP,
    K_BOTTOM,
    K_COUNT0,
    K_GAP,
    K_X1,
    K_OM2,
    K_OP1,
    K_BMA,
    K_BPA,
    K_A,
    K_K0,
    K_BETA,
    K_LAM,
    K_RATE_PSI,
    K_I1,
    K_FLIP,
    K_PHI_C0,
    K_PHI_C1,
    K_PSI_C0,
    K_PSI_C1,
    K_DPHI0,
    K_DPHI1,
    K_DPSI0,
    K_DPSI1,
    K_CF_PHI0,
    K_CF_PHI1,
    K_CF_PSI0,
    K_CF_PSI1,
    N_CONSTANTS,
) = range(42)

_PI0, _PI1 = PI


def pack_periodic(pm: PeriodicMotion, flip: bool) -> np.ndarray:
    """The constants of a periodic motion as the kernels' parameter array (count0 set later)."""
    ph, adv, sh = pm.phase, pm.advances, pm.shape
    c = np.zeros(N_CONSTANTS)
    c[K_LAM0 : K_LAM2 + 1] = ph.lam
    c[K_TAU0H], c[K_TAU0L] = ph.tau0
    c[K_TWOK0 : K_TWOK2 + 1] = ph.two_k
    c[K_QUARTER0], c[K_QUARTER1] = ph.quarter
    c[K_M], c[K_MC], c[K_KPRIME] = ph.m, ph.mc, ph.kprime
    c[K_TOP], c[K_BOTTOM] = float(adv.top_pass), float(adv.bottom_pass)
    c[K_GAP], c[K_X1], c[K_OM2], c[K_OP1] = sh.gap, sh.x1, sh.om2, sh.op1
    c[K_BMA], c[K_BPA], c[K_A], c[K_K0], c[K_BETA] = sh.bma, sh.bpa, sh.a, sh.k0, sh.beta
    c[K_LAM], c[K_RATE_PSI], c[K_I1], c[K_FLIP] = sh.lam, sh.rate_psi, sh.i1, float(flip)
    c[K_PHI_C0], c[K_PHI_C1] = adv.phi_c
    c[K_PSI_C0], c[K_PSI_C1] = adv.psi_c
    c[K_DPHI0], c[K_DPHI1] = adv.dphi
    c[K_DPSI0], c[K_DPSI1] = adv.dpsi
    c[K_CF_PHI0], c[K_CF_PHI1] = adv.cf_phi
    c[K_CF_PSI0], c[K_CF_PSI1] = adv.cf_psi
    return c


def landen_ratios(m: float, mc: float) -> np.ndarray:
    """[2^n a_n, c_n / a_n, ..., c_1 / a_1] of the arithmetic-geometric mean started from
    (1, sqrt(mc)) (DLMF 22.20(ii)): sqrt(mc) rather than sqrt(1 - m), so that near m = 1 the
    complement keeps its full precision."""
    eps = 2.220446049250313e-16
    a = [1.0]
    c = [math.sqrt(m)]
    b = math.sqrt(mc)
    while abs(c[-1]) > eps * a[-1] and len(a) < 40:
        an = 0.5 * (a[-1] + b)
        c.append(0.5 * (a[-1] - b))
        b = math.sqrt(a[-1] * b)
        a.append(an)
    n = len(a) - 1
    return np.array([(2.0**n) * a[n]] + [c[k] / a[k] for k in range(n, 0, -1)])


@njit(cache=True, inline="always")
def _sn_cn(u, landen):
    """sn(u | m), cn(u | m) by descending Landen steps from the precomputed AGM ratios."""
    phi = landen[0] * u
    for k in range(1, landen.shape[0]):
        phi = 0.5 * (phi + math.asin(landen[k] * math.sin(phi)))
    return math.sin(phi), math.cos(phi)


@njit(cache=True)
def phase_kernel(c, landen, th, tl, j1, j2, rh, rl, count, sn, cn, dn, delta):
    """Per time: whole periods j1 + j2, reduced phase r = rh + rl, pole passes since t = 0, and
    sn, cn, dn at a double point r - delta within ulp(K) of r (cn relatively accurate near r =
    +/-K, where the axis is at its upper turning point: quarter-period shift, DLMF 22.4.3)."""
    q0, q1 = c[K_QUARTER0], c[K_QUARTER1]
    m, mc, kp = c[K_M], c[K_MC], c[K_KPRIME]
    top, bottom = c[K_TOP] != 0.0, c[K_BOTTOM] != 0.0
    count0 = np.int64(c[K_COUNT0])
    for i in range(th.shape[0]):
        a, b, h, l = linear_remainder(
            c[K_LAM0], c[K_LAM1], c[K_LAM2], c[K_TAU0H], c[K_TAU0L],
            c[K_TWOK0], c[K_TWOK1], c[K_TWOK2], th[i], tl[i],
        )  # fmt: skip
        j1[i], j2[i], rh[i], rl[i] = a, b, h, l
        whole = np.int64(a) + np.int64(b)
        n = np.int64(0)
        if top:  # a pass at every tau = K mod 2K, the instant itself counted as passed
            n += whole - 1 + (1 if (h > q0 or (h == q0 and l >= q1)) else 0)
        if bottom:  # and at every tau = 0 mod 2K
            n += whole - 1 + (1 if (h > 0.0 or (h == 0.0 and l >= 0.0)) else 0)
        count[i] = n - count0
        sign = -1.0 if h < 0.0 else 1.0
        ah, al = sign * h, sign * l
        if ah > 0.5 * q0:
            vh, vl = add(q0, q1, -ah, -al)  # v = K - |r| without cancellation
            s, co = _sn_cn(vh, landen)
            d = math.sqrt(mc + m * co * co)
            sn[i] = sign * co / d
            cn[i] = kp * s / d
            dn[i] = kp / d
            delta[i] = -sign * vl
        else:
            s, co = _sn_cn(ah, landen)
            sn[i] = sign * s
            cn[i] = co
            dn[i] = math.sqrt(mc + m * co * co)
            delta[i] = sign * al


# Called, not inlined: angles_kernel uses it twice a sample, and each inlined copy of its
# double-double arithmetic was typed and optimised again (most of that kernel's cold compile).
@njit(cache=True)
def _whole(base0, base1, per0, per1, j1, j2, passes, lin0, lin1, rh, rl, small):
    """base + per (j1 + j2) + pi passes + lin r + small, folded, with its turns: the large part
    is reduced first so that the within-period terms are added at full precision."""
    xh, xl = mul(per0, per1, j1, 0.0)
    yh, yl = mul(per0, per1, j2, 0.0)
    xh, xl = add(xh, xl, yh, yl)
    xh, xl = add(xh, xl, base0, base1)
    xh, xl, k1 = reduce_turns(xh, xl)
    half = math.floor(0.5 * passes)
    odd = passes - 2.0 * half
    xh, xl = add(xh, xl, odd * _PI0, odd * _PI1)
    yh, yl = mul(lin0, lin1, rh, rl)
    xh, xl = add(xh, xl, yh, yl)
    xh, xl = add(xh, xl, small, 0.0)
    vh, vl, k2 = reduce_turns(xh, xl)
    return vh + vl, k1 + half + k2


@njit(cache=True)
def angles_kernel(
    c, j1, j2, rh, rl, count, sn, cn, dn, delta, term1, term2,
    theta, phi, phi_turns, psi, psi_turns, mperp, chi,
):  # fmt: skip
    """Per time: theta, phi and psi folded with their turns (true problem), and the transverse
    momentum's size and direction chi in the frame that tilts with the axis (mperp, chi are
    written only when they have the length of the other arrays)."""
    gap, om2, op1 = c[K_GAP], c[K_OM2], c[K_OP1]
    bma, bpa, lam = c[K_BMA], c[K_BPA], c[K_LAM]
    flip = c[K_FLIP] != 0.0
    rates = mperp.shape[0] == theta.shape[0]
    for i in range(theta.shape[0]):
        s, co, d = sn[i], cn[i], dn[i]
        sn2, cn2 = s * s, co * co
        omu = om2 + gap * cn2  # 1 - u and 1 + u as sums of non-negative terms
        opu = op1 + gap * sn2
        part1 = 0.5 * bma / omu if bma != 0.0 else 0.0
        part2 = 0.5 * bpa / opu if bpa != 0.0 else 0.0
        phi_rate = (part1 + part2) / lam  # dphi / dtau, dpsi / dtau, du / dtau
        psi_rate = c[K_RATE_PSI] + (part2 - part1) / lam
        udot = 2.0 * gap * s * co * d
        sin_t = math.sqrt(omu * opu)
        theta_rate = -udot / sin_t if sin_t > 0.0 else 0.0
        if flip:
            theta[i] = 2.0 * math.atan2(math.sqrt(opu), math.sqrt(omu)) - theta_rate * delta[i]
        else:
            theta[i] = 2.0 * math.atan2(math.sqrt(omu), math.sqrt(opu)) + theta_rate * delta[i]
        passes = float(count[i])
        small = term1[i] + term2[i] + (phi_rate - c[K_CF_PHI0]) * delta[i]
        phi[i], k = _whole(
            c[K_PHI_C0], c[K_PHI_C1], c[K_DPHI0], c[K_DPHI1], j1[i], j2[i], passes,
            c[K_CF_PHI0], c[K_CF_PHI1], rh[i], rl[i], small,
        )  # fmt: skip
        phi_turns[i] = np.int64(k)
        small = term2[i] - term1[i] + (psi_rate - c[K_CF_PSI0]) * delta[i]
        v, k = _whole(
            c[K_PSI_C0], c[K_PSI_C1], c[K_DPSI0], c[K_DPSI1], j1[i], j2[i], -passes,
            c[K_CF_PSI0], c[K_CF_PSI1], rh[i], rl[i], small,
        )  # fmt: skip
        psi[i] = -v if flip else v
        psi_turns[i] = np.int64(-k if flip else k)
        if rates:
            # |m_perp| = I1 sqrt(alpha - beta u) and chi = atan2(A, sin(theta) p_theta), both
            # regular at the poles; A / I1 = b - a u from the side of the nearer pole (exactly
            # zero there when the axis passes through it).
            x = c[K_X1] + gap * sn2
            mperp[i] = c[K_I1] * math.sqrt(max(c[K_K0] - c[K_BETA] * x, 0.0))
            big_a = bma + c[K_A] * omu if omu <= opu else bpa - c[K_A] * opu
            s_ptheta = (lam if flip else -lam) * udot
            if big_a == 0.0 and s_ptheta == 0.0:
                # the very instant of a pass: the axis is leaving the pole
                chi[i] = 0.0 if theta[i] < 1.0 else math.pi
            else:
                chi[i] = math.atan2(big_a, s_ptheta)


def pack_steady(sm: SteadyMotion) -> np.ndarray:
    return np.array([sm.phi0[0], sm.phi0[1], sm.psi0[0], sm.psi0[1], *sm.spin_rate])


@njit(cache=True)
def steady_kernel(c, th, tl, phi, phi_turns, psi, psi_turns):
    """phi fixed at phi0, psi = psi0 + spin t, both folded with their turns."""
    for i in range(th.shape[0]):
        vh, vl, k = reduce_turns(c[0], c[1])
        phi[i], phi_turns[i] = vh + vl, np.int64(k)
        xh, xl = mul(c[4], c[5], th[i], tl[i])
        xh, xl = add(xh, xl, c[2], c[3])
        vh, vl, k = reduce_turns(xh, xl)
        psi[i], psi_turns[i] = vh + vl, np.int64(k)
