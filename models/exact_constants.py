"""The constants of an exact Lagrange-top motion, computed once per start in multiprecision.

With tau = lambda t + tau0 = 2 K j + r, |r| <= K, whole nutation periods j and the reduced phase
r, in the (reflected, M g l >= 0) problem:

    u(t)   = u1 + (u2 - u1) sn^2(r | m)
    phi(t) = phi_c + j dphi + pi c + cf_phi r + sn^3 (c1 R_J(.., p1) + c2 R_J(.., p2))
    psi(t) = psi_c + j dpsi - pi c + cf_psi r + sn^3 (-c1 R_J(.., p1) + c2 R_J(.., p2))

where c counts the passes through the vertical (u2 = 1 or u1 = -1 exactly) and the R_J terms are
the third-kind parts of Pi(n; am r) = r + n/3 sn^3 R_J(cn^2, dn^2, 1, 1 - n sn^2) (the first-kind
part F(am r) = r is exact). Everything that multiplies a large number (lambda, K, the per-period
advances dphi and dpsi, the coefficients of r) or that sets a phase (tau0, phi_c, psi_c) is kept
here as a double-double from a 40-digit (or more) computation on the exact start; the rest are
doubles, correctly rounded, for the per-sample evaluation in exact.py.

Cost, measured on a loaded 2-core machine with mpmath's pure-Python back end: 5 to 30 ms per
start, most of it in the two incomplete third-kind integrals at the start phase (none when the
start is at a turning point).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from .exact_arith import multiprecision
from .exact_roots import Roots, solve_roots
from .exact_start import ExactInput, Start, start_of, weight_factor

# Decimal digits for the constants: 40 keeps a double-double (32 digits) correctly rounded with
# margin; more where the double-precision roots show that a small distance sets the size.
BASE_DIGITS = 40
MAX_EXTRA_DIGITS = 60
# The start-phase integrals only set constant offsets: 26 digits are ample.
PHASE_DIGITS = 26

DD = tuple[float, float]
TD = tuple[float, float, float]


def _dd(x) -> DD:
    hi = float(x)
    return hi, float(x - hi)


def _td(x) -> TD:
    hi = float(x)
    mid = float(x - hi)
    return hi, mid, float(x - hi - mid)


@dataclass(frozen=True)
class Phase:
    """tau = lam t + tau0 = 2 K j + r: lam and 2 K as triple-doubles (they multiply t and j),
    tau0 and the quarter period K as double-doubles, with the parameter m."""

    lam: TD
    two_k: TD
    quarter: DD
    tau0: DD
    m: float
    mc: float
    kprime: float


@dataclass(frozen=True)
class Advances:
    """What phi and psi gain: per nutation period (dphi, dpsi, without the pole passes), per unit
    of reduced phase r (cf_phi, cf_psi), and the offsets phi_c, psi_c (double-doubles)."""

    dphi: DD
    dpsi: DD
    cf_phi: DD
    cf_psi: DD
    phi_c: DD
    psi_c: DD
    top_pass: bool
    bottom_pass: bool


@dataclass(frozen=True)
class Shape:
    """Doubles of the within-period terms (see the module docstring), u = 1 - omu = opu - 1 with
    omu = om2 + gap cn^2 and opu = op1 + gap sn^2. For n2 < -1 (the axis close to the lower pole)
    the second term is evaluated by DLMF 19.7.8 instead (partner nn = m / n2), whose first-kind
    part is then not in cf_phi, cf_psi: `half2` multiplies that whole term."""

    gap: float
    x1: float
    om1: float
    om2: float
    op1: float
    n1: float
    c1: float
    c2: float
    alt2: bool
    half2: float
    nn: float
    a: float
    bma: float
    bpa: float
    k0: float
    beta: float
    lam: float
    rate_psi: float
    i1: float


@dataclass(frozen=True)
class PeriodNumbers:
    """The per-period summary, each correctly rounded from the multiprecision value (true, not
    reflected, problem): period, phi and psi per period including the pole passes, their rates,
    the roots u1 <= u2 (<= u3) of f and the nutation range."""

    period: float
    precession_per_period: float
    spin_per_period: float
    mean_precession_rate: float
    mean_spin_rate: float
    roots: tuple[float, float, float]
    theta_min: float
    theta_max: float


@dataclass(frozen=True)
class PeriodicMotion:
    phase: Phase
    advances: Advances
    shape: Shape
    numbers: PeriodNumbers


@dataclass(frozen=True)
class SteadyMotion:
    """The axis at rest (sleeping, hanging, free spin): phi fixed, psi at the spin rate."""

    phi0: DD
    psi0: DD
    spin_rate: DD
    period: float
    spin_per_period: float
    mean_spin_rate: float


def extra_digits(*distances: float) -> int:
    """Guard digits for the smallest positive distance among the double-precision estimates."""
    small = [d for d in distances if d > 0.0 and math.isfinite(d)]
    if not small or min(small) >= 1e-4:
        return 0
    return min(MAX_EXTRA_DIGITS, int(-math.log10(min(small))) + 1)


@dataclass(frozen=True)
class _Elliptic:
    """The multiprecision parameters of the elliptic solution (reflected problem): m and its
    complement, lambda, K, the spin-rate part of psi per unit of tau, the characteristics n of
    the two third-kind integrals with their coefficients half = (b -/+ a) / (2 (1 -/+ u1) lam)
    and complete values Pi(n | m)."""

    m: Any
    mc: Any
    lam: Any
    quarter: Any
    rate: Any
    n1: Any
    n2: Any
    half1: Any
    half2: Any
    big1: Any
    big2: Any


def periodic_motion(inp: ExactInput, flip: bool, digits: int) -> PeriodicMotion:
    """The constants of a nutating motion, from the exact start at `digits` decimal digits:
    the start and its turning points again (in multiprecision), the elliptic parameters, then
    the phase, the per-period advances, the within-period shape and the summary numbers."""
    import mpmath as mp

    with mp.workdps(digits):
        ar = multiprecision()
        st = start_of(inp, ar)
        if flip:
            st = st.reflected()
        beta = 2 * abs(mp.mpf(inp.mgl)) * weight_factor(inp, ar) / mp.mpf(inp.i1)
        roots = solve_roots(st, beta, ar)
        ell = _elliptic(inp, st, roots, beta, flip)
        tau0, pi1, pi2 = _start_phase(roots, ell, st.udot0)
        phase = Phase(
            lam=_td(ell.lam),
            two_k=_td(2 * ell.quarter),
            quarter=_dd(ell.quarter),
            tau0=_dd(tau0),
            m=float(ell.m),
            mc=float(ell.mc),
            kprime=float(mp.sqrt(ell.mc)),
        )
        advances = _advances(st, roots, ell, tau0, pi1, pi2)
        shape = _shape(inp, st, roots, ell, beta)
        numbers = _numbers(st, roots, ell, advances, beta, flip)
    return PeriodicMotion(phase, advances, shape, numbers)


def _elliptic(inp: ExactInput, st: Start, roots: Roots, beta, flip: bool) -> _Elliptic:
    import mpmath as mp

    from . import carlson

    gap, om1, om2, op1, op2 = roots.gap, roots.om1, roots.om2, roots.op1, roots.op2
    if beta > 0:
        span = roots.d32 + gap
        m, mc, kappa = gap / span, roots.d32 / span, beta * span
    else:
        m, mc, kappa = mp.mpf(0), mp.mpf(1), st.k0 + st.a**2
    lam = mp.sqrt(kappa) / 2
    # (p_psi - h3) / I3 of the (reflected) problem, the shell's spin rate: the mirror turns the
    # rotor's momentum with p_psi (h3 -> -h3); h3 = 0 leaves the rigid top's value exactly.
    h3 = -mp.mpf(inp.h3) if flip else mp.mpf(inp.h3)
    w3 = (st.a * mp.mpf(inp.i1) - h3) / mp.mpf(inp.i3)
    zero = mp.mpf(0)
    # 1 - u = om1 (1 - n1 sn^2) and 1 + u = op1 (1 - n2 sn^2), with 1 - n as a ratio of
    # distances; a term whose numerator b -/+ a is exactly zero (a pole pass) is absent.
    top, bottom = st.bma != 0, st.bpa != 0
    n1 = gap / om1 if top else zero
    n2 = -gap / op1 if bottom else zero
    return _Elliptic(
        m=m,
        mc=mc,
        lam=lam,
        quarter=carlson.complete_first(mc),
        rate=(w3 - st.a) / lam,
        n1=n1,
        n2=n2,
        half1=st.bma / (2 * om1 * lam) if top else zero,
        half2=st.bpa / (2 * op1 * lam) if bottom else zero,
        big1=carlson.complete_third(n1, om2 / om1, mc) if top else zero,
        big2=carlson.complete_third(n2, op2 / op1, mc) if bottom else zero,
    )


def _advances(st: Start, roots: Roots, ell: _Elliptic, tau0, pi1, pi2) -> Advances:
    """Over a period Pi(n; am tau) gains 2 Pi(n | m); psi also gains rate 2K. The offsets make
    phi(0) = phi0 and psi(0) = psi0 with the start phase's integrals pi1, pi2."""
    part1, part2 = 2 * ell.half1 * ell.big1, 2 * ell.half2 * ell.big2
    s_phi0 = ell.half1 * pi1 + ell.half2 * pi2
    s_psi0 = -ell.half1 * pi1 + ell.half2 * pi2 + ell.rate * tau0
    # The first-kind part of Pi(n2) is linear in r unless the partner form replaces it.
    linear2 = 0 if ell.n2 < -1 else ell.half2
    return Advances(
        dphi=_dd(part1 + part2),
        dpsi=_dd(2 * ell.quarter * ell.rate - part1 + part2),
        cf_phi=_dd(ell.half1 + linear2),
        cf_psi=_dd(ell.rate - ell.half1 + linear2),
        phi_c=_dd(st.phi0 - s_phi0),
        psi_c=_dd(st.psi0 - s_psi0),
        top_pass=bool(roots.gap > 0 and roots.om2 == 0),
        bottom_pass=bool(roots.gap > 0 and roots.op1 == 0),
    )


