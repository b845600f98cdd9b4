"""Ensembles in SIMD lanes (integrators/lane_ensemble.py, models/lane_flows.py) against the scalar
kernels they twin: every lane sub-flow within a few ulps of its in-place original after one
application, whole steps of the leapfrog and an order-8 composition within a few ulps of the
scalar ensemble, the same statuses and counters, and the same round-off statistics over a long
run. The reference is the project's own scalar kernel, which is itself checked against the exact
solution and mpmath elsewhere (test_exact.py, test_compositions.py); what is checked here is
that the lanes do the same arithmetic, up to the sine and cosine (test_lane_trig.py)."""

from __future__ import annotations

import numpy as np
import pytest

from topdrift.integrators import get
from topdrift.integrators.base import (
    C_EVALS,
    C_FORCE_EVALS,
    C_STEPS,
    N_COUNTERS,
    ST_OK,
    ST_SINGULAR,
    MethodRefused,
)
from topdrift.integrators.ensemble import LANE_BLOCK, EnsembleStepper
from topdrift.integrators.lane_ensemble import lanes_apply, run_lanes
from topdrift.models import RigidBody, body_state, euler_state
from topdrift.models.body import P_INV1, P_INV3, P_MGX, P_MGY, P_MGZ
from topdrift.models.flows import drift_euler, free_symmetric, kick_body, kick_euler
from topdrift.models.invariants import invariants_of
from topdrift.models.lane_flows import (
    drift_euler_lane,
    fold_lane,
    free_symmetric_lane,
    kick_body_lane,
    kick_euler_lane,
)

TOP = RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1))
P = TOP.params()


def starts(form, n, spread=1e-4):
    make = euler_state if form == 0 else body_state
    return np.array([make(TOP, 0.3, 0.9 + spread * k, 0.2, 1.0, 0.5, 40.0) for k in range(n)])


def ulps(a, b):
    a, b = np.asarray(a, float), np.asarray(b, float)
    return np.max(np.abs(a - b) / np.spacing(np.maximum(np.abs(a), np.abs(b)) + 1e-300))


def test_each_lane_flow_is_its_scalar_flow_to_a_few_ulps():
    rng = np.random.default_rng(3)
    worst = 0.0
    for _ in range(200):
        h = rng.uniform(1e-4, 1e-2)
        y = starts(0, 1)[0] + rng.normal(0, 0.1, 6)
        ref = y.copy()
        drift_euler(h, ref, P)
        th, ps = drift_euler_lane(h, y[1], y[2], y[4], y[5], P[P_INV1], P[P_INV3])
        assert (th, ps) == (ref[1], ref[2])  # no trigonometry: the same bits
        ref = y.copy()
        kick_euler(h, ref, P)
        got = kick_euler_lane(h, *y, P[P_INV1], P[P_MGZ])
        worst = max(worst, ulps(got, (ref[0], ref[2], ref[4])))
        q = starts(1, 1)[0]
        q[4:] += rng.normal(0, 0.5, 3)
        ref = q.copy()
        kick_body(h, ref, P)
        got = kick_body_lane(h, *q, P[P_MGX], P[P_MGY], P[P_MGZ])
        assert got == tuple(ref[4:])  # no trigonometry: the same bits
        ref = q.copy()
        free_symmetric(h, ref, P)
        got = free_symmetric_lane(h, *q, P[P_INV1], P[P_INV3])
        worst = max(worst, ulps(got, ref[:6]))
    assert worst <= 4.0, worst


def lane_run(name, form, y0, h, nsteps):
    ens = EnsembleStepper(get(name), form, P, 0.0, y0, h, lanes=False)  # for its coefficients
    n = y0.shape[0]
    W = np.ascontiguousarray(y0.T)
    counters = np.zeros((n, N_COUNTERS), dtype=np.int64)
    status = np.zeros(n, dtype=np.int64)
    live = np.ones(n, dtype=np.int64)
    fresh = np.ones(1, dtype=np.int64)
    turns = np.zeros((2, n), dtype=np.int64)
    run_lanes(
        form, ens.params, ens.kick, ens.drift, nsteps, W, fresh, counters, turns, status, live,
        np.zeros(n, dtype=np.int64),
    )  # fmt: skip
    return W.T, counters, status, turns.T


