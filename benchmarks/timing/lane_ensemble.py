"""Ensemble throughput in SIMD lanes: 256 members of the demo-like top advanced together by the
lane kernel (integrators/lane_ensemble.py), against the scalar run of the same method, one
thread, per member-step; and the round-off statistics of the two at a long horizon.

    python benchmarks/timing/lane_ensemble.py [--members 256] [--steps 20000] [--rounds 7]
                                              [--horizon-steps 1000000]

Target (one thread): the lanes at least 3x faster per member-step than the scalar single run,
in both forms, for the leapfrog and leapfrog-kl8. Timings are interleaved round by round and
the ratio taken per round; the median is printed with its range and the CPU. Then, at
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
from topdrift.integrators.base import N_COUNTERS
from topdrift.integrators.ensemble import EnsembleStepper
from topdrift.integrators.lane_ensemble import run_lanes
from topdrift.models import RigidBody, body_state, euler_state
from topdrift.models.forms import to_body
from topdrift.models.invariants import invariants_of
from topdrift.models.quaternion import figure_axis

TARGET = 3.0
TOP = RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1))  # a scenario of our own
P = TOP.params()
H = 1e-3


def starts(form: int, n: int) -> np.ndarray:
    make = euler_state if form == 0 else body_state
    return np.array([make(TOP, 0.3, 0.9 + 1e-3 * k / n, 0.2, 1.0, 0.5, 40.0) for k in range(n)])


class Lanes:
    def __init__(self, name: str, form: int, y0: np.ndarray):
        ens = EnsembleStepper(get(name), form, P, 0.0, y0, H)
        n = y0.shape[0]
        self.args = (form, ens.params, ens.kick, ens.drift)
        self.W = np.ascontiguousarray(y0.T)
        self.fresh = np.ones(1, dtype=np.int64)
        self.counters = np.zeros((n, N_COUNTERS), dtype=np.int64)
        self.status = np.zeros(n, dtype=np.int64)
        self.live = np.ones(n, dtype=np.int64)
        self.done = np.zeros(n, dtype=np.int64)

    def run(self, k: int) -> None:
        form, p, kick, drift = self.args
        run_lanes(
            form, p, kick, drift, k, self.W, self.fresh, self.counters, self.status, self.live,
            self.done,
        )  # fmt: skip


def throughput(name: str, form: int, members: int, steps: int, rounds: int) -> list[float]:
    y0 = starts(form, members)
    method = get(name)
    lanes = Lanes(name, form, y0)
    lanes.run(1)  # compiled before the clock starts
    single = method.start(form, P, 0.0, y0[0], {"step": H})
    single.advance_to(H)
    ratios = []
    for r in range(rounds):
        t0 = time.perf_counter()
        lanes.run(steps)
        t1 = time.perf_counter()
        single.advance_to(single.t + steps * H)
        t2 = time.perf_counter()
        lane_ns = 1e9 * (t1 - t0) / (steps * members)
        scalar_ns = 1e9 * (t2 - t1) / steps
        ratios.append(scalar_ns / lane_ns)
        if r == rounds - 1:
            print(f"  last round: lanes {lane_ns:.2f} ns per member-step, scalar run "
                  f"{scalar_ns:.2f} ns per step")  # fmt: skip
    return ratios


def statistics_at(name: str, form: int, members: int, n: int) -> None:
    y0 = starts(form, members)
    e0 = np.array([invariants_of(form, y, P)["energy"] for y in y0])
    lanes = Lanes(name, form, y0)
    lanes.run(n)
    ens = EnsembleStepper(get(name), form, P, 0.0, y0, H)  # the scalar kernel, member by member
    ens.advance_to(n * H)

    def stats(Y):
        de = np.array([invariants_of(form, y, P)["energy"] for y in Y]) - e0
        axes = np.array([figure_axis(*(to_body(y) if form == 0 else y)[:4]) for y in Y])
        return np.sqrt(np.mean(de**2)), float(np.linalg.norm(axes.std(axis=0)))

    (el, al), (es, as_) = stats(lanes.W.T), stats(ens.W)
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
    worst = float("inf")
    for name in ("leapfrog", "leapfrog-kl8"):
        for form, label in ((0, "euler"), (1, "body")):
            print(f"{name} {label}, {args.members} members, one thread:")
            r = throughput(name, form, args.members, args.steps, args.rounds)
            med = statistics.median(r)
            worst = min(worst, med)
            print(f"  scalar run / lanes per member-step: median {med:.2f} "
                  f"(min {min(r):.2f}, max {max(r):.2f}, {len(r)} rounds)")  # fmt: skip
            statistics_at(name, form, min(args.members, 64), args.horizon_steps)
    verdict = "meets" if worst >= TARGET else "MISSES"
    print(f"smallest speed-up {worst:.2f}: {verdict} the target of {TARGET:g}x")
    return 0 if worst >= TARGET else 1


if __name__ == "__main__":
    sys.exit(main())