def _shape(inp: ExactInput, st: Start, roots: Roots, ell: _Elliptic, beta) -> Shape:
    alt2 = bool(ell.n2 < -1)
    return Shape(
        gap=float(roots.gap),
        x1=float(roots.x1),
        om1=float(roots.om1),
        om2=float(roots.om2),
        op1=float(roots.op1),
        n1=float(ell.n1),
        c1=float(ell.half1 * ell.n1 / 3),
        c2=float(ell.half2 * ell.n2 / 3),
        alt2=alt2,
        half2=float(ell.half2),
        nn=float(ell.m / ell.n2) if alt2 else 0.0,
        a=float(st.a),
        bma=float(st.bma),
        bpa=float(st.bpa),
        k0=float(st.k0),
        beta=float(beta),
        lam=float(ell.lam),
        rate_psi=float(ell.rate),
        i1=inp.i1,
    )


def _numbers(st: Start, roots: Roots, ell: _Elliptic, adv: Advances, beta, flip) -> PeriodNumbers:
    """The per-period summary in the true problem, each rounded once from multiprecision."""
    import mpmath as mp

    period = 2 * ell.quarter / ell.lam
    passes = int(adv.top_pass) + int(adv.bottom_pass)
    part1, part2 = 2 * ell.half1 * ell.big1, 2 * ell.half2 * ell.big2
    per_phi = part1 + part2 + mp.pi * passes
    per_psi = (2 * ell.quarter * ell.rate - part1 + part2 - mp.pi * passes) * (-1 if flip else 1)
    u0 = st.u0
    u = (u0 + roots.x1, u0 + roots.x2, u0 + roots.x3 if beta > 0 else mp.inf)
    tmin = 2 * mp.atan2(mp.sqrt(roots.om2), mp.sqrt(roots.op2))
    tmax = 2 * mp.atan2(mp.sqrt(roots.om1), mp.sqrt(roots.op1))
    if flip:
        u = (-u[1], -u[0], -u[2])
        tmin, tmax = mp.pi - tmax, mp.pi - tmin
    return PeriodNumbers(
        period=float(period),
        precession_per_period=float(per_phi),
        spin_per_period=float(per_psi),
        mean_precession_rate=float(per_phi / period),
        mean_spin_rate=float(per_psi / period),
        roots=(float(u[0]), float(u[1]), float(u[2])),
        theta_min=float(tmin),
        theta_max=float(tmax),
    )


