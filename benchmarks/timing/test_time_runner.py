"""What sampling and storing cost on top of the bare kernel, on a long fixed-step run.

Bare: the same method, the same step, one advance_to from 0 to T (no samples). Runner: the whole
`execute` of the same plan into a fresh HDF5 file (sampling both forms, invariants, the exact
solution, batched writes with checkpoints, the final metrics). Leapfrog is the fastest kernel,
so it shows the overhead at its largest relative size. Target: the runner within 5 % of bare.

    python -m pytest benchmarks/timing/test_time_runner.py -q --benchmark-only -s
    python benchmarks/timing/test_time_runner.py      # the same measurement, printed
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import pytest

from topdrift.benchmarks.cases.library import load_case
from topdrift.benchmarks.run.runner import execute, plan_run
from topdrift.benchmarks.store import writer as store

CASE = "demo-wheel"
METHOD = "leapfrog"
STEP = 1e-4
HORIZON = 2000.0  # 2e7 steps, about 0.7 s of kernel time here
SAMPLES = 601  # the case's own sample count
REPEATS = 7
TARGET = 1.05
# CPU time of this thread, not wall time: the machine is shared, and a neighbour's load would
# otherwise decide the ratio. Everything measured (kernel, sampling, HDF5 compression) runs in it.
CLOCK = time.thread_time


def _plan(form: str):
    return plan_run(load_case(CASE), METHOD, step=STEP, horizon=HORIZON, samples=SAMPLES, form=form)


def bare_seconds(plan) -> float:
    s = plan.method.start(
        plan.form_code, plan.params.copy(), 0.0, plan.y0.copy(), dict(plan.stepper_settings)
    )
    t0 = CLOCK()
    s.advance_to(plan.horizon)
    return CLOCK() - t0


def runner_seconds(plan, folder: Path) -> float:
    f = store.open_writer(folder / f"runs-{time.perf_counter_ns()}.h5")
    try:
        t0 = CLOCK()
        r = execute(plan, f)
        el = CLOCK() - t0
    finally:
        f.close()
    assert r.status == "ok"
    return el


def measure(form: str, repeats: int = REPEATS) -> dict:
    """Best of `repeats` for each, interleaved so that both see the same machine load."""
    plan = _plan(form)
    bare, full = [], []
    with tempfile.TemporaryDirectory() as d:
        for _ in range(repeats):
            bare.append(bare_seconds(plan))
            full.append(runner_seconds(plan, Path(d)))
    b, r = min(bare), min(full)
    return {
        "form": form,
        "steps": round(HORIZON / plan.stepper_settings["step"]),
        "samples": SAMPLES,
        "bare_s": b,
        "runner_s": r,
        "ratio": r / b,
        "us_per_sample": (r - b) * 1e6 / SAMPLES,
    }


def _report(m: dict) -> str:
    return (
        f"{METHOD} {m['form']}: {m['steps']} steps, {m['samples']} samples: bare "
        f"{m['bare_s']:.3f} s CPU, runner {m['runner_s']:.3f} s CPU, ratio {m['ratio']:.4f} "
        f"({m['us_per_sample']:.1f} us per sample)"
    )


@pytest.mark.parametrize("form", ["euler", "body"])
def test_runner_overhead_under_5_percent(benchmark, form):
    m = measure(form)
    print("\n" + _report(m))
    plan = _plan(form)
    with tempfile.TemporaryDirectory() as d:
        benchmark.pedantic(runner_seconds, args=(plan, Path(d)), rounds=1, iterations=1)
    benchmark.extra_info.update(m)
    assert m["ratio"] < TARGET, _report(m)


if __name__ == "__main__":
    for form in ("euler", "body"):
        print(_report(measure(form)))
