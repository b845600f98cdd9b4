"""Ensembles in SIMD lanes: a splitting method advances a block of members together, one
sub-flow at a time over all of them, so that LLVM vectorises the loop over members.

Layout: structure of arrays, W[i, j] = component i of member j, so that a loop over j reads
and writes each component contiguously. A step is the same merged-kick sequence as
splitting/kernels.py (kick (b_s + b_0) h between steps, the pending kick b_s h applied only to the
closed copies handed out), applied stage by stage: for each sub-flow, every member. The
sub-flows are the scalar twins in models/lane_flows.py, with the vectorisable sine and cosine
of models/lane_trig.py; a member's numbers therefore differ from the scalar kernel's by the
difference of those functions from libm's, about an ulp per call (tests/test_lane_ensemble.py
states how many after one step, and checks the ensemble's statistics at a long horizon).

A member that diverges (non-finite) or leaves its form's domain (the Euler form at the pole)
stops there with its status, as in the scalar kernel: its state is that of the failed step, and
from then on every sub-flow leaves it as it is (a select, not a branch, so the loop stays a
vector loop). Counters are per member, with the scalar kernel's rules.

Covered: plain (not compensated) splittings, the Euler form, and the body form of a symmetric
body (I1 = I2). Anything else stays on the scalar ensemble kernels (ensemble.py);
`lanes_apply` says which.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from topdrift.models.body import (
    P_FIELD,
    P_H1,
    P_H2,
    P_H3,
    P_I1,
    P_I2,
    P_INV1,
    P_INV3,
    P_MGX,
    P_MGY,
    P_MGZ,
)
from topdrift.models.field_spec import FIELD_UNIFORM
from topdrift.models.forms import FORM_BODY, FORM_EULER
from topdrift.models.lane_flows import (
    drift_euler_lane,
    fold_lane,
    free_symmetric_lane,
    kick_body_lane,
    kick_euler_lane,
)

from .base import C_EVALS, C_FORCE_EVALS, C_STEPS, ST_DIVERGED, ST_OK, ST_SINGULAR


def lanes_apply(form: int, p: np.ndarray) -> bool:
    """Whether the lane kernels cover this form and body (else the scalar ensemble is used).
    Their twins of the flows (models/lane_flows.py) know no rotor: a gyrostat takes the scalar
    ensemble, whose flows do; nor any field but uniform gravity (the same)."""
    if p[P_FIELD] != FIELD_UNIFORM:
        return False
    if p[P_H1] != 0.0 or p[P_H2] != 0.0 or p[P_H3] != 0.0:
        return False
    return form == FORM_EULER or (form == FORM_BODY and p[P_I1] == p[P_I2])


@njit(cache=True, inline="always")
def _drift_all(form, h, W, p, live):
    n = W.shape[1]
    inv1, inv3 = p[P_INV1], p[P_INV3]
    if form == FORM_EULER:
        w1, w2, w4, w5 = W[1], W[2], W[4], W[5]
        for j in range(n):
            th, ps = drift_euler_lane(h, w1[j], w2[j], w4[j], w5[j], inv1, inv3)
            keep = live[j] == 0
            w1[j] = w1[j] if keep else th
            w2[j] = w2[j] if keep else ps
    else:
        w0, w1, w2, w3, w4, w5, w6 = W[0], W[1], W[2], W[3], W[4], W[5], W[6]
        for j in range(n):
            q0, q1, q2, q3, m1, m2 = free_symmetric_lane(
                h, w0[j], w1[j], w2[j], w3[j], w4[j], w5[j], w6[j], inv1, inv3
            )
            keep = live[j] == 0
            w0[j] = w0[j] if keep else q0
            w1[j] = w1[j] if keep else q1
            w2[j] = w2[j] if keep else q2
            w3[j] = w3[j] if keep else q3
            w4[j] = w4[j] if keep else m1
            w5[j] = w5[j] if keep else m2


@njit(cache=True, inline="always")
def _kick_all(form, h, W, p, live):
    n = W.shape[1]
    inv1, mgx, mgy, mgz = p[P_INV1], p[P_MGX], p[P_MGY], p[P_MGZ]
    if form == FORM_EULER:
        w0, w1, w2, w3, w4, w5 = W[0], W[1], W[2], W[3], W[4], W[5]
        for j in range(n):
            ph, ps, pt = kick_euler_lane(h, w0[j], w1[j], w2[j], w3[j], w4[j], w5[j], inv1, mgz)
            keep = live[j] == 0
            w0[j] = w0[j] if keep else ph
            w2[j] = w2[j] if keep else ps
            w4[j] = w4[j] if keep else pt
    else:
        w0, w1, w2, w3, w4, w5, w6 = W[0], W[1], W[2], W[3], W[4], W[5], W[6]
        for j in range(n):
            m1, m2, m3 = kick_body_lane(
                h, w0[j], w1[j], w2[j], w3[j], w4[j], w5[j], w6[j], mgx, mgy, mgz
            )
            keep = live[j] == 0
            w4[j] = w4[j] if keep else m1
            w5[j] = w5[j] if keep else m2
            w6[j] = w6[j] if keep else m3


@njit(cache=True, inline="always")
def _check_all(form, W, live, status, done, turns) -> int:
    """After a step: stop the members that failed it, count a good step for the others and,
    in the Euler form, fold their phi and psi by whole turns into turns (2 x members; none
    when it has no columns: the unfolded variant), as the scalar kernel does after a good step.
    Returns how many are still live. turns is float64 here (whole numbers, exact below 2^53):
    adding a double to an int64 needs a conversion that has no vector instruction before
    AVX-512, which kept this loop scalar on AVX2; run_lanes adds them to the int64 turns once
    per call."""
    fold = form == FORM_EULER and turns.shape[1] == W.shape[1]
    n = W.shape[1]
    k = 6 if form == FORM_EULER else 7  # a constant once the form is: the sum unrolls
    alive = 0
    for j in range(n):
        acc = 0.0
        for i in range(k):
            acc += W[i, j]
        bad_value = not math.isfinite(acc)
        th = W[1, j]
        bad_form = form == FORM_EULER and not (th > 0.0 and th < math.pi)
        was = live[j]
        st = ST_DIVERGED if bad_value else (ST_SINGULAR if bad_form else ST_OK)
        status[j] = st if (was != 0 and st != ST_OK) else status[j]
        ok = 1 if (was != 0 and st == ST_OK) else 0
        live[j] = ok
        done[j] += ok
        alive += ok
    if fold:
        w0, w2, tp, ts = W[0], W[2], turns[0], turns[1]
        for j in range(n):
            a, ka = fold_lane(w0[j])
            b, kb = fold_lane(w2[j])
            go = live[j] != 0
            w0[j] = a if go else w0[j]
            w2[j] = b if go else w2[j]
            tp[j] += ka if go else 0.0
            ts[j] += kb if go else 0.0
    return alive


@njit(cache=True, inline="always")
def _lane_steps(form, p, kick, drift, nsteps, W, first, live, status, done, turns):
    s = drift.shape[0]
    wrap = kick[s] + kick[0]
    for _ in range(nsteps):
        _kick_all(form, first, W, p, live)
        first = wrap
        for i in range(s - 1):
            _drift_all(form, drift[i], W, p, live)
            _kick_all(form, kick[i + 1], W, p, live)
        _drift_all(form, drift[s - 1], W, p, live)
        if _check_all(form, W, live, status, done, turns) == 0:
            break


# error_model "numpy": a division by zero gives inf (IEEE 754) instead of raising, a branch to
# Python that would keep every loop with a division from vectorising. The scalar kernels never
# divide by zero either: a state where they would is stopped by the check after its step.
@njit(cache=True, error_model="numpy")
def run_lanes(form, p, kick, drift, nsteps, W, fresh, counters, turns, status, live, done):
    """Advance the open states W (SoA, components x members) by nsteps steps in place. kick
    (s + 1) and drift (s) are the coefficients times the step; fresh[0] = 1 before the first
    step (the opening kick is b_0 h, not the merged one). turns (2 x members, int64): the whole
    turns of phi and psi, Euler form (models/turns.py); with no columns the angles stay
    unfolded. status, live (1 while ok) and done are per member; done is scratch. Counters as
    the scalar kernel: steps taken, and 2 s sub-flows (s of them kicks) per step attempted."""
    if nsteps <= 0:
        return
    s = drift.shape[0]
    first = kick[0] if fresh[0] != 0 else kick[kick.shape[0] - 1] + kick[0]
    fresh[0] = 0
    n = W.shape[1]
    was = np.empty(n, dtype=np.int64)  # once per call, not per step
    for j in range(n):
        done[j] = 0
        was[j] = live[j]
    taken = np.zeros((2, turns.shape[1]))  # the turns of this call, as doubles (see _check_all)
    if form == FORM_EULER:
        _lane_steps(FORM_EULER, p, kick, drift, nsteps, W, first, live, status, done, taken)
    else:
        _lane_steps(FORM_BODY, p, kick, drift, nsteps, W, first, live, status, done, taken)
    for i in range(taken.shape[0]):
        for j in range(taken.shape[1]):
            turns[i, j] += int(taken[i, j])
    for j in range(n):
        attempted = done[j] + (1 if (was[j] != 0 and live[j] == 0) else 0)
        counters[j, C_STEPS] += done[j]
        counters[j, C_EVALS] += 2 * s * attempted
        counters[j, C_FORCE_EVALS] += s * attempted


@njit(cache=True, error_model="numpy")
def close_lanes(form, p, kick, W, fresh, out, counters):
    """The closed states (SoA, components x members) into out: W with the pending kick b_s h
    applied to every member, as the scalar ensemble's close_plain does (a member that stopped
    is closed too, and its closing kick counted; W unchanged)."""
    n = W.shape[1]
    for i in range(W.shape[0]):
        for j in range(n):
            out[i, j] = W[i, j]
    if fresh[0] == 0:
        every = np.ones(n, dtype=np.int64)  # once per sample, not per step
        if form == FORM_EULER:
            _kick_all(FORM_EULER, kick[kick.shape[0] - 1], out, p, every)
        else:
            _kick_all(FORM_BODY, kick[kick.shape[0] - 1], out, p, every)
        for j in range(n):
            counters[j, C_EVALS] += 1
            counters[j, C_FORCE_EVALS] += 1


@njit(cache=True, parallel=True)
def run_lane_blocks(
    form, p, kick, drift, nsteps, W, fresh, counters, turns, status, live, done, out
):
    """run_lanes then close_lanes on each block of members, the blocks spread over the threads:
    W, out (blocks x components x lanes), fresh (blocks x 1), counters (blocks x lanes x
    counters), turns (blocks x 2 x lanes), status, live, done (blocks x lanes). A block is a
    C-contiguous components x lanes array, what run_lanes vectorises over."""
    for k in prange(W.shape[0]):
        run_lanes(
            form, p, kick, drift, nsteps, W[k], fresh[k], counters[k], turns[k], status[k],
            live[k], done[k],
        )  # fmt: skip
        close_lanes(form, p, kick, W[k], fresh[k], out[k], counters[k])