def _start_phase(roots: Roots, ell: _Elliptic, udot0):
    """tau0 with sn^2(tau0) = (u0 - u1) / (u2 - u1), signed by du/dt, and Pi(n1; am tau0),
    Pi(n2; am tau0): constant offsets, computed at PHASE_DIGITS (plus the digits that a large
    negative n2 cancels in Carlson's form)."""
    import mpmath as mp

    from . import carlson

    x1, x2, gap = roots.x1, roots.x2, roots.gap
    zero = mp.mpf(0)
    if gap == 0 or x1 == 0:
        return zero, zero, zero
    if x2 == 0:
        return ell.quarter, ell.big1, ell.big2
    m, mc, n1, n2 = ell.m, ell.mc, ell.n1, ell.n2
    sn2, cn2 = -x1 / gap, x2 / gap
    dn2 = mc + m * cn2
    guard = int(mp.log10(1 + abs(n2))) // 2 + 1
    with mp.workdps(PHASE_DIGITS + guard):
        sn = mp.sqrt(sn2)
        f0 = sn * carlson.rf(cn2, dn2, 1)
        # 1 - n sn^2 as the ratios (1 - u0) / (1 - u1) and (1 + u0) / (1 + u1)
        p1 = (roots.om2 + gap * cn2) / roots.om1
        p2 = (roots.op1 + gap * sn2) / roots.op1
        pi1 = f0 + n1 / 3 * sn * sn2 * carlson.rj(cn2, dn2, 1, p1) if n1 != 0 else zero
        pi2 = f0 + n2 / 3 * sn * sn2 * carlson.rj(cn2, dn2, 1, p2) if n2 != 0 else zero
    if not udot0 > 0:
        f0, pi1, pi2 = -f0, -pi1, -pi2
    return +f0, +pi1, +pi2


