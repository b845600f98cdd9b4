"""Ensemble throughput in SIMD lanes: 256 members of the demo-like top advanced together by the
lane kernel (integrators/lane_ensemble.py), against the scalar run of the same method, one
thread, per member-step; and the round-off statistics of the two at a long horizon.

    python benchmarks/timing/lane_ensemble.py [--members 256] [--steps 20000] [--rounds 7]
                                              [--horizon-steps 1000000]

Targets: the ensemble stepper in lanes (the default path of `run --ensemble` for plain
splittings) on one thread at least 3x faster per member-step than the scalar single run, and on
two threads at least 1.8x faster than on one, in both forms, for the leapfrog and leapfrog-kl8.
Timings are interleaved round by round (lanes on one thread, on two, the scalar run) and the
ratios taken per round; the medians are printed with their range and the CPU. Two threads need
two idle cores: on a loaded machine the scaling says nothing. Then, at
--horizon-steps, the energy error RMS and the figure-axis spread over the members, from the lanes
and from a scalar loop over the same starts: they should agree (printed side by side, with their
ratio).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time

import numba
import numpy as np

from topdrift.benchmarks.gate.machine import fingerprint
from topdrift.integrators import get
from topdrift.integrators.ensemble import EnsembleStepper
from topdrift.models import RigidBody, body_state, euler_state
from topdrift.models.forms import to_body
from topdrift.models.invariants import invariants_of
from topdrift.models.quaternion import figure_axis

TARGET = 3.0
TARGET_SCALING = 1.8  # two threads against one, per member-step
TOP = RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1))  # a scenario of our own
P = TOP.params()
H = 1e-3


def starts(form: int, n: int) -> np.ndarray:
    make = euler_state if form == 0 else body_state
    return np.array([make(TOP, 0.3, 0.9 + 1e-3 * k / n, 0.2, 1.0, 0.5, 40.0) for k in range(n)])


def throughput(name: str, form: int, members: int, steps: int, rounds: int) -> dict:
    """Per round, interleaved: the ensemble stepper in lanes on one thread and on two, the
    single scalar run. Returns the per-round ratios (scalar / lanes on one thread, and lanes on
    one thread / lanes on two)."""
    y0 = starts(form, members)
    method = get(name)
    lanes = EnsembleStepper(method, form, P, 0.0, y0, H)
    assert lanes.uses_lanes
    lanes.advance_to(H)  # compiled before the clock starts
    single = method.start(form, P, 0.0, y0[0], {"step": H})
    single.advance_to(H)
    speedup, scaling = [], []
    for r in range(rounds):
        numba.set_num_threads(1)
        t0 = time.perf_counter()
        lanes.advance_to(lanes.t + steps * H)
        t1 = time.perf_counter()
        numba.set_num_threads(2)
        lanes.advance_to(lanes.t + steps * H)
        t2 = time.perf_counter()
        single.advance_to(single.t + steps * H)
        t3 = time.perf_counter()
        one_ns = 1e9 * (t1 - t0) / (steps * members)
        two_ns = 1e9 * (t2 - t1) / (steps * members)
        scalar_ns = 1e9 * (t3 - t2) / steps
        speedup.append(scalar_ns / one_ns)
        scaling.append(one_ns / two_ns)
        if r == rounds - 1:
            print(f"  last round: lanes {one_ns:.2f} ns per member-step on one thread, "
                  f"{two_ns:.2f} on two; scalar run {scalar_ns:.2f} ns per step")  # fmt: skip
    numba.set_num_threads(1)
    return {"speedup": speedup, "scaling": scaling}


def statistics_at(name: str, form: int, members: int, n: int) -> None:
    y0 = starts(form, members)
    e0 = np.array([invariants_of(form, y, P)["energy"] for y in y0])
    lanes = EnsembleStepper(get(name), form, P, 0.0, y0, H)
    lanes.advance_to(n * H)
    # the method's own kernel, member by member
    ens = EnsembleStepper(get(name), form, P, 0.0, y0, H, lanes=False)
    ens.advance_to(n * H)

    def stats(Y):
        de = np.array([invariants_of(form, y, P)["energy"] for y in Y]) - e0
        axes = np.array([figure_axis(*(to_body(y) if form == 0 else y)[:4]) for y in Y])
        return np.sqrt(np.mean(de**2)), float(np.linalg.norm(axes.std(axis=0)))

    (el, al), (es, as_) = stats(lanes.y), stats(ens.y)
    print(f"  at {n:.0e} steps: energy error RMS lanes {el:.3e}, scalar {es:.3e} (ratio "
          f"{el / es:.3f}); axis spread lanes {al:.6e}, scalar {as_:.6e}")  # fmt: skip


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--members", type=int, default=256)
    ap.add_argument("--steps", type=int, default=20_000)
    ap.add_argument("--rounds", type=int, default=7)
    ap.add_argument("--horizon-steps", type=int, default=1_000_000)
    args = ap.parse_args()
    numba.set_num_threads(1)
    fp = fingerprint()
    print(f"CPU: {fp['cpu']} (family {fp['family']}, model {fp['model']}), flags {fp['flags']}")
    worst, worst_scaling = float("inf"), float("inf")
    for name in ("leapfrog", "leapfrog-kl8"):
        for form, label in ((0, "euler"), (1, "body")):
            print(f"{name} {label}, {args.members} members:")
            r = throughput(name, form, args.members, args.steps, args.rounds)
            for key, words in (("speedup", "scalar run / lanes on one thread"),
                               ("scaling", "lanes one thread / two threads")):  # fmt: skip
                v = r[key]
                print(f"  {words}, per member-step: median {statistics.median(v):.2f} "
                      f"(min {min(v):.2f}, max {max(v):.2f}, {len(v)} rounds)")  # fmt: skip
            worst = min(worst, statistics.median(r["speedup"]))
            worst_scaling = min(worst_scaling, statistics.median(r["scaling"]))
            statistics_at(name, form, min(args.members, 64), args.horizon_steps)
    ok = worst >= TARGET and worst_scaling >= TARGET_SCALING
    print(f"smallest speed-up {worst:.2f} (target {TARGET:g}x), smallest two-thread scaling "
          f"{worst_scaling:.2f} (target {TARGET_SCALING:g}x): "
          f"{'meets' if ok else 'MISSES'} the targets")  # fmt: skip
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
