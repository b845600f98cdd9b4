"""Start-up: the cold compile time of every method's kernels, and the time a `topdrift run`
takes to its first sample with the compile cache warm.

    python benchmarks/timing/startup.py [--methods NAME ...]

Each method runs `topdrift run looping-nutation` over one sample interval in a fresh process,
first with an empty numba cache (NUMBA_CACHE_DIR pointing at a new folder: everything compiles),
then again with that cache warm. The difference is the method's compile time; the warm time is
the whole process, imports included, which bounds the time to the first sample. Target: warm
under 2 s.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time

TARGET_S = 2.0
DEFAULT = (
    "leapfrog",
    "leapfrog-kl8",
    "leapfrog-kahan",
    "rk4",
    "rk45",
    "dop853",
    "gauss4",
    "gauss6",
    "scipy-dop853",
)


def once(method: str, control: str, cache: str, out: str) -> float:
    setting = ["--step", "1e-3"] if control == "step" else ["--rtol", "1e-8"]
    cmd = [
        sys.executable,
        "-m",
        "topdrift.benchmarks.cli",
        "run",
        "looping-nutation",
        "--method",
        method,
        *setting,
        "--horizon",
        "0.01",
        "--samples",
        "2",
        "--out",
        out,
        "--force",
    ]
    env = dict(os.environ, NUMBA_CACHE_DIR=cache)
    t0 = time.perf_counter()
    r = subprocess.run(cmd, env=env, capture_output=True, text=True)
    el = time.perf_counter() - t0
    if r.returncode != 0:
        raise SystemExit(f"{method}: {r.stderr.strip()}")
    return el


def main(argv=None) -> int:
    from topdrift.integrators import get

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--methods", nargs="+", default=list(DEFAULT))
    args = ap.parse_args(argv)
    worst = 0.0
    print(f"{'method':16s} {'cold s':>8s} {'warm s':>8s} {'compile s':>10s}")
    with tempfile.TemporaryDirectory() as d:
        for m in args.methods:
            control = get(m).info.control
            cache = os.path.join(d, f"cache-{m}")  # each method compiles alone, from nothing
            out = os.path.join(d, f"{m}.h5")
            cold = once(m, control, cache, out)
            warm = min(once(m, control, cache, out) for _ in range(3))
            worst = max(worst, warm)
            print(f"{m:16s} {cold:8.2f} {warm:8.2f} {cold - warm:10.2f}")
    verdict = "meets" if worst <= TARGET_S else "MISSES"
    print(f"slowest warm start {worst:.2f} s: {verdict} the target of {TARGET_S} s")
    return 0 if worst <= TARGET_S else 1


if __name__ == "__main__":
    sys.exit(main())
