"""The one kernel family behind every splitting method: any coefficient table, either form.

A step is the sequence B(b_0 h) A(a_1 h) B(b_1 h) ... A(a_s h) B(b_s h) (compositions.py). The
closing kick of one step and the opening kick of the next are merged into one kick of
(b_s + b_0) h: a kick keeps the coordinates it depends on fixed, so it is linear in its time and
the merge is exact in exact arithmetic. The stepper therefore carries the "open" state w, the
state before the closing kick b_s h, and hands out closed states as copies. Output times never
change the step sequence, so a run sampled often gives the same bits as a run sampled rarely.

fresh = 1 means w is a closed state (no step taken yet): the first kick is b_0 h, not the merge.

Kernels call the model kernels by name (flow_a_with, flow_b, increment_a_with, increment_b,
singular; `free` picks the body form's free flow, models/flows.py FREE_EXACT or FREE_COMPOSED),
allocate nothing inside the step loop, and count their own steps, sub-flow evaluations and, of
these, the kicks (force evaluations). In the Euler form they fold phi and psi into (-pi, pi]
after every step and count the whole turns beside the state (models/turns.py).
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
from topdrift.models.body import P_FIELD, P_H3, P_I1, P_I2, P_INV1, P_INV3
from topdrift.models.dynamics import singular
from topdrift.models.field_spec import FIELD_UNIFORM
from topdrift.models.flows import (
    FREE_COMPOSED,
    FREE_EXACT,
    FREE_SYMMETRIC,
    flow_a_fixed,
    flow_b,
    increment_a_with,
    increment_b,
)
from topdrift.models.forms import FORM_BODY, FORM_EULER
from topdrift.models.turns import fold_euler


@njit(cache=True, inline="always")
def _drift(form, free, h, w, p):
    """The A flow, for a caller whose form is a constant: the branch not taken is pruned before
    typing, so the Euler form's loop never compiles the body form's free flows, the elliptic one
    included (measured: the cold compile of the Euler-form leapfrog's kernel fell from 20.7 s
    to about 4 s on a loaded machine). flow_a_fixed, called as a function, is inlined by LLVM
    with free a constant in the symmetric body's loop (see run_plain_body)."""
    if form == FORM_EULER:
        # models/flows.py drift_euler, written out: called (even inlined by numba) the
        # Euler-form leapfrog measured 7 % slower, 36.5 against 34 ns a step beside C's 31
        # (benchmarks/timing/against_c.py); tests/test_splitting.py pins the two together.
        w[1] += h * w[4] * p[P_INV1]
        w[2] += h * (w[5] - p[P_H3]) * p[P_INV3]  # a rotor on axis 3 (else - 0.0)
    else:
        flow_a_fixed(form, free, h, w, p)


@njit(cache=True, inline="always")
def _plain_steps(form, free, p, kick, drift, nsteps, w, first, counters, turns):
    s = drift.shape[0]
    n = w.shape[0]
    wrap = kick[s] + kick[0]
    status = ST_OK
    done = 0
    for _ in range(nsteps):
        flow_b(form, first, w, p)
        first = wrap
        for i in range(s - 1):
            _drift(form, free, drift[i], w, p)
            flow_b(form, kick[i + 1], w, p)
        _drift(form, free, drift[s - 1], w, p)
        acc = 0.0
        for i in range(n):
            acc += w[i]
        if not math.isfinite(acc):
            status = ST_DIVERGED
            break
        if singular(form, w):
            status = ST_SINGULAR
            break
        if form == FORM_EULER:
            fold_euler(w, turns)  # exact, and e still holds what w lacks (models/turns.py)
        done += 1
    attempted = done + (1 if status != ST_OK else 0)
    counters[C_STEPS] += done
    counters[C_EVALS] += 2 * s * attempted
    counters[C_FORCE_EVALS] += s * attempted  # the kicks; the other s are free flows
    return status, done


@njit(cache=True, inline="always")
def _opening_kick(kick, fresh):
    """The first kick of this call: b_0 h on a closed state, else the merged (b_s + b_0) h."""
    first = kick[0] if fresh[0] != 0 else kick[kick.shape[0] - 1] + kick[0]
    fresh[0] = 0
    return first


@njit(cache=True)
def run_plain_euler(free, p, kick, drift, nsteps, w, fresh, counters, turns):
    """run_plain for the Euler form only: what a single run compiles (not the body form's free
    flows, the elliptic one included, that an Euler-form run never calls)."""
    if nsteps <= 0:
        return ST_OK, 0
    first = _opening_kick(kick, fresh)
    return _plain_steps(FORM_EULER, free, p, kick, drift, nsteps, w, first, counters, turns)


@njit(cache=True)
def run_plain_body(free, p, kick, drift, nsteps, w, fresh, counters, turns):
    """run_plain for the body form only. Its loop is compiled twice: once for a symmetric body
    with the free flow a constant, so that the closed-form free flow is compiled into the loop
    instead of called through the dispatch, which passes y and p on and so counts their
    references twice a step (body-form leapfrog against C: 1.16 -> 1.05,
    benchmarks/timing/against_c.py), and once for any other body and free flow."""
    if nsteps <= 0:
        return ST_OK, 0
    first = _opening_kick(kick, fresh)
    symmetric = p[P_I1] == p[P_I2] and p[P_FIELD] == FIELD_UNIFORM
    if (free == FREE_EXACT or free == FREE_COMPOSED) and symmetric:
        # both of these free flows are the closed form for I1 = I2; the loop is taken for uniform
        # gravity only, so its free flow (flow_a_fixed) does not branch on the field
        return _plain_steps(
            FORM_BODY, FREE_SYMMETRIC, p, kick, drift, nsteps, w, first, counters, turns
        )
    return _plain_steps(FORM_BODY, free, p, kick, drift, nsteps, w, first, counters, turns)


