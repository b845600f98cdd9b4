"""The one kernel behind every Gauss-Legendre method: fixed steps of an s-stage implicit Runge-Kutta
method given by its tableau, the stage equations solved by fixed-point iteration to round-off.

A step: a starting guess for the stage increments Z_i = Y_i - y_n (the last step's collocation
polynomial extrapolated over the new step, matrix E in gauss/tableau.py, or Z_i = c_i h f(y_n)
for a first step or after the step changed sign); fixed-point sweeps Z <- h A f(y_n + Z) until
the largest change is zero or stalls at round-off (ST_NO_CONVERGENCE after `max_iter` sweeps);
the stages rounded to the double nearest the exact stage solution, so that the rounding has no
preferred direction; the update y_n + h sum_i b_i F_i, plain or compensated, carrying every
rounding error of the update (error-free transformations, eft.py). Increment form and stopping
rule follow Hairer, McLachlan and Razakarivony, "Achieving Brouwer's law with implicit
Runge-Kutta methods", BIT 48 (2008) 231-243 (from memory); compensated summation Hairer, Lubich,
Wanner, Geometric Numerical Integration, sec. VIII.5.

Why the stages are rounded and the update carried this way, with the measurements that decided
it: docs/design-notes.md, "Gauss-Legendre: rounding without bias". Everything is in caller-owned
flat arrays: nothing is allocated per step.
"""

from __future__ import annotations

import math

from numba import njit

from topdrift.integrators.base import (
    C_EVALS,
    C_FORCE_EVALS,
    C_STEPS,
    ST_DIVERGED,
    ST_NO_CONVERGENCE,
    ST_OK,
    ST_SINGULAR,
)
from topdrift.integrators.eft import two_prod, two_sum
from topdrift.models.dynamics import rhs, singular
from topdrift.models.forms import FORM_EULER
from topdrift.models.turns import fold_euler

# A stalled iteration counts as converged only if its last change is below this fraction of
# max|Z| + max|y_n|, with Z after the first sweep (a scale taken later would grow with a diverging
# iteration). Round-off stalls near 1e-16 of that (times 1/(1 - rate) for slow contraction; |y_n|
# enters because rounding y_n + Z feeds back through f, which matters when the motion is slow);
# an iteration that does not contract stalls near max|Z|. The gap is wide on purpose.
STALL_RTOL = 1e-10

# The stage residuals d are of the order of one unit in the last place of Y; f'(Y) d is taken as
# (f(Y + t d) - f(Y)) / t. t = 2^24 (exact scaling) lifts t d far above the rounding of f and
# keeps it far below the scale on which f' changes (second-order error ~ t |d| ~ 1e-9 relative).
JD_SCALE = 16777216.0

# Layout of the persistent float64 `memo` array.
M_HPREV = 0  # step of the stages kept in fprev; NaN when there are none
N_MEMO = 1

# Layout of the persistent int64 `iters` array.
I_TOTAL = 0  # fixed-point sweeps, summed over steps
I_MAX = 1  # most sweeps in one step
I_ROUNDING = 2  # evaluations spent rounding the stages (s per step plus the stages moved)
N_ITERS = 3


def work_size(stages: int, n: int) -> int:
    """Floats in the `work` array of gauss_steps."""
    return 4 * stages * n + 4 * n + 2 * stages


