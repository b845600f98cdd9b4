"""One numba kernel for every embedded explicit Runge-Kutta pair with FSAL and dense output.

The method is the packed coefficient table (packed.py); the controller is the standard one,
written to take the same decisions as scipy.integrate's RK45 / DOP853 (scipy/integrate/_ivp/rk.py)
so that step sequences can be compared one for one:

- error norm: RMS over components of err / (atol + rtol max(|y|, |y_new|)); for DOP853 the
  combination |h| e5^2 / sqrt((e5^2 + 0.01 e3^2) n) of the 5th- and 3rd-order estimates;
- accept when the norm is < 1; the new step is h * min(10, 0.9 norm^(-1/(q+1))) (10 when the norm
  is 0), never growing right after a rejection; a rejection shrinks by max(0.2, 0.9 norm^..);
- the smallest step is 10 ulp of t: below that the run stops with ST_STEP_UNDERFLOW;
- a step never passes t_bound (the run's horizon, +inf when none was given): it is clipped to
  end on it, as scipy clips to its t_bound. Output times never clip a step.

Two departures, both invisible in the accepted steps: a trial step whose error norm or new
state is not finite is rejected with the minimum factor (scipy arrives at the same factor through
max(0.2, nan)), and when that repeats down to the smallest step the status is ST_DIVERGED rather
than ST_STEP_UNDERFLOW. The FSAL stage is evaluated before the error test only when the error
estimate weighs it (Dormand-Prince 5(4)); DOP853 evaluates it after acceptance, as Hairer's
code does, so a rejected DOP853 step costs 11 evaluations, not 12.

In the Euler form phi and psi are folded into (-pi, pi] after every accepted step, the whole
turns counted in `turns` (models/turns.py; an empty array keeps them unfolded). The fold comes
after the error test, on the accepted state only, so the error estimate never sees a jump of
2 pi; its scale max(|y|, |y_new|) takes phi and psi with their turns put back, so the step
control is the one of the unfolded angles (and scipy's): folded magnitudes would tighten the
tolerance of an angle to atol alone each time it passes zero. The start of the last step
(yold) is moved by the same whole turns as the state, so that the dense output interpolates
between two ends of one unfolded local pair.

Work arrays are allocated once by the stepper; nothing is allocated inside the loop.
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
from topdrift.integrators.rk.packed import (
    CFG_ERR_KIND,
    CFG_FSAL_IN_ERR,
    CFG_N_DENSE,
    CFG_N_ROWS,
    CFG_N_STAGES,
)
from topdrift.models.dynamics import rhs, singular
from topdrift.models.forms import E_PHI, E_PSI, FORM_BODY, FORM_EULER
from topdrift.models.turns import N_TURNS, T_PHI, T_PSI, TURN, fold_euler

SAFETY = 0.9
MIN_FACTOR = 0.2
MAX_FACTOR = 10.0

# Controller state, one float64 array that the stepper keeps and snapshots.
CT_T = 0  # time of the current (last accepted) state
CT_H = 1  # |h| proposed for the next step
CT_T_OLD = 2  # start of the last accepted step
CT_H_PREV = 3  # length of the last accepted step
CT_DENSE_OK = 4  # 1.0 when the dense coefficients of the last step are built
N_CTRL = 5

# Tolerances and bounds, one float64 array.
TL_RTOL = 0
TL_ATOL = 1
TL_T_BOUND = 2  # +inf: no horizon, never clip
TL_EXPONENT = 3  # -1 / (error_order + 1)
N_TOL = 4


# Index arithmetic: clearing the sign bit of an index proves to LLVM that it is not negative,
# which drops numba's wraparound compare-and-select on every access (measured: see
# docs/design-notes.md). Indices here are never negative, so the mask changes no value.
NONNEG = 0x3FFF_FFFF_FFFF_FFFF


@njit(cache=True, inline="always")
def combine(n, m, w, base, h, y, K, out):
    """out = y + h sum_{j < m} w[base + j] K_j; with y None, out = sum_{j < m} w[base + j] K_j
    (h unused). A packed row: stage i is combine(n, i, a, i * rows, ...).

    Components go in blocks of four held in registers (the last block overlaps the previous one
    when 4 does not divide n; the overlapping components are computed twice, identically), so
    that each coefficient is loaded once per block and four chains of multiply-adds run side by
    side. Within a component the sum runs over j in order whatever the blocking, so the bits
    are those of the plain loop. The update is fused in (measured 10 % faster per DOP853 step
    than a second pass over out); `y is None` is decided when numba compiles each call site."""
    base = base & NONNEG
    if n < 4:
        for k in range(n):
            acc = 0.0
            for j in range(m):
                acc += w[base + j] * K[j * n + k]
            if y is None:
                out[k] = acc
            else:
                out[k] = y[k] + h * acc
        return
    k0 = 0
    while True:
        if k0 > n - 4:
            k0 = n - 4
        k0 = k0 & NONNEG
        a0 = 0.0
        a1 = 0.0
        a2 = 0.0
        a3 = 0.0
        for j in range(m):
            v = w[base + j]
            jk = j * n + k0
            a0 += v * K[jk]
            a1 += v * K[jk + 1]
            a2 += v * K[jk + 2]
            a3 += v * K[jk + 3]
        if y is None:
            out[k0] = a0
            out[k0 + 1] = a1
            out[k0 + 2] = a2
            out[k0 + 3] = a3
        else:
            out[k0] = y[k0] + h * a0
            out[k0 + 1] = y[k0 + 1] + h * a1
            out[k0 + 2] = y[k0 + 2] + h * a2
            out[k0 + 3] = y[k0 + 3] + h * a3
        if k0 + 4 >= n:
            break
        k0 += 4


@njit(cache=True, inline="always")
def weighted_pair(n, m, w, K, out):
    """out[:n] = sum_{j < m} w[j] K_j and out[n:2n] = sum_{j < m} w[m + j] K_j: both error rows
    in one pass over the stages, each K load serving both sums."""
    if n < 4:
        for k in range(n):
            acc = 0.0
            acc3 = 0.0
            for j in range(m):
                acc += w[j] * K[j * n + k]
                acc3 += w[m + j] * K[j * n + k]
            out[k] = acc
            out[n + k] = acc3
        return
    k0 = 0
    while True:
        if k0 > n - 4:
            k0 = n - 4
        k0 = k0 & NONNEG
        a0 = 0.0
        a1 = 0.0
        a2 = 0.0
        a3 = 0.0
        b0 = 0.0
        b1 = 0.0
        b2 = 0.0
        b3 = 0.0
        for j in range(m):
            v = w[j]
            u = w[m + j]
            jk = j * n + k0
            k_0 = K[jk]
            k_1 = K[jk + 1]
            k_2 = K[jk + 2]
            k_3 = K[jk + 3]
            a0 += v * k_0
            a1 += v * k_1
            a2 += v * k_2
            a3 += v * k_3
            b0 += u * k_0
            b1 += u * k_1
            b2 += u * k_2
            b3 += u * k_3
        out[k0] = a0
        out[k0 + 1] = a1
        out[k0 + 2] = a2
        out[k0 + 3] = a3
        out[n + k0] = b0
        out[n + k0 + 1] = b1
        out[n + k0 + 2] = b2
        out[n + k0 + 3] = b3
        if k0 + 4 >= n:
            break
        k0 += 4


@njit(cache=True, inline="always")
def unfolded_size(k, v, off_phi, off_psi):
    """|v| for component k of an Euler-form state, with the turns put back into phi and psi
    (rounded once: it only scales the tolerance); with no turns counted, |v| itself. The body
    form takes |v| (the kernel branches on the form, so that its compile leaves this out)."""
    if k == E_PHI:
        return abs(v + off_phi)
    if k == E_PSI:
        return abs(v + off_psi)
    return abs(v)


@njit(cache=True, inline="always")
def first_derivative(form, p, y, f, counters):
    """f = rhs(y) at the start of a run, counted like every other evaluation."""
    rhs(form, y, p, f)
    counters[C_EVALS] += 1
    counters[C_FORCE_EVALS] += 1


@njit(cache=True, inline="always")
def initial_step(form, p, y, f, ytmp, ftmp, rtol, atol, order, interval, counters):
    """Hairer's starting step (Hairer, Norsett and Wanner, Solving ODEs I, sec. II.4) [from
    memory], in the variant of scipy's select_initial_step: f must hold rhs(y); costs one
    evaluation."""
    n = y.shape[0]
    d0 = 0.0
    d1 = 0.0
    for k in range(n):
        sc = atol + abs(y[k]) * rtol
        d0 += (y[k] / sc) ** 2
        d1 += (f[k] / sc) ** 2
    d0 = math.sqrt(d0 / n)
    d1 = math.sqrt(d1 / n)
    if d0 < 1e-5 or d1 < 1e-5:
        h0 = 1e-6
    else:
        h0 = 0.01 * d0 / d1
    h0 = min(h0, interval)
    for k in range(n):
        ytmp[k] = y[k] + h0 * f[k]
    rhs(form, ytmp, p, ftmp)
    counters[C_EVALS] += 1
    counters[C_FORCE_EVALS] += 1
    d2 = 0.0
    for k in range(n):
        sc = atol + abs(y[k]) * rtol
        d2 += ((ftmp[k] - f[k]) / sc) ** 2
    d2 = math.sqrt(d2 / n) / h0
    if d1 <= 1e-15 and d2 <= 1e-15:
        h1 = max(1e-6, h0 * 1e-3)
    else:
        h1 = (0.01 / max(d1, d2)) ** (1.0 / (order + 1))
    return min(100.0 * h0, h1, interval)


# One compiled start for both (two entries compiled the model's functions in twice the time).
@njit(cache=True)
def start_run(form, p, y, f, ytmp, ftmp, rtol, atol, order, interval, pick_step, counters):
    """f = rhs(y), counted; then, when pick_step, Hairer's starting step (initial_step),
    returned; 0.0 when not pick_step."""
    first_derivative(form, p, y, f, counters)
    if not pick_step:
        return 0.0
    return initial_step(form, p, y, f, ytmp, ftmp, rtol, atol, order, interval, counters)


@njit(cache=True)
def _build_dense(form, p, a, d, cfg, y, yold, K, ytmp, dense, ctrl, counters):
    n = y.shape[0]
    ns = cfg[CFG_N_STAGES]
    rows = cfg[CFG_N_ROWS]
    h = ctrl[CT_H_PREV]
    # Extra stages of the last step (DOP853's 14..16), from y_old with the step's own h. Plain
    # loops, not combine: the same sums in the same order (combine's bits are the plain loop's),
    # run once per output sample, and each inlined combine is typed again (cold compile time).
    for i in range(ns + 1, rows):
        base = i * rows
        for k in range(n):
            acc = 0.0
            for j in range(i):
                acc += a[base + j] * K[j * n + k]
            ytmp[k] = yold[k] + h * acc
        rhs(form, ytmp, p, K[i * n : (i + 1) * n])
        counters[C_EVALS] += 1
        counters[C_FORCE_EVALS] += 1
    knew = ns * n
    for k in range(n):
        dy = y[k] - yold[k]
        dense[k] = dy
        dense[n + k] = h * K[k] - dy
        dense[2 * n + k] = 2.0 * dy - h * (K[k] + K[knew + k])
    for r in range(cfg[CFG_N_DENSE]):
        base = r * rows
        for k in range(n):
            acc = 0.0
            for j in range(rows):
                acc += d[base + j] * K[j * n + k]
            dense[(3 + r) * n + k] = h * acc
    ctrl[CT_DENSE_OK] = 1.0


@njit(cache=True)
def eval_dense(theta, yold, dense, n_coef, out):
    """y_old + theta (F0 + theta1 (F1 + theta (F2 + ...))), the nested form of Hairer's codes."""
    n = yold.shape[0]
    theta1 = 1.0 - theta
    for k in range(n):
        acc = dense[(n_coef - 1) * n + k]
        for j in range(n_coef - 2, -1, -1):
            # F_{j+1} sits behind theta when j+1 is even, behind theta1 when odd.
            w = theta if (j + 1) % 2 == 0 else theta1
            acc = dense[j * n + k] + w * acc
        out[k] = yold[k] + theta * acc


