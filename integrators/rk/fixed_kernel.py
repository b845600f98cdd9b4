"""One numba kernel for explicit Runge-Kutta methods at a fixed step, from a packed tableau.

The new state is y + h sum_j b_j k_j, with b the row n_stages of the packed matrix. With
`kahan` set, that increment is added with compensated summation (Kahan 1965, "Further remarks on
reducing truncation errors", Comm. ACM 8, 40): the low-order bits lost when the small increment
meets the large state are carried in `comp` and fed back into the next increment, so that
round-off in the accumulated state grows like sqrt(steps) instead of linearly.
"""

from __future__ import annotations

import math

from numba import njit

from topdrift.integrators.base import (
    C_EVALS,
    C_FORCE_EVALS,
    C_STEPS,
    ST_DIVERGED,
    ST_OK,
    ST_SINGULAR,
)
from topdrift.integrators.rk.embedded_kernel import (  # rhs: the inlined switch, see there
    combine,
    rhs,
)
from topdrift.models.dynamics import singular
from topdrift.models.forms import FORM_BODY, FORM_EULER
from topdrift.models.turns import fold_euler


@njit(cache=True)
def _explicit(form, work):
    """Take nsteps steps of length h in place on y (and comp). Returns (status, steps taken);
    on failure y holds the state after the last good step. Compiled once per form, as the
    embedded kernel's _advance (see there)."""
    p, a, ns, h, nsteps, kahan, y, comp, K, ytmp, ynew, binc, counters, turns = work
    n = y.shape[0]
    rows = ns + 1  # the packed matrix of a fixed-step method: the stages, then b
    for step in range(nsteps):
        rhs(form, y, p, K[0:n])
        for i in range(1, ns):
            combine(n, i, a, i * rows, h, y, K, ytmp)
            rhs(form, ytmp, p, K[i * n : (i + 1) * n])
        counters[C_EVALS] += ns
        counters[C_FORCE_EVALS] += ns  # every stage evaluates the torque
        finite = True
        combine(n, ns, a, ns * rows, 1.0, None, K, binc)
        for k in range(n):
            inc = h * binc[k]
            if kahan:
                yk = inc - comp[k]
                s = y[k] + yk
                ynew[k] = s
                # Kept in ytmp until the step is accepted, so that a failed step leaves comp.
                ytmp[k] = (s - y[k]) - yk
            else:
                ynew[k] = y[k] + inc
            if not math.isfinite(ynew[k]):
                finite = False
        if not finite:
            return ST_DIVERGED, step
        if singular(form, ynew):
            return ST_SINGULAR, step
        for k in range(n):
            y[k] = ynew[k]
        if kahan:
            for k in range(n):
                comp[k] = ytmp[k]
        if form == FORM_EULER:
            fold_euler(y, turns)  # exact: comp still holds what y lacks (models/turns.py)
        counters[C_STEPS] += 1
    return ST_OK, nsteps


# One small entry per form, so that a run compiles only the form it uses (see
# rk_embedded_kernel.advance_kernel).


@njit(cache=True)
def explicit_euler(work):
    return _explicit(FORM_EULER, work)


@njit(cache=True)
def explicit_body(work):
    return _explicit(FORM_BODY, work)


def explicit_kernel(form: int):
    """The entry for a form. It takes the tuple (p, a, ns, h, nsteps, kahan, y, comp, K, ytmp,
    ynew, binc, counters, turns) and returns (status, steps taken); an Euler-form run folds phi and
    psi after every step, counting whole turns in turns (models/turns.py)."""
    return explicit_euler if form == FORM_EULER else explicit_body