@njit(cache=True)
def gauss_steps(
    form,
    y,
    p,
    h,
    nsteps,
    a,
    b,
    c,
    e,
    mu,
    b_hi,
    b_lo,
    compensated,
    max_iter,
    comp,
    fprev,
    memo,
    work,
    counters,
    iters,
    turns,
):
    """Take up to nsteps steps of size h in place on y. Returns (status, steps taken). In the
    Euler form phi and psi are folded after every step, whole turns counted in turns (two int64;
    empty: left unfolded, models/turns.py).

    The compensated update is formed from mu, b_hi, b_lo (gauss/tableau.py, ratio_doubles and
    weight_pairs): W_j = h (b_hi_j + b_lo_j) F_j as two doubles, stages y_n + sum_j mu_ij W_j,
    update y_n + sum_j W_j, so that the weights sum to 1 within ~1e-32 and the method is still
    exactly symplectic; the plain update uses a and b. work holds work_size(s, n) floats.
    A failed step is not committed: y, comp, fprev stay at the last good step. One function on
    purpose: its parts (guess, sweeps, residuals, rounding, update) as inline helpers cost 3-9 %
    per step in reference counting of their array arguments (docs/design-notes.md).
    """
    n = y.shape[0]
    s = b.shape[0]
    sn = s * n
    # Views into the work array: two buffers of stage increments in zz (the one the derivatives
    # were taken at, from offset zo, and the next iterate, from zn; they trade places every sweep
    # by offset, which unlike swapping array views costs no reference counting), stage
    # derivatives, f' d per stage, one stage value, one derivative, the candidate new state and
    # its compensation.
    zz = work[0 : 2 * sn]
    f = work[2 * sn : 3 * sn]
    jd = work[3 * sn : 4 * sn]
    ys = work[4 * sn : 4 * sn + n]
    dy = work[4 * sn + n : 4 * sn + 2 * n]
    ynew = work[4 * sn + 2 * n : 4 * sn + 3 * n]
    cnew = work[4 * sn + 3 * n : 4 * sn + 4 * n]
    hb = work[4 * sn + 4 * n : 4 * sn + 4 * n + 2 * s]  # h b_j as hi (j) + lo (s + j)
    if compensated:
        for j in range(s):
            hh, hl = two_prod(h, b_hi[j])
            hb[j] = hh
            hb[s + j] = hl + h * b_lo[j]
    done = 0
    for _ in range(nsteps):
        # Starting guess.
        if memo[M_HPREV] == h:
            for i in range(s):
                for k in range(n):
                    acc = 0.0
                    for j in range(s):
                        acc += e[i * s + j] * fprev[j * n + k]
                    zz[i * n + k] = h * acc
        else:
            rhs(form, y, p, dy)
            counters[C_EVALS] += 1
            counters[C_FORCE_EVALS] += 1
            for i in range(s):
                for k in range(n):
                    zz[i * n + k] = c[i] * h * dy[k]
        ymax = 0.0
        for k in range(n):
            ay = abs(y[k])
            if ay > ymax:
                ymax = ay
        # Fixed-point sweeps. After each, zz[zo:] holds the increments f was evaluated at and
        # zz[zn:] the next iterate.
        status = ST_NO_CONVERGENCE
        prev = math.inf
        zscale = 0.0
        sweeps = 0
        zo = 0
        zn = sn
        for _it in range(max_iter):
            if sweeps > 0:
                zo, zn = zn, zo
            for i in range(s):
                for k in range(n):
                    ys[k] = y[k] + zz[zo + i * n + k]
                rhs(form, ys, p, dy)
                for k in range(n):
                    f[i * n + k] = dy[k]
            counters[C_EVALS] += s
            counters[C_FORCE_EVALS] += s
            sweeps += 1
            delta = 0.0
            zmax = 0.0
            if compensated:
                # W_j = h b_j F_j with both parts of the weight (jd is free until the rounding
                # below): the sweeps then solve the ratio form's equations, the ones the stage
                # residual measures, and not h A F with A of doubles, whose weights are off by
                # a common relative 4.4e-16 for three stages (a bias of the fixed point).
                for j in range(s):
                    for k in range(n):
                        fj = f[j * n + k]
                        jd[j * n + k] = hb[j] * fj + hb[s + j] * fj
            for i in range(s):
                for k in range(n):
                    acc = 0.0
                    if compensated:
                        for j in range(s):
                            acc += mu[i * s + j] * jd[j * n + k]
                        znew = acc
                    else:
                        for j in range(s):
                            acc += a[i * s + j] * f[j * n + k]
                        znew = h * acc
                    d = abs(znew - zz[zo + i * n + k])
                    # NaN-safe: a NaN change makes delta NaN, caught below.
                    if not d <= delta:
                        delta = d
                    az = abs(znew)
                    if az > zmax:
                        zmax = az
                    zz[zn + i * n + k] = znew
            if not math.isfinite(delta):
                # Non-finite on the first sweep: the rhs itself is, next to y_n. Later: the
                # iteration ran away.
                status = ST_DIVERGED if sweeps == 1 else ST_NO_CONVERGENCE
                break
            if delta == 0.0:
                status = ST_OK
                break
            # A change that stops decreasing while still large is not a stall (early sweeps need
            # not contract monotonically); sweep on to the cap.
            if sweeps == 1:
                zscale = zmax + ymax
            if delta >= prev and prev <= STALL_RTOL * zscale:
                status = ST_OK
                break
            prev = delta
        iters[I_TOTAL] += sweeps
        if sweeps > iters[I_MAX]:
            iters[I_MAX] = sweeps
        if status != ST_OK:
            return status, done
        # Round the stages without bias (module note). Residual d_i = Y_i - y - h sum_j a_ij F_j
        # with Y_i = fl(y + z_i), exactly up to its own last bits: y + z_i = Y_i + r, so
        # Y_i - y = z_i - r; h sum_j a_ij F_j = w + wl from two_prod and two_sum. d goes into
        # the buffer of the next iterate, which is free now.
        # Compensated: against the stage equations in ratio form, Y_i - y - sum_j mu_ij W_j.
        for i in range(s):
            for k in range(n):
                _, r = two_sum(y[k], zz[zo + i * n + k])
                wh = 0.0
                wl = 0.0
                if compensated:
                    for j in range(s):
                        fj = f[j * n + k]
                        vh, vl = two_prod(hb[j], fj)
                        vl += hb[s + j] * fj
                        ph, pl = two_prod(mu[i * s + j], vh)
                        wh, se = two_sum(wh, ph)
                        wl += se + (pl + mu[i * s + j] * vl)
                    zz[zn + i * n + k] = ((zz[zo + i * n + k] - wh) - wl) - r
                else:
                    for j in range(s):
                        ph, pl = two_prod(a[i * s + j], f[j * n + k])
                        wh, se = two_sum(wh, ph)
                        wl += se + pl
                    w, we = two_prod(h, wh)
                    zz[zn + i * n + k] = ((zz[zo + i * n + k] - w) - (we + h * wl)) - r
        # f'(Y_i) d_i by a finite difference along d_i.
        for i in range(s):
            for k in range(n):
                ys[k] = (y[k] + zz[zo + i * n + k]) + JD_SCALE * zz[zn + i * n + k]
            rhs(form, ys, p, dy)
            for k in range(n):
                jd[i * n + k] = (dy[k] - f[i * n + k]) / JD_SCALE
        evals = s
        # The double nearest Y* = Y - d - h A f' d (design notes); evaluate again where it moved.
        for i in range(s):
            moved = False
            for k in range(n):
                acc = 0.0
                for j in range(s):
                    acc += a[i * s + j] * jd[j * n + k]
                yi = y[k] + zz[zo + i * n + k]
                v = yi - (zz[zn + i * n + k] + h * acc)
                ys[k] = v
                if v != yi:
                    moved = True
            if moved:
                rhs(form, ys, p, dy)
                for k in range(n):
                    f[i * n + k] = dy[k]
                evals += 1
        counters[C_EVALS] += evals
        counters[C_FORCE_EVALS] += evals
        iters[I_ROUNDING] += evals
        # Update, with the derivatives at the rounded stages.
        finite = True
        for k in range(n):
            if compensated:
                # The increment sum_i W_i, W_i = h (b_hi_i + b_lo_i) F_i, as ih + il exactly
                # (up to the last bits of il), then y + comp + ih + il = yk + cnew exactly:
                # TwoSum, which is exact whatever |y_k| against the increment (Kahan's shortcut
                # needs |y_k| >= |x|, which fails near every zero crossing of a quaternion
                # component).
                ih = 0.0
                il = 0.0
                for i in range(s):
                    fi = f[i * n + k]
                    vh, vl = two_prod(hb[i], fi)
                    ih, se = two_sum(ih, vh)
                    il += se + (vl + hb[s + i] * fi)
                s1, e1 = two_sum(y[k], ih)
                yk, ck = two_sum(s1, e1 + (il + comp[k]))
                cnew[k] = ck
            else:
                acc = 0.0
                for i in range(s):
                    acc += b[i] * f[i * n + k]
                yk = y[k] + h * acc
                cnew[k] = 0.0
            ynew[k] = yk
            if not math.isfinite(yk):
                finite = False
        if not finite:
            return ST_DIVERGED, done
        if singular(form, ynew):
            return ST_SINGULAR, done
        for k in range(n):
            y[k] = ynew[k]
            comp[k] = cnew[k]
        if form == FORM_EULER:
            fold_euler(y, turns)  # exact, and comp still holds what y lacks
        for k in range(sn):
            fprev[k] = f[k]
        memo[M_HPREV] = h
        counters[C_STEPS] += 1
        done += 1
    return ST_OK, done