def steady_motion(inp: ExactInput, flip: bool, pole: int, beta_zero: bool) -> SteadyMotion:
    """The constants of an axis at rest: phi0, psi0 and the spin rate (p_psi - h3) / I3 (true
    problem), and the small-oscillation period about it where there is one (reflected problem:
    pole = +1 is the axis up against gravity)."""
    import mpmath as mp

    ar = multiprecision()
    with mp.workdps(BASE_DIGITS):
        st = start_of(inp, ar)
        i1, i3 = mp.mpf(inp.i1), mp.mpf(inp.i3)
        spin = (st.p_psi - mp.mpf(inp.h3)) / i3  # the shell's spin; h3 = 0 is the rigid top's
        a = st.p_psi / i1
        beta = 2 * abs(mp.mpf(inp.mgl)) * weight_factor(inp, ar) / i1
        period = mp.inf
        if not beta_zero:
            if pole == 1:
                disc = a * a - 2 * beta  # (p_psi^2 - 4 I1 |M g l|) / I1^2, the sleeping margin
                period = 2 * mp.pi / mp.sqrt(disc) if disc > 0 else mp.inf
            elif pole == -1:
                period = 2 * mp.pi / mp.sqrt(a * a + 2 * beta)
        per = spin * period if period < mp.inf else mp.inf
        return SteadyMotion(
            phi0=_dd(st.phi0),
            psi0=_dd(st.psi0),
            spin_rate=_dd(spin),
            period=float(period),
            spin_per_period=float(per),
            mean_spin_rate=float(spin),
        )
