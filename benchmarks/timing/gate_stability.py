"""Does the gate's timing half hold? Clean reruns spread over time, and planted slowdowns.

    python benchmarks/timing/gate_stability.py [--runs 10] [--over-minutes 60]
        [--baseline FILE] [--sweep quick] [--out FILE] [--wait-out N]

Records a baseline (or takes the one given), then, `--runs` times spread evenly over
`--over-minutes`, runs three gates, each in a fresh process as CI would:

- clean: the code as it is. Target: every timing's change within +-10 % of the baseline, and
  the gate passes.
- 3x: one method (a different one each time, in turn) does its work three times per step: its
  stepper advances two shadow copies of the same run beside the real one, so the numbers and
  counts stay the same and only the time moves. Target: the gate fails on that timing every time.
- 1.3x: the same method does 1.3 times its work per step (one shadow copy over 30 % of each
  span). Target: the gate fails on it at least 9 times in 10.

The slowdowns are planted from outside the code: the trial process registers the slowed method
under the built-in one's name (`topdrift.integrators.register(..., replace=True)`) and then runs
the gate's own command line in-process. A timing the gate calls "not measurable here" counts as
neither a pass within +-10 % nor a caught slowdown: it is reported, and it misses the targets.

The machine, the baseline's fingerprint and every trial's verdicts are printed and written as
JSON (`--out`, default results/gate_stability.json). The full run (10 runs over an hour) is for a
quiet machine; `--runs 2 --over-minutes 0` is a short check.
"""

from __future__ import annotations

import argparse
import contextlib
import io
import json
import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from topdrift.integrators import C_STEPS

CLEAN_LIMIT = 0.10  # a clean rerun's timing verdict stays within +-10 % of the baseline
PLANTS = (("3x", 3.0, 1.0), ("1.3x", 1.3, 0.9))  # name, work factor, share of runs to fail


# Steps taken by the real runs and by their shadows in this process: the planted work factor,
# counted rather than assumed (for an adaptive method a shadow over 30 % of the span takes about,
# not exactly, 30 % of the steps).
TALLY = {"real": 0, "shadow": 0}


class _Slowed:
    """A stepper that advances shadow copies of its run beside the real one: about `factor`
    times the kernel work per step, the same numbers and counts."""

    def __init__(self, real, shadows, shares, step):
        self.real, self.shadows, self.shares, self.step = real, shadows, shares, step

    def advance_to(self, t_end):
        t0 = self.real.t
        for s, share in zip(self.shadows, self.shares, strict=True):
            span = share * (t_end - t0)
            if self.step:  # a fixed-step run stops on its step grid only
                span = round(span / self.step) * self.step
            if span > 0.0:
                before = int(s.counters[C_STEPS])
                s.advance_to(s.t + span)
                TALLY["shadow"] += int(s.counters[C_STEPS]) - before
        before = int(self.real.counters[C_STEPS])
        status = self.real.advance_to(t_end)
        TALLY["real"] += int(self.real.counters[C_STEPS]) - before
        return status

    def __getattr__(self, name):
        return getattr(self.real, name)


def slowed_method(inner, factor: float):
    from topdrift.integrators import Method

    extra = factor - 1.0
    shares = [1.0] * int(math.floor(extra + 1e-9))
    if extra - len(shares) > 1e-9:
        shares.append(extra - len(shares))

    class Slowed(Method):
        info = inner.info

        def start(self, form, params, t0, y0, settings):
            def one():
                return inner.start(form, params.copy(), t0, y0.copy(), dict(settings))

            return _Slowed(one(), [one() for _ in shares], shares, settings.get("step"))

    return Slowed()


def trial(baseline: str, plant: str | None, factor: float, wait_out: int = 0) -> dict:
    """One gate in this process, the named method slowed by `factor` first."""
    from topdrift.benchmarks.cli.entry import main
    from topdrift.integrators import get, register

    if plant:
        register(slowed_method(get(plant), factor), replace=True)
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf), contextlib.redirect_stderr(io.StringIO()):
        rc = main(["gate", "--baseline", baseline, "--json", "--wait-out", str(wait_out)])
    doc = json.loads(buf.getvalue())
    work = 1.0 + TALLY["shadow"] / TALLY["real"] if TALLY["real"] else None
    return {
        "rc": rc,
        "work_factor": work,
        "timings": doc["timings"],
        "findings": doc["findings"],
        "notes": doc["notes"],
        "reference_ns": doc.get("reference_ns"),
    }


def run_trial(baseline: str, plant: str | None, factor: float, wait_out: int = 0) -> dict:
    cmd = [sys.executable, __file__, "--trial", baseline, "--factor", str(factor)]
    cmd += ["--wait-out", str(wait_out)]
    if plant:
        cmd += ["--plant", plant]
    proc = subprocess.run(cmd, capture_output=True, text=True)
    if proc.returncode != 0:
        raise RuntimeError(f"trial {plant} x{factor} failed: {proc.stderr.strip()[-500:]}")
    return json.loads(proc.stdout)


def record_baseline(sweep: str, where: Path) -> str:
    out = where / "baseline.json"
    proc = subprocess.run(
        [sys.executable, "-m", "topdrift.benchmarks.cli.entry", "baseline", "--sweep", sweep]
        + ["--out", str(out)],
        capture_output=True,
        text=True,
    )
    if proc.returncode != 0:
        raise RuntimeError(f"baseline failed: {proc.stderr.strip()[-500:]}")
    return str(out)