@pytest.mark.parametrize("form", [0, 1])
@pytest.mark.parametrize("name", ["leapfrog", "leapfrog-kl8"])
def test_steps_match_the_scalar_ensemble(name, form):
    y0 = starts(form, 37)  # not a multiple of the vector width: the loop's remainder runs too
    h = 1e-3
    ens = EnsembleStepper(get(name), form, P, 0.0, y0, h, lanes=False)
    ens.advance_to(h)
    W, counters, status, _ = lane_run(name, form, y0, h, 1)
    assert np.all(status == ST_OK)
    assert ulps(W, ens.W) <= 8.0
    ens = EnsembleStepper(get(name), form, P, 0.0, y0, h, lanes=False)
    ens.advance_to(200 * h)
    W, counters, status, turns = lane_run(name, form, y0, h, 200)
    # 200 steps of a top whose nutation amplifies differences: close, not the same bits; the
    # Euler form's angles folded by the same whole turns as the scalar kernel's
    assert np.max(np.abs(W - ens.W)) < 1e-10
    assert np.array_equal(turns, ens.turns)
    if form == 0:
        assert np.all(np.abs(W[:, [0, 2]]) <= np.pi) and np.any(turns != 0)
    assert_same_counts(counters, ens.counters)


def assert_same_counts(lanes, scalar):
    """The scalar ensemble also counts the closing kick of the state it hands out (one
    sub-flow, a kick); the lane kernel advances the open states only."""
    assert np.array_equal(lanes[:, C_STEPS], scalar[:, C_STEPS])
    assert np.array_equal(lanes[:, C_EVALS] + 1, scalar[:, C_EVALS])
    assert np.array_equal(lanes[:, C_FORCE_EVALS] + 1, scalar[:, C_FORCE_EVALS])


def test_a_member_at_the_pole_stops_there_and_the_others_go_on():
    y0 = starts(0, 9)
    # member 4 heads for the pole fast: theta near 0 with p_theta pulling it through
    y0[4, 1] = 2e-3
    y0[4, 4] = -0.5
    h = 1e-3
    ens = EnsembleStepper(get("leapfrog"), 0, P, 0.0, y0, h, lanes=False)
    ens.advance_to(50 * h)
    W, counters, status, _ = lane_run("leapfrog", 0, y0, h, 50)
    assert ens.status[4] == ST_SINGULAR and status[4] == ST_SINGULAR
    assert np.all(np.delete(status, 4) == ST_OK)
    assert_same_counts(counters, ens.counters)  # the same step of failure, the same counts
    assert counters[4, C_STEPS] < 50
    assert counters[4, C_EVALS] == 2 * (counters[4, C_STEPS] + 1)
    assert counters[4, C_FORCE_EVALS] == counters[4, C_STEPS] + 1


@pytest.mark.parametrize("form", [0, 1])
def test_round_off_statistics_match_the_scalar_ensemble(form):
    # Energy error RMS over 64 members after 2e4 leapfrog steps: the same size from lanes and
    # from the scalar kernel (the truncation part is common; round-off differs by member).
    y0 = starts(form, 64, spread=1e-3)
    h, n = 1e-3, 20_000
    e0 = np.array([invariants_of(form, y, P)["energy"] for y in y0])
    ens = EnsembleStepper(get("leapfrog"), form, P, 0.0, y0, h, lanes=False)
    ens.advance_to(n * h)
    W, _, status, _ = lane_run("leapfrog", form, y0, h, n)
    assert np.all(status == ST_OK)
    e_scalar = np.array([invariants_of(form, y, P)["energy"] for y in ens.W]) - e0
    e_lanes = np.array([invariants_of(form, y, P)["energy"] for y in W]) - e0
    rms_s, rms_l = np.sqrt(np.mean(e_scalar**2)), np.sqrt(np.mean(e_lanes**2))
    assert abs(rms_l - rms_s) <= 1e-3 * rms_s, (rms_l, rms_s)