@njit(cache=True)
def _advance(form, work):
    """Step while the internal time is below t_out, then write the state at t_out into y_out
    (dense output, or the state itself when a step ends on t_out). Returns a status code; on
    failure y, f, ctrl keep the last good step and y_out is untouched.

    `work` holds the arrays in the order unpacked here (see `advance_kernel`). Called from one
    entry per form (below) with `form` a constant, so that numba compiles it once per form, with
    the rhs switch folded and the model's function inlined into the stage loop.

    One function on purpose: the trial stages, the error norm and the commit read as parts, but
    as inline helpers they cost 4-18 % per step in reference counting of their array arguments
    (docs/design-notes.md)."""
    (
        p,
        a,
        e,
        d,
        cfg,
        tol,
        y,
        f,
        K,
        yold,
        ynew,
        ytmp,
        etmp,
        dense,
        ctrl,
        counters,
        t_out,
        y_out,
        turns,
    ) = work
    n = y.shape[0]
    ns = cfg[CFG_N_STAGES]
    err_kind = cfg[CFG_ERR_KIND]
    fsal_in_err = cfg[CFG_FSAL_IN_ERR] != 0
    rtol = tol[TL_RTOL]
    atol = tol[TL_ATOL]
    t_bound = tol[TL_T_BOUND]
    expo = tol[TL_EXPONENT]
    rows = cfg[CFG_N_ROWS]
    n = n & NONNEG
    knew = (ns * n) & NONNEG
    t = ctrl[CT_T]
    h_abs = ctrl[CT_H]
    folding = form == FORM_EULER and turns.shape[0] == N_TURNS
    off_phi = TURN * float(turns[T_PHI]) if folding else 0.0
    off_psi = TURN * float(turns[T_PSI]) if folding else 0.0
    while t < t_out:
        min_step = 10.0 * (np.nextafter(t, np.inf) - t)
        if h_abs < min_step:
            h_abs = min_step
        rejected = False
        nonfinite = False
        while True:
            if h_abs < min_step:
                ctrl[CT_H] = h_abs
                return ST_DIVERGED if nonfinite else ST_STEP_UNDERFLOW
            t_new = t + h_abs
            if t_new > t_bound:
                t_new = t_bound
            h = t_new - t
            h_abs = abs(h)
            for k in range(n):
                K[k] = f[k]
            # One combination site for the stages and the new solution (row ns): each inlined
            # copy costs compile time (see advance_kernel).
            for i in range(1, ns + 1):
                combine(n, i, a, i * rows, h, y, K, ytmp)
                if i == ns and not fsal_in_err:
                    break
                rhs(form, ytmp, p, K[i * n : (i + 1) * n])
            counters[C_EVALS] += ns if fsal_in_err else ns - 1
            counters[C_FORCE_EVALS] += ns if fsal_in_err else ns - 1
            for k in range(n):
                ynew[k] = ytmp[k]
            # Error norm.
            finite = True
            if err_kind == 0:
                combine(n, ns + 1, e, 0, 1.0, None, K, etmp)
                s = 0.0
                for k in range(n):
                    yn = ynew[k]
                    if not math.isfinite(yn):
                        finite = False
                    if form == FORM_EULER:
                        size = max(
                            unfolded_size(k, y[k], off_phi, off_psi),
                            unfolded_size(k, yn, off_phi, off_psi),
                        )
                    else:
                        size = max(abs(y[k]), abs(yn))
                    sc = atol + size * rtol
                    ek = h * etmp[k] / sc
                    s += ek * ek
                err = math.sqrt(s / n)
            else:
                weighted_pair(n, ns + 1, e, K, etmp)
                s5 = 0.0
                s3 = 0.0
                for k in range(n):
                    yn = ynew[k]
                    if not math.isfinite(yn):
                        finite = False
                    if form == FORM_EULER:
                        size = max(
                            unfolded_size(k, y[k], off_phi, off_psi),
                            unfolded_size(k, yn, off_phi, off_psi),
                        )
                    else:
                        size = max(abs(y[k]), abs(yn))
                    sc = atol + size * rtol
                    e5 = etmp[k] / sc
                    e3 = etmp[n + k] / sc
                    s5 += e5 * e5
                    s3 += e3 * e3
                if s5 == 0.0 and s3 == 0.0:
                    err = 0.0
                else:
                    err = h_abs * s5 / math.sqrt((s5 + 0.01 * s3) * n)
            if not (finite and math.isfinite(err)):
                nonfinite = True
                h_abs *= MIN_FACTOR
                rejected = True
                counters[C_REJECTED] += 1
                continue
            nonfinite = False
            if err < 1.0:
                if err == 0.0:
                    factor = MAX_FACTOR
                else:
                    factor = min(MAX_FACTOR, SAFETY * err**expo)
                if rejected:
                    factor = min(1.0, factor)
                h_abs *= factor
                break
            h_abs *= max(MIN_FACTOR, SAFETY * err**expo)
            rejected = True
            counters[C_REJECTED] += 1
        if not fsal_in_err:
            rhs(form, ynew, p, K[knew : knew + n])
            counters[C_EVALS] += 1
            counters[C_FORCE_EVALS] += 1
        if singular(form, ynew):
            ctrl[CT_H] = h_abs
            return ST_SINGULAR
        for k in range(n):
            yold[k] = y[k]
            y[k] = ynew[k]
            f[k] = K[knew + k]
        # A branch on the form itself, which numba prunes in the body form's compile.
        if form == FORM_EULER and folding:
            k_phi = turns[T_PHI]
            k_psi = turns[T_PSI]
            fold_euler(y, turns)
            # yold by the same turns (exact by Sterbenz for a step that moved the angle less
            # than about 0.86 rad): the dense output's pair stays one local unfolded pair.
            if turns[T_PHI] != k_phi:
                yold[E_PHI] -= TURN * float(turns[T_PHI] - k_phi)
                off_phi = TURN * float(turns[T_PHI])
            if turns[T_PSI] != k_psi:
                yold[E_PSI] -= TURN * float(turns[T_PSI] - k_psi)
                off_psi = TURN * float(turns[T_PSI])
        ctrl[CT_T_OLD] = t
        ctrl[CT_H_PREV] = h
        ctrl[CT_DENSE_OK] = 0.0
        t = t_new
        ctrl[CT_T] = t
        ctrl[CT_H] = h_abs
        counters[C_STEPS] += 1
    if t == t_out:
        for k in range(n):
            y_out[k] = y[k]
        return ST_OK
    if ctrl[CT_DENSE_OK] == 0.0:
        _build_dense(
            form,
            p,
            a,
            d,
            cfg,
            y,
            yold,
            K,
            ytmp,
            dense,
            ctrl,
            counters,
        )
    theta = (t_out - ctrl[CT_T_OLD]) / ctrl[CT_H_PREV]
    eval_dense(theta, yold, dense, 3 + cfg[CFG_N_DENSE], y_out)
    return ST_OK


# One small entry per form, so that a run compiles only the form it uses: numba compiles a
# callee for every branch of its caller (compile times in docs/design-notes.md). The arrays
# travel as one tuple because numba cannot inline a call with *args; _advance is a plain call,
# paid once per advance, not per step.


@njit(cache=True)
def advance_euler(work):
    return _advance(FORM_EULER, work)


@njit(cache=True)
def advance_body(work):
    return _advance(FORM_BODY, work)


def advance_kernel(form: int):
    """The entry for a form. It takes the tuple (p, a, e, d, cfg, tol, y, f, K, yold, ynew,
    ytmp, etmp, dense, ctrl, counters, t_out, y_out, turns) and returns a status code; an
    Euler-form run folds phi and psi after every accepted step, counting whole turns in turns
    (two int64; an empty array keeps them unfolded)."""
    return advance_euler if form == FORM_EULER else advance_body
