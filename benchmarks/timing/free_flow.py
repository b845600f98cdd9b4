"""The cost of the exact asymmetric free flow against the composed one it replaced.

    python benchmarks/timing/free_flow.py [--steps N] [--rounds R]

On an asymmetric heavy body: ns per free flow (models/flows.py free_body against
free_body_composed) and ns per step of `leapfrog` and `leapfrog-kl6` against their `-composed`
twins, interleaved round by round in one process, best of R rounds, with the CPU named. Also the
cold compile time of the exact free flow's kernels, in a fresh process with an empty numba cache.
"""

from __future__ import annotations

import argparse
import os
import platform
import subprocess
import sys
import tempfile
import time

import numpy as np

from topdrift.integrators import get
from topdrift.models import RigidBody, body_state
from topdrift.models.flows import free_body, free_body_composed

BODY = RigidBody(1.0, (0.05, 0.046, 0.02), com=(0.01, -0.005, 0.1))
START = (0.3, 0.9, 0.2, 1.0, 0.5, 40.0)


def cpu() -> str:
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as f:
            for line in f:
                if line.startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def per_flow(flow, n: int) -> float:
    p = BODY.params()
    y = body_state(BODY, *START)
    t = time.perf_counter()
    for _ in range(n):
        flow(1e-3, y, p)
    return (time.perf_counter() - t) / n * 1e9


def per_step(name: str, n: int) -> float:
    y0 = body_state(BODY, *START)
    st = get(name).start(1, BODY.params(), 0.0, y0, {"step": 1e-3})
    t = time.perf_counter()
    st.advance_to(n * 1e-3)
    return (time.perf_counter() - t) / n * 1e9


COLD = """
import time
t = time.perf_counter()
import numpy as np
from topdrift.models.free_asymmetric import free_asymmetric
y = np.array([1.0, 0, 0, 0, 0.3, 0.1, 0.9]); p = np.array([1.0, 2, 3, 1, 0.5, 1 / 3, 0, 0, 0])
t0 = time.perf_counter()
free_asymmetric(0.1, y, p)
print(time.perf_counter() - t0)
"""


def cold_compile() -> float:
    with tempfile.TemporaryDirectory() as cache:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache)
        out = subprocess.run(
            [sys.executable, "-c", COLD], env=env, capture_output=True, text=True, check=True
        )
        return float(out.stdout.strip())


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--steps", type=int, default=200_000)
    ap.add_argument("--rounds", type=int, default=5)
    args = ap.parse_args()
    flows = {"free flow, exact": free_body, "free flow, composed": free_body_composed}
    steps = ["leapfrog", "leapfrog-composed", "leapfrog-kl6", "leapfrog-kl6-composed"]
    per_flow(free_body, 10)
    per_flow(free_body_composed, 10)
    for name in steps:
        per_step(name, 10)
    best: dict[str, float] = {}
    for _ in range(args.rounds):
        for label, flow in flows.items():
            best[label] = min(best.get(label, np.inf), per_flow(flow, args.steps))
        for name in steps:
            best[name] = min(best.get(name, np.inf), per_step(name, args.steps // 4))
    print(f"CPU: {cpu()}; best of {args.rounds} interleaved rounds")
    for label, ns in best.items():
        print(f"  {label:24s} {ns:8.1f} ns")
    ratios = ", ".join(
        f"{a} {best[a] / best[b]:.2f}"
        for a, b in (
            ("free flow, exact", "free flow, composed"),
            ("leapfrog", "leapfrog-composed"),
            ("leapfrog-kl6", "leapfrog-kl6-composed"),
        )
    )
    print(f"  ratio exact / composed: {ratios}")
    print(f"cold compile of the exact free flow's kernels: {cold_compile():.2f} s")


if __name__ == "__main__":
    main()
