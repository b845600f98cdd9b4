"""How long the command line takes to refuse work that is too large, from the launch of a fresh
process to its exit, imports included: what a user waits for before the one-line refusal.

    python benchmarks/timing/refusal_time.py [--repeat N]

Timed, each in a fresh process, interleaved round by round:
  version   `topdrift --version` (the floor: Python, the parser, no numba)
  grid      a sweep of 1000 cases x 1000 methods x 1000 steps (10^9 runs), refused from its counts
  starts    `topdrift roundoff demo-wheel --starts 100000000`, refused from its size
Target: every refusal under 1 s on this machine kind (the median over the rounds). The refusals
must not plan a point (tests/test_limits.py checks that without a clock); this script measures
the whole command, which is what the promise is about.
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

TARGET_S = 1.0


def huge_sweep(folder: Path) -> Path:
    names = ", ".join(f'"case-{i}"' for i in range(1000))
    meth = ", ".join('"leapfrog"' for _ in range(1000))
    ladder = ", ".join(f"{1e-3 * (1 + i / 1000):.9g}" for i in range(1000))
    path = folder / "huge.toml"
    path.write_text(f'name = "huge"\ncases = [{names}]\nmethods = [{meth}]\nsteps = [{ladder}]\n')
    return path


def timed(argv: list[str]) -> tuple[float, int, str]:
    t0 = time.perf_counter()
    p = subprocess.run(argv, capture_output=True, text=True)
    return time.perf_counter() - t0, p.returncode, (p.stderr or p.stdout).strip().splitlines()[-1]


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    from topdrift.benchmarks.gate.machine import fingerprint

    fp = fingerprint()
    print(f"CPU: {fp['cpu']} (family {fp['family']}, model {fp['model']}), {fp['cores']} cores")
    exe = [sys.executable, "-m", "topdrift.benchmarks.cli.entry"]
    with tempfile.TemporaryDirectory() as d:
        sweep = huge_sweep(Path(d))
        commands = {
            "version": (exe + ["--version"], 0),
            "grid": (exe + ["sweep", str(sweep), "--out", str(Path(d) / "h.h5")], 2),
            "starts": (
                exe
                + [
                    "roundoff",
                    "demo-wheel",
                    "--method",
                    "leapfrog",
                    "--step",
                    "1e-3",
                    "--starts",
                    "100000000",
                ],
                2,
            ),
        }
        took: dict[str, list[float]] = {k: [] for k in commands}
        last: dict[str, str] = {}
        for _ in range(args.repeat):
            for name, (argv, want) in commands.items():
                t, rc, line = timed(argv)
                if rc != want:
                    print(f"{name}: exit {rc}, expected {want}: {line}")
                    return 1
                took[name].append(t)
                last[name] = line
    worst = 0.0
    for name, ts in took.items():
        med = statistics.median(ts)
        if name != "version":
            worst = max(worst, med)
        print(f"{name:8s} median {med:.3f} s (min {min(ts):.3f}, max {max(ts):.3f})  {last[name]}")
    verdict = "meets" if worst < TARGET_S else "MISSES"
    print(f"slowest refusal {worst:.3f} s: {verdict} the target of {TARGET_S:g} s")
    return 0 if worst < TARGET_S else 1


if __name__ == "__main__":
    sys.exit(main())