@njit(cache=True)
def run_plain(form, free, p, kick, drift, nsteps, w, fresh, counters, turns):
    """Advance the open state w by nsteps steps in place. kick (s + 1) and drift (s) are the
    coefficients already multiplied by the step. Returns (status, good steps taken). In the
    Euler form phi and psi are folded after every step, whole turns counted in turns (two
    int64; empty: left unfolded, models/turns.py).

    The loop is compiled once per form with the form a constant, so that the sub-flows' switch
    on the form folds away (measured: 62 -> 36 ns per Euler-form leapfrog step), in one entry
    per form (run_plain_euler, run_plain_body): a single run calls the entry of its form and
    compiles only that; this one, for kernels that take the form as data (the ensembles),
    compiles both."""
    if form == FORM_EULER:
        return run_plain_euler(free, p, kick, drift, nsteps, w, fresh, counters, turns)
    return run_plain_body(free, p, kick, drift, nsteps, w, fresh, counters, turns)


@njit(cache=True, inline="always")
def _add_compensated(w, e, d, n):
    """w + e += d with Knuth's TwoSum: the rounding error of every addition goes into e, exact
    whatever the relative sizes of w and d (Kahan's shortcut needs |w| >= |d|)."""
    for i in range(n):
        a = d[i] + e[i]
        s = w[i] + a
        bp = s - w[i]
        e[i] = (w[i] - (s - bp)) + (a - bp)
        w[i] = s


@njit(cache=True, inline="always")
def _compensated_steps(form, free, p, kick, drift, nsteps, w, e, d, first, counters, turns):
    s = drift.shape[0]
    n = w.shape[0]
    wrap = kick[s] + kick[0]
    status = ST_OK
    done = 0
    for _ in range(nsteps):
        increment_b(form, first, w, p, d)
        _add_compensated(w, e, d, n)
        first = wrap
        for i in range(s - 1):
            increment_a_with(form, free, drift[i], w, p, d)
            _add_compensated(w, e, d, n)
            increment_b(form, kick[i + 1], w, p, d)
            _add_compensated(w, e, d, n)
        increment_a_with(form, free, drift[s - 1], w, p, d)
        _add_compensated(w, e, d, n)
        acc = 0.0
        for i in range(n):
            acc += w[i]
        if not math.isfinite(acc):
            status = ST_DIVERGED
            break
        if singular(form, w):
            status = ST_SINGULAR
            break
        if form == FORM_EULER:
            fold_euler(w, turns)  # exact, and e still holds what w lacks (models/turns.py)
        done += 1
    attempted = done + (1 if status != ST_OK else 0)
    counters[C_STEPS] += done
    counters[C_EVALS] += 2 * s * attempted
    counters[C_FORCE_EVALS] += s * attempted  # the kicks; the other s are free flows
    return status, done


@njit(cache=True)
def run_compensated_euler(free, p, kick, drift, nsteps, w, e, d, fresh, counters, turns):
    """run_compensated for the Euler form only (see run_plain_euler)."""
    if nsteps <= 0:
        return ST_OK, 0
    first = _opening_kick(kick, fresh)
    return _compensated_steps(
        FORM_EULER, free, p, kick, drift, nsteps, w, e, d, first, counters, turns
    )


@njit(cache=True)
def run_compensated_body(free, p, kick, drift, nsteps, w, e, d, fresh, counters, turns):
    """run_compensated for the body form only."""
    if nsteps <= 0:
        return ST_OK, 0
    first = _opening_kick(kick, fresh)
    return _compensated_steps(
        FORM_BODY, free, p, kick, drift, nsteps, w, e, d, first, counters, turns
    )


@njit(cache=True)
def run_compensated(form, free, p, kick, drift, nsteps, w, e, d, fresh, counters, turns):
    """run_plain with compensated summation: every sub-flow is evaluated as an increment d of
    the rounded state w and added to (w, e) with TwoSum; e carries what did not fit into w.
    d is scratch of the state's length. One entry per form as for run_plain."""
    if form == FORM_EULER:
        return run_compensated_euler(free, p, kick, drift, nsteps, w, e, d, fresh, counters, turns)
    return run_compensated_body(free, p, kick, drift, nsteps, w, e, d, fresh, counters, turns)


@njit(cache=True)
def close_plain(form, p, kick, w, fresh, out, counters):
    """The closed state: w with the pending kick b_s h applied, into out (w unchanged)."""
    for i in range(w.shape[0]):
        out[i] = w[i]
    if fresh[0] == 0:
        flow_b(form, kick[kick.shape[0] - 1], out, p)
        counters[C_EVALS] += 1
        counters[C_FORCE_EVALS] += 1


@njit(cache=True)
def close_compensated(form, p, kick, w, e, d, fresh, out, counters):
    """The closed state of a compensated run, rounded once: w + (e + d)."""
    n = w.shape[0]
    if fresh[0] == 0:
        increment_b(form, kick[kick.shape[0] - 1], w, p, d)
        counters[C_EVALS] += 1
        counters[C_FORCE_EVALS] += 1
    else:
        for i in range(n):
            d[i] = 0.0
    for i in range(n):
        out[i] = w[i] + (e[i] + d[i])
