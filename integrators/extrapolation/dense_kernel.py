"""The kernel of `gbs-dense`: Gragg-Bulirsch-Stoer with a dense output, so that the steps never
depend on the output times (gbs, kernel.py, shortens a step to land on each one).

The dense output is the one of Hairer, Norsett and Wanner, Solving ODEs I, 2nd ed., sec. II.9
(after Hairer and Ostermann, 1990), as worked out here; the derivation, from memory of its
idea, is this:

- The step numbers are n_j = 4 j - 2 (2, 6, 10, 14, ...), so that the step's midpoint
  x_m = x0 + H/2 is grid point m = n_j / 2 = 2 j - 1 of every line, an odd one. Gragg's
  expansion z_i - y(x_i) = sum_k h^(2k) (a_k(x_i) + (-1)^i b_k(x_i)) then has the same sign in
  front of b_k at x_m on every line: z_m, and f(z_i) at points of one parity around it, are
  smooth functions of x with expansions in even powers of h, and can be extrapolated in h^2
  like the line ends.
- Derivative k >= 1 at the midpoint, from the right-hand sides of line j: the central
  difference of order r = k - 1 with spacing 2 h,
      d_k^(j) = sum_(i=0..r) (-1)^i C(r, i) f_(m + r - 2 i) / (2 h)^r,
  which reaches back to f_(m - r): it needs r <= m, so line j serves the derivatives k <= 2 j.
  Derivative 0 is z_m itself. Derivative k is extrapolated over the lines ceil(k/2) .. kappa
  (kappa: the accepted line, order 2 kappa), by the same Aitken-Neville recursion as the ends.
- The polynomial, in s = (t - x0) / H - 1/2 on [-1/2, 1/2]:
      P(s) = sum_(k=0..M) H^k D_k / k! s^k + s^(M+1) (b_0 + b_1 s + b_2 s^2 + b_3 s^3),
  the midpoint's Taylor polynomial of degree M and a correction that matches the ends:
  P(-1/2) = y0, P(1/2) = y1 (the step's extrapolated value), P'(+-1/2) = H f(y0), H f(y1) (the
  latter is evaluated for the next step anyway: the dense output costs no evaluation). The four
  b_r solve a 4 x 4 system that depends on M alone (DENSE_INV below). P has degree M + 4.
- M = 2 kappa - 4 (the choice of the section's code, from memory): the interpolation error is
  then O(H^(2 kappa + 1)), the local error of the step's own order, and the data's errors are no
  larger: derivative k extrapolated over kappa - ceil(k/2) + 1 lines is O(h^(2 kappa - k + 1))
  or better, times H^k in P.

Round-off: the difference of order r amplifies the rounding of f by up to 2^r / (2 h)^r, so the
top derivative's term carries about eps |H f| n^(M-1) / (2^M M!) (n = n_kappa).

Why the polynomial's own error control: without it (first version, measured on the asymmetric
body of tests/test_gbs_dense.py at rtol 1e-10, steps up to 0.9 s at order 16) samples near the
ends of long steps were off by up to 7.8e-9, 78 rtol, while the step ends and the samples near
the midpoint were within 1 rtol: the midpoint derivatives of the higher orders, extrapolated
over few lines, are not yet in their asymptotic regime on such steps. With it (ERRINT_MAX), the
samples of that body were within 2 rtol at 0.75 to 1.0 times gbs's evaluations, and those of
the fast top within 3.5 rtol at 0.8 to 1.3 times; each evaluation costs more than gbs's (the
midpoint differences; pick's figures are in the README's methods table).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from topdrift.integrators.base import (
    C_EVALS,
    C_FORCE_EVALS,
    C_REJECTED,
    C_STEPS,
    ST_DIVERGED,
    ST_OK,
    ST_SINGULAR,
    ST_STEP_UNDERFLOW,
)
from topdrift.integrators.extrapolation.kernel import (
    DENSE,
    K_MAX,
    K_MIN,
    NONFINITE_FACTOR,
    extrapolate_line,
    line_error,
    line_step,
    line_verdict,
    proposal,
    retry,
    scaled_size,
    steps_of,
    work_for,
)
from topdrift.models.dynamics import rhs, singular
from topdrift.models.forms import E_PHI, E_PSI, FORM_BODY, FORM_EULER
from topdrift.models.turns import N_TURNS, T_PHI, T_PSI, TURN, fold_euler

# Controller slots.
CT_T = 0  # time of the internal state (end of the last accepted step)
CT_H = 1  # step proposed for the next attempt
CT_K = 2  # line proposed for it
CT_REJECTED = 3  # 1.0 when the last attempt was rejected
CT_T_OLD = 4  # start of the last accepted step
CT_H_PREV = 5  # its length
CT_DENSE_OK = 6  # 1.0 when the dense coefficients are those of the last accepted step
CT_DEGREE = 7  # the degree M + 4 of that polynomial
CT_ERRINT = 8  # its error estimate, in units of the tolerance
N_CTRL = 9

TL_RTOL = 0
TL_ATOL = 1
TL_HORIZON = 2  # the last time the run asks for (inf: none); steps are clipped to it
N_TOL = 3

N_WORK = 2 * (K_MAX + 1)
# The dense output's own error control (ours, after the idea of HNW II.9's code): errint bounds
# P_(M-1) - P_M, the change from dropping the top midpoint derivative, which has the form
# s^M (s^2 - 1/4)^2 (alpha + beta s) (same lower derivatives, same ends), in units of the step's
# error scale; it errs on the safe side, as it estimates the error of the lower polynomial. A step
# with errint above ERRINT_MAX is retried, shorter by ERRINT_SAFETY (ERRINT_MAX /
# errint)^(1 / degree), at least by ERRINT_SHRINK_MIN, and the next step is no longer than that
# rule allows. Every step is so checked, whether it serves an output or not, so the steps stay
# independent of the samples. ERRINT_MAX 1, not 10: at 10 the Euler form's samples reached 9
# rtol (its scale takes phi and psi with their turns, so a fast spin widens it).
ERRINT_MAX = 1.0
ERRINT_SAFETY = 0.9
ERRINT_SHRINK_MIN = 0.2
M_MAX = 2 * K_MAX - 4  # midpoint derivatives of the highest line the controller can accept
N_COEF = M_MAX + 5  # coefficients of the largest polynomial
N_MAX = 4 * K_MAX - 2  # substeps of the highest line


@njit(cache=True, inline="always")
def n_seq(j):
    """Substeps of line j (1-based): 2, 6, 10, 14, ... (4 j - 2)."""
    return steps_of(DENSE, j)


@njit(cache=True, inline="always")
def work_of(j):
    """A_j: evaluations of lines 1..j, f(y) counted once: 1 + sum (4 i - 2) = 1 + 2 j^2."""
    return work_for(DENSE, j)


def _dense_inverse(m: int) -> np.ndarray:
    """The inverse of the map (b_0..b_3) -> (Q(-1/2), Q(1/2), Q'(-1/2), Q'(1/2)) for
    Q(s) = s^(m+1) (b_0 + b_1 s + b_2 s^2 + b_3 s^3)."""
    a = np.empty((4, 4))
    for r in range(4):
        e = m + 1 + r
        a[0, r] = (-0.5) ** e
        a[1, r] = 0.5**e
        a[2, r] = e * (-0.5) ** (e - 1)
        a[3, r] = e * 0.5 ** (e - 1)
    return np.linalg.inv(a)


# Index m + 1 for m = -1 .. M_MAX (m = -1: the cubic Hermite polynomial through the ends alone).
DENSE_INV = np.stack([_dense_inverse(m) for m in range(-1, M_MAX + 1)])


def _bump_max(m: int, extra: int) -> float:
    """max over [-1/2, 1/2] of |s^(m + extra) (s^2 - 1/4)^2|, on a fine grid."""
    s = np.linspace(-0.5, 0.5, 20001)
    return float(np.max(np.abs(s ** (m + extra) * (s * s - 0.25) ** 2)))


# The error estimate's weights: P_M - P_(M-1) = s^M (s^2 - 1/4)^2 (alpha + beta s) (both have the
# same M midpoint derivatives below M and the same ends), bounded by |alpha| W0 + |beta| W1.
BUMP_W0 = np.array([_bump_max(m, 0) for m in range(M_MAX + 1)])
BUMP_W1 = np.array([_bump_max(m, 1) for m in range(M_MAX + 1)])
# 1 / k!, for the Taylor coefficients.
INV_FACTORIAL = np.array([1.0 / math.factorial(k) for k in range(M_MAX + 1)])


@njit(cache=True, inline="always")
def _line(form, p, y, f, h, nj, za, zb, ft, fl, zm):
    """Gragg's modified midpoint rule over nj substeps of h from y (f = rhs(y)); za, zb end as
    z_(nj-1), z_nj and ft as f(z_nj); fl holds f_0..f_nj and zm z_(nj/2)."""
    n = y.shape[0]
    h2 = 2.0 * h
    half = nj // 2
    for i in range(n):
        za[i] = y[i]
        zb[i] = y[i] + h * f[i]
        fl[i] = f[i]
    for s in range(1, nj + 1):
        rhs(form, zb, p, ft)
        base = s * n
        for i in range(n):
            fl[base + i] = ft[i]
        if s == half:
            for i in range(n):
                zm[i] = zb[i]
        if s == nj:
            break
        for i in range(n):
            znew = za[i] + h2 * ft[i]
            za[i] = zb[i]
            zb[i] = znew


@njit(cache=True)
def _midpoint_data(j, h, n, kmax, fl, zm, mid):
    """Derivatives 0..kmax at the midpoint from line j (kmax <= 2 j) into mid[(j-1)][k]."""
    m = 2 * j - 1
    row = (j - 1) * (M_MAX + 1)
    for i in range(n):
        mid[row * n + i] = zm[i]
    for k in range(1, kmax + 1):
        r = k - 1
        scale = 1.0 / (2.0 * h) ** r
        base = (row + k) * n
        # The binomial weights outside the component loop (a division each); the sum runs in
        # the same order, q = 0..r, for every component (92 -> 70 ns per evaluation, measured
        # on looping-nutation, body form, rtol 1e-12; weights in a scratch array and the sum in
        # a register were slower, 75 ns).
        for i in range(n):
            mid[base + i] = 0.0
        c = 1.0
        for q in range(r + 1):
            at = (m + r - 2 * q) * n
            for i in range(n):
                mid[base + i] += c * fl[at + i]
            c = -c * (r - q) / (q + 1.0)
        for i in range(n):
            mid[base + i] *= scale


@njit(cache=True)
def _build_dense(kappa, h_big, n, y0, f0, y1, f1, mid, dtab, dense, ctrl, sc):
    """The coefficients of P (powers of s) into dense, from the lines' midpoint data."""
    m_top = max(0, 2 * kappa - 4)
    stride = M_MAX + 1
    for k in range(m_top + 1):
        lam = max(1, (k + 1) // 2)
        for j in range(lam, kappa + 1):
            idx = j - lam
            src = ((j - 1) * stride + k) * n
            for i in range(n):
                dtab[idx * n + i] = mid[src + i]
            nj = n_seq(j)
            for l in range(idx, 0, -1):
                nl = n_seq(l + lam - 1)
                c = 1.0 / ((nj / nl) ** 2 - 1.0)
                lo = (l - 1) * n
                hi = l * n
                for i in range(n):
                    dtab[lo + i] = dtab[hi + i] + (dtab[hi + i] - dtab[lo + i]) * c
        w = h_big**k * INV_FACTORIAL[k]
        for i in range(n):
            dense[k * n + i] = dtab[i] * w
    inv = DENSE_INV[m_top + 1]
    low = DENSE_INV[m_top]  # the polynomial with one midpoint derivative fewer (M - 1)
    e2 = 0.0
    for i in range(n):
        # The Taylor part and its slope at both ends, with and without the top derivative.
        tp = 0.0
        tm = 0.0
        dp = 0.0
        dm = 0.0
        sp = 1.0
        sm = 1.0
        for k in range(m_top):
            c = dense[k * n + i]
            tp += c * sp
            tm += c * sm
            c1 = (k + 1) * dense[(k + 1) * n + i]
            if k + 1 < m_top:
                dp += c1 * sp
                dm += c1 * sm
            sp *= 0.5
            sm *= -0.5
        # Ends of P_(M-1) first: the sums above hold terms 0..M-1 (slopes 0..M-2 + 1).
        q0 = y0[i] - tm
        q1 = y1[i] - tp
        q2 = h_big * f0[i] - dm
        q3 = h_big * f1[i] - dp
        b3_low = low[3, 0] * q0 + low[3, 1] * q1 + low[3, 2] * q2 + low[3, 3] * q3
        # Then the top term s^M and the slope term it adds.
        c = dense[m_top * n + i]
        tp += c * sp
        tm += c * sm
        if m_top >= 1:
            c1 = m_top * c
            dp += c1 * sp * 2.0
            dm += c1 * sm * -2.0
        r0 = y0[i] - tm
        r1 = y1[i] - tp
        r2 = h_big * f0[i] - dm
        r3 = h_big * f1[i] - dp
        for r in range(4):
            dense[(m_top + 1 + r) * n + i] = (
                inv[r, 0] * r0 + inv[r, 1] * r1 + inv[r, 2] * r2 + inv[r, 3] * r3
            )
        alpha = dense[(m_top + 3) * n + i] - b3_low
        beta = dense[(m_top + 4) * n + i]
        e = (abs(alpha) * BUMP_W0[m_top] + abs(beta) * BUMP_W1[m_top]) / sc[i]
        e2 += e * e
    ctrl[CT_ERRINT] = math.sqrt(e2 / n)
    ctrl[CT_DEGREE] = m_top + 4
    ctrl[CT_DENSE_OK] = 1.0


@njit(cache=True)
def eval_dense(s, dense, degree, out):
    """P(s) by Horner."""
    n = out.shape[0]
    for i in range(n):
        acc = dense[degree * n + i]
        for k in range(degree - 1, -1, -1):
            acc = dense[k * n + i] + s * acc
        out[i] = acc


@njit(cache=True)
def _advance(form, work):
    """Step while the internal time is below t_out, never shortening a step for it (only for
    the horizon), then write the state at t_out into y_out: the step's end when it lands there,
    else the dense output of the step that passed it. Returns a status; on failure y, f and
    ctrl are the last accepted step's and y_out is untouched.

    `work`: (p, tol, y, f, table, za, zb, ft, fl, zm, mid, dtab, dense, hw, ctrl,
    counters, t_out, y_out, turns). f holds rhs(y) on entry and is kept so."""
    (
        p,
        tol,
        y,
        f,
        table,
        za,
        zb,
        ft,
        fl,
        zm,
        mid,
        dtab,
        dense,
        hw,
        ctrl,
        counters,
        t_out,
        y_out,
        turns,
    ) = work
    n = y.shape[0]
    rtol = tol[TL_RTOL]
    atol = tol[TL_ATOL]
    horizon = tol[TL_HORIZON]
    t = ctrl[CT_T]
    h_prop = ctrl[CT_H]
    k = int(ctrl[CT_K])
    was_rejected = ctrl[CT_REJECTED] != 0.0
    folding = form == FORM_EULER and turns.shape[0] == N_TURNS
    off_phi = TURN * float(turns[T_PHI]) if folding else 0.0
    off_psi = TURN * float(turns[T_PSI]) if folding else 0.0
    nonfinite = False
    while t < t_out:
        min_step = 10.0 * (np.nextafter(t, np.inf) - t)
        if h_prop < min_step:
            ctrl[CT_H] = h_prop
            return ST_DIVERGED if nonfinite else ST_STEP_UNDERFLOW
        clipped = h_prop >= horizon - t
        h_big = horizon - t if clipped else h_prop
        m_cap = min(2 * (k + 1) - 4, M_MAX)
        accepted = False
        bad = False
        last = 0
        j = 1
        while j <= k + 1:
            nj = n_seq(j)
            h = h_big / nj
            _line(form, p, y, f, h, nj, za, zb, ft, fl, zm)
            counters[C_EVALS] += nj
            counters[C_FORCE_EVALS] += nj
            _midpoint_data(j, h, n, min(2 * j, max(m_cap, 0)), fl, zm, mid)
            r = (j - 1) * n
            for i in range(n):
                table[r + i] = 0.5 * (za[i] + zb[i] + h * ft[i])
            extrapolate_line(table, j, n, DENSE)
            if j >= 2:
                err, bad = line_error(form, table, y, n, rtol, atol, off_phi, off_psi)
                if bad:
                    break
                line_step(j, h_big, err, hw, work_of(j))
                last = j
                verdict = line_verdict(j, k, err, DENSE)
                if verdict != 0:
                    accepted = verdict == 1
                    break
            j += 1
        if bad:
            nonfinite = True
            h_prop = h_big * NONFINITE_FACTOR
            was_rejected = True
            counters[C_REJECTED] += 1
            continue
        nonfinite = False
        kn, hn = proposal(k, last, hw, was_rejected, h_big, DENSE)
        if not accepted:
            counters[C_REJECTED] += 1
            was_rejected = True
            k, h_prop = retry(kn, hn, last, hw, h_big)
            continue
        for i in range(n):
            ft[i] = table[i]
        if singular(form, ft):
            ctrl[CT_H] = h_prop
            return ST_SINGULAR
        # f at the new state into fl (its data are in mid by now), the error scale into zm,
        # and the polynomial; a step whose polynomial is not within the tolerance is retried.
        f1 = fl[:n]
        rhs(form, ft, p, f1)
        counters[C_EVALS] += 1
        counters[C_FORCE_EVALS] += 1
        for i in range(n):
            zm[i] = atol + rtol * max(
                scaled_size(form, i, y[i], off_phi, off_psi),
                scaled_size(form, i, ft[i], off_phi, off_psi),
            )
        _build_dense(last, h_big, n, y, f, ft, f1, mid, dtab, dense, ctrl, zm)
        errint = ctrl[CT_ERRINT]
        if not errint <= ERRINT_MAX:
            ctrl[CT_DENSE_OK] = 0.0
            counters[C_REJECTED] += 1
            was_rejected = True
            shrink = ERRINT_SAFETY * (ERRINT_MAX / errint) ** (1.0 / ctrl[CT_DEGREE])
            if not shrink >= ERRINT_SHRINK_MIN:
                shrink = ERRINT_SHRINK_MIN
            k = max(K_MIN, min(kn, last))
            h_prop = h_big * shrink
            continue
        # The next step no longer than the polynomial allows, so that rejections stay rare.
        fit = ERRINT_SAFETY * (ERRINT_MAX / max(errint, 1e-300)) ** (1.0 / ctrl[CT_DEGREE])
        hn = min(hn, h_big * fit)
        for i in range(n):
            y[i] = ft[i]
            f[i] = f1[i]
        if folding:
            k_phi = turns[T_PHI]
            k_psi = turns[T_PSI]
            fold_euler(y, turns)
            # The polynomial by the same whole turns: its constant term carries the offset.
            if turns[T_PHI] != k_phi:
                dense[E_PHI] -= TURN * float(turns[T_PHI] - k_phi)
                off_phi = TURN * float(turns[T_PHI])
            if turns[T_PSI] != k_psi:
                dense[E_PSI] -= TURN * float(turns[T_PSI] - k_psi)
                off_psi = TURN * float(turns[T_PSI])
        ctrl[CT_T_OLD] = t
        ctrl[CT_H_PREV] = h_big
        t = horizon if clipped else t + h_big
        counters[C_STEPS] += 1
        h_prop = hn
        k = kn
        was_rejected = False
        ctrl[CT_T] = t
        ctrl[CT_H] = h_prop
        ctrl[CT_K] = k
        ctrl[CT_REJECTED] = 0.0
    ctrl[CT_H] = h_prop
    ctrl[CT_K] = k
    ctrl[CT_REJECTED] = 1.0 if was_rejected else 0.0
    if t == t_out or ctrl[CT_DENSE_OK] == 0.0:
        # Landed on it (or at the start, before any step).
        for i in range(n):
            y_out[i] = y[i]
        return ST_OK
    s = (t_out - ctrl[CT_T_OLD]) / ctrl[CT_H_PREV] - 0.5
    eval_dense(s, dense, int(ctrl[CT_DEGREE]), y_out)
    return ST_OK


@njit(cache=True)
def advance_euler(work):
    return _advance(FORM_EULER, work)


@njit(cache=True)
def advance_body(work):
    return _advance(FORM_BODY, work)


def advance_kernel(form: int):
    """The entry for a form (one per form, so a run compiles only the form it uses)."""
    return advance_euler if form == FORM_EULER else advance_body
