"""The Gragg-Bulirsch-Stoer kernel of `gbs`: extrapolated modified midpoint rule, adaptive order
and step, one body for both state forms (compiled into one entry per form).

The method (Hairer, Norsett and Wanner, Solving Ordinary Differential Equations I, 2nd ed.,
sec. II.9; the constants below are from memory):

- Line j (j = 1, 2, ...) integrates one step H with n_j = 2 j substeps h = H / n_j of Gragg's
  modified midpoint rule, z_1 = y + h f(y), z_(i+1) = z_(i-1) + 2 h f(z_i), and ends with
  Gragg's smoothing S = (z_(n-1) + 2 z_n + z_(n+1)) / 4 = (z_(n-1) + z_n + h f(z_n)) / 2, whose
  error has an expansion in even powers of h. The sequence 2, 4, 6, 8, ... is the double
  harmonic one; line j costs n_j evaluations (f(y) is shared by all lines): A_1 = n_1 + 1,
  A_j = A_(j-1) + n_j evaluations for lines 1..j.
- Aitken-Neville extrapolation in h^2: T_(j,l+1) = T_(j,l) + (T_(j,l) - T_(j-1,l)) /
  ((n_j / n_(j-l))^2 - 1); T_(j,j) has order 2 j. The table is kept as one column of rows that
  the new line overwrites from the bottom up, so that row 0 ends as T_(j,j), row 1 as T_(j,j-1).
- Error of line j: err_j = RMS_i |T_(j,j) - T_(j,j-1)|_i / (atol + rtol max(|y_i|, |T_(j,j),i|)),
  an estimate of order 2 j - 1 in H. Its step H_j = H / fac, fac = min(FAC2 / fmin, max(fmin,
  (err_j / SAFE1)^(1/(2j-1)) / SAFE2)), fmin = FAC1^(1/(2j-1)), and its work per unit time
  W_j = A_j / H_j.
- Order and step control: with k the current line (order 2 k), lines 1..k-1 are computed, then
  the convergence monitor of the section: accept at line k-1 when err_(k-1) <= 1; reject when
  err_(k-1) > (n_(k+1) n_k / n_1^2)^2 (line k+1 could not bring it below 1 either); compute
  line k, accept when err_k <= 1, reject when err_k > (n_(k+1) / n_1)^2; compute line k+1,
  accept when err_(k+1) <= 1, else reject. The next order is the one of least work: k - 1 when
  W_(k-1) < 0.8 W_k, k + 1 when W_k < 0.9 W_(k-1) (after convergence in line k or k+1; the step
  of line k+1 not computed is H_k A_(k+1) / A_k), else k; the next step is that line's H_j.
  After a rejection neither the order nor the step may grow in the next step.

Round-off: with the harmonic sequence the extrapolation weights of T_(k,k) have absolute values
summing to 1.7 at k = 2 and to 256 at k = 9, so the rounding of each line is amplified up to
that much; this, not the truncation, limits the accuracy at the tightest tolerances (measured on
looping-nutation over 100 nutation periods at rtol 2.5e-15, body form: 1.4e-12 rad). Carrying
the midpoint sums and the table in double-double was tried and measured: no gain in the body
form at that rtol, 7x in the Euler form (1.4e-12 against 9.8e-12), at 1.2-2x the time per
step; not kept.

Output times: the step is shortened to end exactly on t_out when the proposed step would pass
it (there is no dense output); an accepted shortened step keeps the proposal (step and line)
it cut short when that step is the longer one. So, unlike rk45, dop853 and taylor-adaptive,
the steps depend on how often the run is sampled: a sample interval shorter than the natural
step costs steps.

In the Euler form phi and psi are folded into (-pi, pi] after every accepted step, the turns
counted in `turns` (models/turns.py; an empty array keeps them unfolded); the error scale takes
them with their turns put back, as the adaptive Runge-Kutta kernel does (embedded_kernel.py).
Work arrays are the stepper's; nothing is allocated inside the loop.
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
from topdrift.models.dynamics import rhs, singular
from topdrift.models.forms import E_PHI, E_PSI, FORM_BODY, FORM_EULER
from topdrift.models.turns import N_TURNS, T_PHI, T_PSI, TURN, fold_euler

K_MAX = 10  # lines of the table (order up to 20); the current line k stays in 2..K_MAX-1
K_MIN = 2
SAFE1 = 0.65  # HNW II.9 step control (from memory)
SAFE2 = 0.94
FAC1 = 0.02
FAC2 = 4.0
ORDER_DOWN = 0.8  # lower the order when its work is below 0.8 of the current one's (from memory)
ORDER_UP = 0.9  # raise it when the current work is below 0.9 of the lower one's (from memory)
NONFINITE_FACTOR = 0.2  # a line that is not finite: retry a fifth of the step (ours)

# Controller slots (one float64 array the stepper keeps and snapshots).
CT_T = 0  # time of the current state
CT_H = 1  # the step proposed for the next attempt
CT_K = 2  # the line (order 2 k) proposed for it
CT_REJECTED = 3  # 1.0 when the last attempt was rejected (no growth in the next step)
N_CTRL = 4

# Tolerances.
TL_RTOL = 0
TL_ATOL = 1
N_TOL = 2

# The work array: H_j at 0..K_MAX, W_j at K_MAX+1..2 K_MAX+1 (index j, 1-based).
N_WORK = 2 * (K_MAX + 1)


# The two step-number sequences, as n_j = d j - (d - 2): d = 2 the double harmonic 2, 4, 6, ...
# (gbs), d = 4 the sequence 2, 6, 10, ... of the dense output (gbs-dense, dense_kernel.py).
HARMONIC = 2
DENSE = 4


@njit(cache=True, inline="always")
def steps_of(d, j):
    """n_j of line j (1-based) in sequence d."""
    return d * j - (d - 2)


@njit(cache=True, inline="always")
def work_for(d, j):
    """A_j: evaluations of lines 1..j, f(y) counted once: 1 + sum n_i (1 + j (j + 1) for d = 2,
    1 + 2 j^2 for d = 4)."""
    return 1.0 + float((d * j * (j + 1)) // 2 - (d - 2) * j)


@njit(cache=True, inline="always")
def n_seq(j):
    """Substeps of line j (1-based): the double harmonic sequence 2, 4, 6, ..."""
    return steps_of(HARMONIC, j)


@njit(cache=True, inline="always")
def work_of(j):
    """A_j of the double harmonic sequence: 1 + j (j + 1)."""
    return work_for(HARMONIC, j)


@njit(cache=True, inline="always")
def scaled_size(form, k, v, off_phi, off_psi):
    """|v| of component k with the counted turns put back into phi and psi."""
    if form == FORM_EULER:
        if k == E_PHI:
            return abs(v + off_phi)
        if k == E_PSI:
            return abs(v + off_psi)
    return abs(v)


@njit(cache=True)
def start_line(rtol):
    """The first line, from the tolerance: max(2, min(K_MAX - 1, int(-0.6 log10(rtol) + 1.5)))
    (HNW II.9's code, from memory)."""
    k = int(-0.6 * math.log10(rtol) + 1.5)
    return max(K_MIN, min(K_MAX - 1, k))


@njit(cache=True)
def start_step(form, p, y, f, ytmp, ftmp, rtol, atol, order, counters):
    """The starting step of HNW I, sec. II.4 (from memory): h0 = 0.01 |y| / |f|, one Euler step
    to estimate the second derivative, then h1 = (0.01 / max(|f|, |f'|))^(1/(order + 1)).
    f must hold rhs(y); costs one evaluation."""
    n = y.shape[0]
    d0 = 0.0
    d1 = 0.0
    for i in range(n):
        sc = atol + abs(y[i]) * rtol
        d0 += (y[i] / sc) ** 2
        d1 += (f[i] / sc) ** 2
    d0 = math.sqrt(d0 / n)
    d1 = math.sqrt(d1 / n)
    h0 = 1e-6 if (d0 < 1e-5 or d1 < 1e-5) else 0.01 * d0 / d1
    for i in range(n):
        ytmp[i] = y[i] + h0 * f[i]
    rhs(form, ytmp, p, ftmp)
    counters[C_EVALS] += 1
    counters[C_FORCE_EVALS] += 1
    d2 = 0.0
    for i in range(n):
        sc = atol + abs(y[i]) * rtol
        d2 += ((ftmp[i] - f[i]) / sc) ** 2
    d2 = math.sqrt(d2 / n) / h0
    if d1 <= 1e-15 and d2 <= 1e-15:
        h1 = max(1e-6, h0 * 1e-3)
    else:
        h1 = (0.01 / max(d1, d2)) ** (1.0 / (order + 1))
    return min(100.0 * h0, h1)


@njit(cache=True)
def first_derivative(form, p, y, f, counters):
    """f = rhs(y), counted."""
    rhs(form, y, p, f)
    counters[C_EVALS] += 1
    counters[C_FORCE_EVALS] += 1


@njit(cache=True, inline="always")
def line_step(j, h_big, err, hw, work_j):
    """Store H_j and W_j of line j (error err; A_j = work_j evaluations) in hw."""
    expo = 1.0 / (2.0 * j - 1.0)
    fmin = FAC1**expo
    fac = min(FAC2 / fmin, max(fmin, (err / SAFE1) ** expo / SAFE2))
    hj = h_big / fac
    hw[j] = hj
    hw[K_MAX + 1 + j] = work_j / hj


@njit(cache=True, inline="always")
def next_order(k, kc, hw):
    """The line of least work after lines up to kc (k - 1, k or k + 1) were computed, by the
    rules of HNW II.9 (from memory): from the last line kc <= k, one down when its work is
    ORDER_DOWN below, one up when the work fell by ORDER_UP from the line below; after line
    k + 1, k (or k - 1) unless line k + 1 is cheaper by ORDER_UP. Kept in K_MIN..K_MAX - 1."""
    w = K_MAX + 1
    if kc <= K_MIN:
        return K_MIN + 1
    if kc <= k:
        kn = kc
        if hw[w + kc - 1] < ORDER_DOWN * hw[w + kc]:
            kn = kc - 1
        elif hw[w + kc] < ORDER_UP * hw[w + kc - 1]:
            kn = kc + 1
    else:
        kn = kc - 1
        if kc - 2 >= K_MIN and hw[w + kc - 2] < ORDER_DOWN * hw[w + kc - 1]:
            kn = kc - 2
        if hw[w + kc] < ORDER_UP * hw[w + kn]:
            kn = kc
    return max(K_MIN, min(K_MAX - 1, kn))


@njit(cache=True, inline="always")
def extrapolate_line(table, j, n, d):
    """Aitken-Neville in h^2 after line j was stored in row j - 1: up to row 0, row l-1 = row l
    + (row l - row l-1) c, so that row 0 ends as T_(j,j) and row 1 as T_(j,j-1)."""
    nj = steps_of(d, j)
    for l in range(j - 1, 0, -1):
        nl = steps_of(d, l)
        c = 1.0 / ((nj / nl) ** 2 - 1.0)
        lo = (l - 1) * n
        hi = l * n
        for i in range(n):
            table[lo + i] = table[hi + i] + (table[hi + i] - table[lo + i]) * c


@njit(cache=True, inline="always")
def line_error(form, table, y, n, rtol, atol, off_phi, off_psi):
    """err_j = RMS |T_(j,j) - T_(j,j-1)| / scale, and whether T_(j,j) or err is not finite."""
    bad = False
    s2 = 0.0
    for i in range(n):
        tv = table[i]
        if not math.isfinite(tv):
            bad = True
        sc = atol + rtol * max(
            scaled_size(form, i, y[i], off_phi, off_psi),
            scaled_size(form, i, tv, off_phi, off_psi),
        )
        e = (tv - table[n + i]) / sc
        s2 += e * e
    err = math.sqrt(s2 / n)
    return err, bad or not math.isfinite(err)


@njit(cache=True, inline="always")
def line_verdict(j, k, err, d):
    """The convergence monitor after line j with the current line k: 1 accept, -1 reject (the
    lines above could not bring err below 1 either), 0 compute the next line."""
    if j == k - 1 and j >= 2:
        if err <= 1.0:
            return 1
        lim = steps_of(d, k + 1) * steps_of(d, k) / (steps_of(d, 1) * steps_of(d, 1))
        if err > lim * lim:
            return -1
    elif j == k:
        if err <= 1.0:
            return 1
        lim = steps_of(d, k + 1) / steps_of(d, 1)
        if err > lim * lim:
            return -1
    elif j == k + 1:
        return 1 if err <= 1.0 else -1
    return 0


@njit(cache=True, inline="always")
def proposal(k, last, hw, was_rejected, h_big, d):
    """The next line and step after lines up to `last` were computed (next_order's rule; the
    line above the last one computed gets H_last scaled by the work, HNW II.9); after a
    rejection neither may grow."""
    kn = next_order(k, last, hw)
    if kn <= last:
        hn = hw[kn]
    else:
        hn = hw[last] * work_for(d, kn) / work_for(d, last)
    if was_rejected:
        kn = min(kn, k)
        hn = min(hn, h_big)
    return kn, hn


@njit(cache=True, inline="always")
def retry(kn, hn, last, hw, h_big):
    """The line and step of the attempt after a rejected one: no higher than the lines that
    failed, with no longer a step."""
    if kn > last:
        kn = last
        hn = hw[last]
    return max(K_MIN, kn), min(hn, h_big)


@njit(cache=True)
def _advance(form, work):
    """Step until t_out, landing on it; write the state there into y_out. Returns a status; on
    failure y, f and ctrl are the last accepted step's and y_out is untouched.

    `work` is the tuple (p, tol, y, f, table, za, zb, ft, hw, ctrl, counters, t_out, y_out,
    turns). f holds rhs(y) on entry and is kept so (one evaluation per accepted step)."""
    (p, tol, y, f, table, za, zb, ft, hw, ctrl, counters, t_out, y_out, turns) = work
    n = y.shape[0]
    rtol = tol[TL_RTOL]
    atol = tol[TL_ATOL]
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
        clipped = h_prop >= t_out - t
        h_big = t_out - t if clipped else h_prop
        accepted = False
        bad = False
        last = 0
        j = 1
        while j <= k + 1:
            nj = n_seq(j)
            h = h_big / nj
            h2 = 2.0 * h
            # Gragg's modified midpoint rule, z_0 = y in za, z_1 in zb.
            for i in range(n):
                za[i] = y[i]
                zb[i] = y[i] + h * f[i]
            for s in range(1, nj + 1):
                rhs(form, zb, p, ft)
                if s == nj:
                    break
                for i in range(n):
                    znew = za[i] + h2 * ft[i]
                    za[i] = zb[i]
                    zb[i] = znew
            counters[C_EVALS] += nj
            counters[C_FORCE_EVALS] += nj
            # Smoothing, (z_(n-1) + z_n + h f(z_n)) / 2, into row j - 1.
            r = (j - 1) * n
            for i in range(n):
                table[r + i] = 0.5 * (za[i] + zb[i] + h * ft[i])
            extrapolate_line(table, j, n, HARMONIC)
            if j >= 2:
                err, bad = line_error(form, table, y, n, rtol, atol, off_phi, off_psi)
                if bad:
                    break
                line_step(j, h_big, err, hw, work_of(j))
                last = j
                verdict = line_verdict(j, k, err, HARMONIC)
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
        kn, hn = proposal(k, last, hw, was_rejected, h_big, HARMONIC)
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
        for i in range(n):
            y[i] = ft[i]
        if folding:
            fold_euler(y, turns)
            off_phi = TURN * float(turns[T_PHI])
            off_psi = TURN * float(turns[T_PSI])
        rhs(form, y, p, f)
        counters[C_EVALS] += 1
        counters[C_FORCE_EVALS] += 1
        t = t_out if clipped else t + h_big
        counters[C_STEPS] += 1
        # A step cut short for an output time leaves the proposal (step and line) it cut when
        # that is longer: the short step's work estimates are not those of the natural step.
        if not clipped or hn >= h_prop:
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
    for i in range(n):
        y_out[i] = y[i]
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