def test_the_lane_fold_is_the_scalar_fold_bit_for_bit():
    from topdrift.models.turns import fold_one

    rng = np.random.default_rng(5)
    angles = np.concatenate(
        [rng.uniform(-40.0, 40.0, 2000), [np.pi, -np.pi, 3.141592653589793, 0.0, -0.0, 1e7]]
    )
    for a in angles:
        y = np.array([a])
        k = np.zeros(1, dtype=np.int64)
        fold_one(y, 0, k, 0)
        r, kk = fold_lane(a)
        assert r == y[0] and int(kk) == k[0], a


def test_which_bodies_and_forms_the_lanes_cover():
    assert lanes_apply(0, P) and lanes_apply(1, P)
    odd = RigidBody(1.0, (0.05, 0.04, 0.02), com=(0.0, 0.0, 0.1)).params()
    assert not lanes_apply(1, odd)


@pytest.mark.parametrize("form", [0, 1])
@pytest.mark.parametrize("name", ["leapfrog", "leapfrog-kl8"])
def test_the_ensemble_stepper_in_lanes_against_member_by_member(name, form):
    # 100 members: a block and a part block of LANE_BLOCK lanes (the padding lanes never read)
    y0 = starts(form, 100)
    h = 1e-3
    lanes = EnsembleStepper(get(name), form, P, 0.0, y0, h)
    scalar = EnsembleStepper(get(name), form, P, 0.0, y0, h, lanes=False)
    assert lanes.uses_lanes and not scalar.uses_lanes and 100 % LANE_BLOCK != 0
    lanes.advance_to(h)
    scalar.advance_to(h)
    assert ulps(lanes.y, scalar.y) <= 8.0  # the closed states after one step
    for t in (0.1, 0.2):
        lanes.advance_to(t)
        scalar.advance_to(t)
    assert np.max(np.abs(lanes.y - scalar.y)) < 1e-10
    assert np.array_equal(lanes.status, scalar.status)
    assert np.array_equal(lanes.counters, scalar.counters)  # closing kicks counted alike
    assert np.array_equal(lanes.turns, scalar.turns)
    if form == 0:
        assert np.any(lanes.turns != 0)


def test_the_ensemble_stepper_in_lanes_stops_a_member_at_the_pole_like_the_scalar_one():
    y0 = starts(0, 70)
    y0[66, 1] = 2e-3  # in the part block
    y0[66, 4] = -0.5
    h = 1e-3
    lanes = EnsembleStepper(get("leapfrog"), 0, P, 0.0, y0, h)
    scalar = EnsembleStepper(get("leapfrog"), 0, P, 0.0, y0, h, lanes=False)
    for t in (0.02, 0.05):
        lanes.advance_to(t)
        scalar.advance_to(t)
    assert lanes.status[66] == ST_SINGULAR and np.array_equal(lanes.status, scalar.status)
    assert np.array_equal(lanes.counters, scalar.counters)


def test_which_methods_the_stepper_takes_lanes_for():
    y0 = starts(1, 4)
    odd = RigidBody(1.0, (0.05, 0.04, 0.02), com=(0.0, 0.0, 0.1)).params()
    for name, params, want in (
        ("leapfrog", P, True),
        ("leapfrog-composed", P, True),  # the symmetric free flow at I1 = I2, as the base
        ("leapfrog-kahan", P, False),  # compensated: no lane kernel
        ("gauss4", P, False),
        ("leapfrog", odd, False),  # the body form of an asymmetric body
    ):
        ens = EnsembleStepper(get(name), 1, params, 0.0, y0, 1e-3)
        assert ens.uses_lanes is want, name
        if not want:
            with pytest.raises(MethodRefused, match="lane kernels cover"):
                EnsembleStepper(get(name), 1, params, 0.0, y0, 1e-3, lanes=True)