def verdict_of(t: dict) -> str:
    return t["verdict"]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--runs", type=int, default=10)
    ap.add_argument("--over-minutes", type=float, default=60.0)
    ap.add_argument("--baseline", help="a baseline to gate against (default: record one)")
    ap.add_argument("--sweep", default="quick")
    ap.add_argument("--out", default=str(Path("results") / "gate_stability.json"))
    ap.add_argument(
        "--wait-out", type=int, default=0, help="passed to every gate (topdrift gate --wait-out)"
    )
    ap.add_argument("--trial", help=argparse.SUPPRESS)
    ap.add_argument("--plant", help=argparse.SUPPRESS)
    ap.add_argument("--factor", type=float, default=1.0, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.trial:
        print(json.dumps(trial(args.trial, args.plant, args.factor, args.wait_out)))
        return 0

    from topdrift.benchmarks.gate.baseline_file import read_baseline
    from topdrift.benchmarks.gate.machine import fingerprint

    fp = fingerprint()
    print(
        f"machine: {fp['cpu']}, family {fp['family']} model {fp['model']} stepping "
        f"{fp['stepping']}, {fp['cores']} cores, flags {fp['flags']}, LLVM {fp['llvm']} "
        f"({fp['llvm_cpu']}), numba {fp['numba']}",
        flush=True,
    )
    with tempfile.TemporaryDirectory() as tmp:
        baseline = args.baseline or record_baseline(args.sweep, Path(tmp))
        base = read_baseline(Path(baseline))
        methods = [tk for tk, t in base["timings"].items() if t["status"] == "ok"]
        print(f"baseline: {baseline}, {len(methods)} timings: {', '.join(methods)}", flush=True)
        gap = 60.0 * args.over_minutes / max(args.runs - 1, 1)
        start = time.monotonic()
        log = []
        for k in range(args.runs):
            wait = start + k * gap - time.monotonic()
            if wait > 0:
                time.sleep(wait)
            tk = methods[k % len(methods)]
            name = tk.split(" ")[0]
            entry = {"run": k + 1, "at_s": round(time.monotonic() - start, 1), "planted": tk}
            entry["load_1min"] = round(os.getloadavg()[0], 2)  # what else the machine ran
            entry["clean"] = run_trial(baseline, None, 1.0, args.wait_out)
            for label, factor, _ in PLANTS:
                entry[label] = run_trial(baseline, name, factor, args.wait_out)
            log.append(entry)
            print(_line(entry), flush=True)
            # Written after every run: an hour-long study stopped early keeps what it measured.
            _write(Path(args.out), fp, log, _summary(log))
    summary = _summary(log)
    for line in summary["lines"]:
        print(line)
    _write(Path(args.out), fp, log, summary)
    print(f"written to {args.out}")
    return 0 if summary["met"] else 1


def _write(out: Path, fp: dict, log: list[dict], summary: dict) -> None:
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_name(out.name + ".partial")
    tmp.write_text(
        json.dumps({"machine": fp, "runs": log, "summary": summary}, indent=1), encoding="utf-8"
    )
    tmp.replace(out)


def _of(trial_doc: dict, tk: str) -> dict | None:
    return next((t for t in trial_doc["timings"] if t["timing"] == tk), None)


def _line(e: dict) -> str:
    clean = e["clean"]["timings"]
    worst = max(clean, key=lambda t: abs(t["change"] - 1.0), default=None)
    unm = sum(t["verdict"] == "not measurable" for t in clean)
    load = f" (load {e['load_1min']:.1f})" if "load_1min" in e else ""
    parts = [f"run {e['run']} at {e['at_s']:.0f} s{load}: clean rc {e['clean']['rc']}"]
    if worst is not None:  # which timing, and whether its interval saw the noise
        span = ""
        if worst.get("low") is not None:
            span = f" [{worst['low'] - 1.0:+.1%} .. {worst['high'] - 1.0:+.1%}]"
        change = f"{worst['change'] - 1.0:+.1%}{span}"
        parts[-1] += f", worst {worst['timing']} {change} {worst['verdict']}"
    parts[-1] += f", {unm} not measurable"
    for label, _, _ in PLANTS:
        t = _of(e[label], e["planted"])
        got = f"{t['change']:.2f}x {t['verdict']}" if t else "missing"
        work = e[label]["work_factor"]
        planted = f" (work x{work:.3f} counted in steps)" if work else ""
        parts.append(f"{label} on {e['planted']}{planted}: rc {e[label]['rc']}, {got}")
    return "; ".join(parts)


def _summary(log: list[dict]) -> dict:
    n = len(log)
    clean = [t for e in log for t in e["clean"]["timings"]]
    within = sum(abs(t["change"] - 1.0) <= CLEAN_LIMIT for t in clean)
    unm = sum(t["verdict"] == "not measurable" for t in clean)
    passed = sum(e["clean"]["rc"] == 0 for e in log)
    lines = [
        f"clean: {passed}/{n} gates passed; {within}/{len(clean)} timing verdicts within "
        f"+-{CLEAN_LIMIT:.0%} (worst {max((abs(t['change'] - 1) for t in clean), default=0):.1%}"
        f"); {unm} not measurable"
    ]
    met = passed == n and within == len(clean)
    for label, _, share in PLANTS:
        caught = 0
        for e in log:
            t = _of(e[label], e["planted"])
            caught += bool(t and t["verdict"] == "slower" and e[label]["rc"] == 1)
        need = math.ceil(share * n)
        ok = caught >= need
        met = met and ok
        lines.append(
            f"{label}: the gate failed on the slowed method {caught}/{n} times (target at least "
            f"{need}): {'met' if ok else 'MISSED'}"
        )
    lines.append(f"targets {'met' if met else 'MISSED'} over {n} run(s)")
    return {"lines": lines, "met": met}


if __name__ == "__main__":
    raise SystemExit(main())
