"""A 10^9-step leapfrog run through `topdrift run`, in constant memory, and what sampling and
storing add over the bare kernel.

    python benchmarks/timing/billion_steps.py [--steps 1e9] [--samples 10001]

1. `topdrift run looping-nutation --method leapfrog --form euler` in a child process for the
   given number of steps with the given samples: status, steps, peak resident size of the child;
   then the same with a tenth of the steps, to show that memory does not grow with the horizon.
2. In this process, the same plan executed into a fresh HDF5 file against the bare kernel (one
   advance_to over the whole horizon), interleaved: the ratio runner / bare. Target <= 1.05.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

CASE = "looping-nutation"
METHOD = "leapfrog"
STEP = 1e-5  # the sample interval is a whole number of these for the horizons below


def cli_run(steps: int, samples: int, out: Path) -> dict:
    horizon = steps * STEP
    cmd = [
        sys.executable,
        "-m",
        "topdrift.benchmarks.cli.entry",
        "run",
        CASE,
        "--method",
        METHOD,
        "--form",
        "euler",
        "--step",
        repr(STEP),
        "--horizon",
        repr(horizon),
        "--samples",
        str(samples),
        "--out",
        str(out),
        "--json",
        "--force",
    ]
    t0 = time.perf_counter()
    # A fresh child each time, so that ru_maxrss of the children is this run's peak.
    code = (
        "import resource, subprocess, sys, json;"
        "r = subprocess.run(sys.argv[1:], capture_output=True, text=True);"
        "print(json.dumps({'rc': r.returncode, 'out': r.stdout, 'err': r.stderr[-2000:],"
        "'maxrss_kb': resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss}))"
    )
    r = subprocess.run([sys.executable, "-c", code, *cmd], capture_output=True, text=True)
    wall = time.perf_counter() - t0
    res = json.loads(r.stdout)
    if res["rc"] not in (0, 1):
        raise SystemExit(f"topdrift run failed: {res['err']}")
    run = json.loads(res["out"])["runs"][0]
    return {
        "steps": run["metrics"]["steps"],
        "status": run["status"],
        "kernel_s": run["metrics"]["wall_s"],
        "process_s": wall,
        "peak_rss_mb": res["maxrss_kb"] / 1024.0,
    }


def overhead(steps: int, samples: int) -> dict:
    from topdrift.benchmarks.cases.library import load_case
    from topdrift.benchmarks.run.runner import execute, plan_run
    from topdrift.benchmarks.store import writer as store

    plan = plan_run(
        load_case(CASE), METHOD, step=STEP, form="euler", horizon=steps * STEP, samples=samples
    )
    with tempfile.TemporaryDirectory() as d:
        s = plan.method.start(
            plan.form_code, plan.params.copy(), 0.0, plan.y0.copy(), dict(plan.stepper_settings)
        )
        t0 = time.perf_counter()
        s.advance_to(plan.horizon)
        bare = time.perf_counter() - t0
        f = store.open_writer(Path(d) / "runs.h5")
        try:
            t0 = time.perf_counter()
            r = execute(plan, f)
            full = time.perf_counter() - t0
        finally:
            f.close()
    return {"bare_s": bare, "runner_s": full, "ratio": full / bare, "status": r.status}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--steps", type=float, default=1e9)
    ap.add_argument("--samples", type=int, default=10001)
    args = ap.parse_args(argv)
    steps = int(args.steps)
    with tempfile.TemporaryDirectory() as d:
        big = cli_run(steps, args.samples, Path(d) / "big.h5")
        small = cli_run(steps // 10, args.samples, Path(d) / "small.h5")
    print(f"topdrift run {CASE} --method {METHOD} --step {STEP:g}, {args.samples} samples")
    for label, r in (("full", big), ("tenth", small)):
        print(
            f"  {label:5s}: {r['steps']:>11d} steps, {r['status']}, kernel {r['kernel_s']:.1f} s, "
            f"process {r['process_s']:.1f} s, peak RSS {r['peak_rss_mb']:.0f} MB"
        )
    o = overhead(steps, args.samples)
    print(
        f"sampling and storing: runner {o['runner_s']:.2f} s against bare kernel "
        f"{o['bare_s']:.2f} s: ratio {o['ratio']:.3f} (target <= 1.05)"
    )
    print(
        f"memory: {big['peak_rss_mb']:.0f} MB at {steps:g} steps, {small['peak_rss_mb']:.0f} MB "
        f"at {steps // 10:g}"
    )
    return 0 if o["ratio"] <= 1.05 and big["status"] == "ok" else 1


if __name__ == "__main__":
    os.environ.setdefault("PYTHONUNBUFFERED", "1")
    sys.exit(main())
