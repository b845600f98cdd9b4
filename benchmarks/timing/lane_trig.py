"""Throughput of the vectorisable sine and cosine (models/lane_trig.py) against libm's, one
thread, in the same loop over an array of angles in (-pi, pi] (what folded angles give).

    python benchmarks/timing/lane_trig.py [--n 65536] [--rounds 21]

The two loops run interleaved, round by round, and the ratio is taken per round; the median is
printed with its range and the CPU. No target of its own: it says what the ensemble kernels can
gain where a libm call is what keeps a step from vectorising.
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np

from topdrift.benchmarks.gate.machine import fingerprint
from topdrift.models.lane_trig import libm_sincos_array, sincos_array


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=65536)
    ap.add_argument("--rounds", type=int, default=21)
    args = ap.parse_args()
    fp = fingerprint()
    print(f"CPU: {fp['cpu']} (family {fp['family']}, model {fp['model']}), flags {fp['flags']}")
    x = np.random.default_rng(1).uniform(-np.pi, np.pi, args.n)
    s, c = np.empty_like(x), np.empty_like(x)
    sincos_array(x, s, c)  # compiled (or loaded from the cache) before the clock starts
    libm_sincos_array(x, s, c)
    lane, libm, ratio = [], [], []
    for _ in range(args.rounds):
        t0 = time.perf_counter()
        sincos_array(x, s, c)
        t1 = time.perf_counter()
        libm_sincos_array(x, s, c)
        t2 = time.perf_counter()
        lane.append(1e9 * (t1 - t0) / args.n)
        libm.append(1e9 * (t2 - t1) / args.n)
        ratio.append((t2 - t1) / (t1 - t0))
    med = statistics.median
    print(f"lane sincos {med(lane):.2f} ns, libm sin + cos {med(libm):.2f} ns per angle")
    print(f"libm / lane: median {med(ratio):.2f} (min {min(ratio):.2f}, max {max(ratio):.2f})")


if __name__ == "__main__":
    main()
