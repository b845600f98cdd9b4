"""The one kernel behind every Gauss-Legendre method: fixed steps of an s-stage implicit Runge-Kutta
method given by its tableau, the stage equations solved by fixed-point iteration to round-off.

Stage equations in increment form, Z_i = Y_i - y_n = h sum_j a_ij f(y_n + Z_j): the Z are small,
so their round-off is small against y_n (Hairer, McLachlan and Razakarivony, "Achieving Brouwer's
law with implicit Runge-Kutta methods", BIT 48 (2008) 231-243, from memory). The iteration stops
when the largest change of Z is zero, that is at an exact fixed point of the floating-point
iteration. Once the change has stopped decreasing at round-off level (that paper's stopping
point) it gets up to ROUNDOFF_SWEEPS more sweeps to get there, then stops where it is. It gives
up after `max_iter` sweeps if it never reached round-off (ST_NO_CONVERGENCE).

Why not stop at the first stall: at a stall the last two iterates differ by a few units in the
last place, and the step then keeps the quadratic invariants only up to
2 h sum_i b_i (Z_i^k - Z_i^(k-1)).C F_i, which has a sign set by the side the iteration came from
(the starting guess's error is smooth along the orbit), not a random one. Measured on the
looping-nutation top, gauss4-kahan, 16 starts, h = 2e-3: stopping at the first stall (about 8 %
of the steps) left a common energy drift of +1e-21 per step (exponent 0.90 over 10^7 steps);
most of those steps reach a zero change within five more sweeps (all but 1 % of all steps). The
rest cycle between neighbouring doubles for good, and which member a step ends on set the sign
of the remaining drift: measured, stopping after 5 more sweeps drifted gauss6-kahan down,
averaging the derivatives at the last two iterates drifted gauss4-kahan up. So the number of
extra sweeps is 5 or 6 by the last bit of y[0], a bit that changes pseudo-randomly from step to
step: the end of a cycle is picked without a preferred side, and its defect becomes one more
random error. Cost: 1 % more sweeps per step there; more where stalls are common (the
regression gate saw +25 % evaluations for gauss4 on demo-wheel, Euler form, h = 0.0125).

The update y_{n+1} = y_n + h sum_i b_i F_i is added either plainly or with compensated
summation (Kahan's idea, with Knuth's TwoSum for the error), carrying the compensation from step
to step (Hairer, Lubich, Wanner, Geometric Numerical Integration, sec. VIII.5). It uses the
derivatives of the last sweep, which costs no extra evaluation. Not y_n + sum_i d_i Z_i with
d = b^T A^-1: d is irrational, and the rounded d make the effective weights d A differ from b,
so the tableau is no longer exactly symplectic (measured: a drift of -3e-14 over 10^6 steps of
gauss4-kahan on looping-nutation, 30 times the random error).

The starting guess for Z comes from the last step's collocation polynomial extrapolated over the
new step (matrix E in gauss_tableau), or, for a first step or after the step changed sign, from
Z_i = c_i h f(y_n). Everything is in caller-owned flat arrays: nothing is allocated per step.
"""

from __future__ import annotations

import math

from numba import njit

from topdrift.models.dynamics import rhs, singular

from .base import C_EVALS, C_STEPS, ST_DIVERGED, ST_NO_CONVERGENCE, ST_OK, ST_SINGULAR

# A stalled iteration counts as converged only if its last change is below this fraction of
# max|Z| + max|y_n|, with Z after the first sweep (a scale taken later would grow with a diverging
# iteration). Round-off stalls near 1e-16 of that (times 1/(1 - rate) for slow contraction; |y_n|
# enters because rounding y_n + Z feeds back through f, which matters when the motion is slow);
# an iteration that does not contract stalls near max|Z|. The gap is wide on purpose.
STALL_RTOL = 1e-10

# Sweeps allowed after the first stall at round-off, looking for a change of exactly zero
# (one more on about half the steps, see above).
ROUNDOFF_SWEEPS = 5

# Layout of the persistent float64 `memo` array.
M_HPREV = 0  # step of the stages kept in fprev; NaN when there are none
N_MEMO = 1

# Layout of the persistent int64 `iters` array.
I_TOTAL = 0  # fixed-point sweeps, summed over steps
I_MAX = 1  # most sweeps in one step
N_ITERS = 2


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
    compensated,
    max_iter,
    comp,
    fprev,
    memo,
    work,
    counters,
    iters,
):
    """Take up to nsteps steps of size h in place on y. Returns (status, steps taken).

    work holds 2*s*n + 4*n floats. A failed step is not committed: y, comp, fprev stay at the
    last good step.
    """
    n = y.shape[0]
    s = b.shape[0]
    sn = s * n
    # Views into the work array: stage increments, stage derivatives, one stage value,
    # one derivative, the candidate new state and its compensation.
    z = work[0:sn]
    f = work[sn : 2 * sn]
    ys = work[2 * sn : 2 * sn + n]
    dy = work[2 * sn + n : 2 * sn + 2 * n]
    ynew = work[2 * sn + 2 * n : 2 * sn + 3 * n]
    cnew = work[2 * sn + 3 * n : 2 * sn + 4 * n]
    done = 0
    for _ in range(nsteps):
        # Starting guess.
        if memo[M_HPREV] == h:
            for i in range(s):
                for k in range(n):
                    acc = 0.0
                    for j in range(s):
                        acc += e[i * s + j] * fprev[j * n + k]
                    z[i * n + k] = h * acc
        else:
            rhs(form, y, p, dy)
            counters[C_EVALS] += 1
            for i in range(s):
                for k in range(n):
                    z[i * n + k] = c[i] * h * dy[k]
        ymax = 0.0
        for k in range(n):
            ay = abs(y[k])
            if ay > ymax:
                ymax = ay
        # Fixed-point sweeps.
        status = ST_NO_CONVERGENCE
        prev = math.inf
        zscale = 0.0
        sweeps = 0
        stalled = -1  # sweeps since the first stall at round-off; -1 before it
        # ROUNDOFF_SWEEPS or one more, by the last bit of y[0]: an iteration that still cycles
        # between neighbouring doubles then ends on either side with no preferred one (below).
        mant, _ = math.frexp(y[0])
        extra_sweeps = ROUNDOFF_SWEEPS + (int(mant * 9007199254740992.0) & 1)
        for _it in range(max_iter):
            for i in range(s):
                for k in range(n):
                    ys[k] = y[k] + z[i * n + k]
                rhs(form, ys, p, dy)
                for k in range(n):
                    f[i * n + k] = dy[k]
            counters[C_EVALS] += s
            sweeps += 1
            delta = 0.0
            zmax = 0.0
            for i in range(s):
                for k in range(n):
                    acc = 0.0
                    for j in range(s):
                        acc += a[i * s + j] * f[j * n + k]
                    znew = h * acc
                    d = abs(znew - z[i * n + k])
                    # NaN-safe: a NaN change makes delta NaN, caught below.
                    if not d <= delta:
                        delta = d
                    az = abs(znew)
                    if az > zmax:
                        zmax = az
                    z[i * n + k] = znew
            if not math.isfinite(delta):
                # Non-finite on the first sweep: the rhs itself is, next to y_n. Later: the
                # iteration ran away.
                status = ST_DIVERGED if sweeps == 1 else ST_NO_CONVERGENCE
                stalled = -1
                break
            if delta == 0.0:
                status = ST_OK
                break
            if stalled >= 0:
                stalled += 1
                if stalled >= extra_sweeps:
                    status = ST_OK
                    break
                continue
            # Stalled at round-off: a few more sweeps usually reach a zero change (see above).
            # A change that stops decreasing while still large is not a stall (early sweeps need
            # not contract monotonically); sweep on to the cap.
            if sweeps == 1:
                zscale = zmax + ymax
            if delta >= prev and prev <= STALL_RTOL * zscale:
                stalled = 0
            prev = delta
        if stalled >= 0 and status == ST_NO_CONVERGENCE:
            status = ST_OK  # the cap came during the sweeps after a stall at round-off
        iters[I_TOTAL] += sweeps
        if sweeps > iters[I_MAX]:
            iters[I_MAX] = sweeps
        if status != ST_OK:
            return status, done
        # Update, with the derivatives of the last sweep.
        finite = True
        for k in range(n):
            acc = 0.0
            for i in range(s):
                acc += b[i] * f[i * n + k]
            inc = h * acc
            if compensated:
                # Knuth's TwoSum: the exact rounding error whatever |y_k| against |x| (Kahan's
                # shortcut (y - yk) + x needs |y_k| >= |x|, which fails near every zero
                # crossing of a quaternion component, where the increment is the larger).
                x = inc + comp[k]
                yk = y[k] + x
                bp = yk - y[k]
                cnew[k] = (y[k] - (yk - bp)) + (x - bp)
            else:
                yk = y[k] + inc
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
        for k in range(sn):
            fprev[k] = f[k]
        memo[M_HPREV] = h
        counters[C_STEPS] += 1
        done += 1
    return ST_OK, done
