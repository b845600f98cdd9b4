"""Stop latency: how soon every command of `topdrift --help` ends on SIGINT or SIGTERM, at
several stages, and what it says.

    python benchmarks/timing/stop_latency.py [--only CMD ...] [--no-cold] [--keep DIR]

Each command is started as a fresh process on a workload long enough to be busy (inputs made
once in a temporary folder: a results file of a small sweep, a baseline of a small sweep), and
sent a signal at each stage:

- start-up: 0.3 s after launch, while Python imports numba and the kernels (cache warm);
- cold: 2.5 s after launch with an empty numba cache (NUMBA_CACHE_DIR a new folder), while
  numba compiles the command's kernels;
- early: 1.5 s after launch, cache warm: the first planning or reading;
- mid: 4 s after launch, cache warm: well into the work (SIGINT and SIGTERM);
- busy: 0.5 s after the command printed the line that shows it in its main loop (a run's
  flushed sample, a sweep's first run written, a timing round, a candidate searched), for the
  commands that print one (SIGINT and SIGTERM): a stop while a results file is being written.

The first fraction of a second of a process is the interpreter's own start (site and the
environment's .pth files: about 0.18 s here), before any code of topdrift runs: a SIGINT there
is Python's KeyboardInterrupt and its traceback, a SIGTERM the default action. No program
written in Python can answer there; the start-up stage comes after it.

It measures the time from the signal to the end of the process, the exit status (130 for
SIGINT, 143 for SIGTERM, as shells report 128 + the signal) and the last line on stderr, and
checks that no file was left half written: the shared inputs keep their bytes, a baseline or a
report.md that was there before is there as it was, no figure is a partial PNG, no temporary
file is left beside the outputs, and a results file still opens. A command that ends before its
signal is listed as "finished before the signal": that is no measurement of its latency; so is
one that had done its work when the signal came in its last milliseconds, as it exited (status
0 or 1, its own answer, no stop line: "finished, signal in its exit").

Exit 1 if any latency is over LIMIT_S, any status is not the signal's, any stderr holds a
traceback, or any file check fails. Run it pinned to one core on a shared machine
(`taskset -c 1 python benchmarks/timing/stop_latency.py`); the table names the CPU.
"""

from __future__ import annotations

import argparse
import hashlib
import os
import re
import shutil
import signal
import subprocess
import sys
import tempfile
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

LIMIT_S = 1.0  # the promise: any command stops within a second (issue 11)
WAIT_S = 60.0  # a process that has not ended this long after its signal is killed
STAGES = (  # (name, seconds after launch or after the busy line, cold numba cache, signals)
    ("start-up", 0.5, False, (signal.SIGINT,)),
    ("cold", 2.5, True, (signal.SIGINT,)),
    ("early", 1.5, False, (signal.SIGINT,)),
    ("mid", 4.0, False, (signal.SIGINT, signal.SIGTERM)),
    ("busy", 0.5, False, (signal.SIGINT, signal.SIGTERM)),
)
# The line (stdout or stderr) that shows a command in its main loop, for the busy stage: the
# signal comes the stage's delay after it. Commands without one print nothing until done.
BUSY = {
    "demo": r"^  \S+ \((body|euler)\): ",  # one demo run finished, the next one stepping
    "describe": r": building, ",
    "run": r": flushed sample ",
    "sweep": r"^\[\d+/\d+\] ",
    "pick": r"^  \S+ \((body|euler)\): ",
    "baseline": r"^timing round ",
    "gate": r"^timing round ",
}
BUSY_WAIT_S = 120.0  # the longest a busy line may take to come (a loaded machine)
EXPECTED = {signal.SIGINT: 130, signal.SIGTERM: 143}

SWEEP_TOML = """name = "{name}"
cases = ["looping-nutation", "cusped-release"]
methods = ["leapfrog", "rk4"]
horizon = {horizon}
samples = 201
steps = "auto"
rungs = {rungs}
max_steps = 2e6
"""


def cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    import platform

    return platform.processor() or platform.machine()


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest() if path.is_file() else "missing"


def topdrift(*args: str) -> list[str]:
    return [sys.executable, "-m", "topdrift.benchmarks.cli.entry", *args]


def setup(root: Path) -> dict:
    """The shared inputs: a results file of a small sweep, its report, a baseline."""
    (root / "small.toml").write_text(SWEEP_TOML.format(name="small", horizon=0.5, rungs=2))
    (root / "busy.toml").write_text(SWEEP_TOML.format(name="busy", horizon=400.0, rungs=4))
    # A case with no closed form over ten times the library's horizon: its reference takes
    # tens of seconds to build.
    from topdrift.benchmarks import cases

    text = (Path(cases.__file__).parent / "free-asymmetric.toml").read_text()
    text = re.sub(r"(?m)^horizon = .*$", "horizon = 3000.0", text)
    text = re.sub(r"(?m)^samples = .*$", "samples = 30001", text)
    text = re.sub(r"(?m)^name = .*$", 'name = "long-free-asymmetric"', text)
    (root / "long-free.toml").write_text(text)
    steps = [
        (topdrift("sweep", "small.toml", "--out", "small.h5", "--jobs", "1"), "the results file"),
        (topdrift("report", "small.h5", "--out", "rep"), "its report"),
        (
            topdrift("baseline", "--sweep", "small.toml", "--rounds", "12", "--out", "base.json"),
            "a baseline",
        ),
        # Short versions of the other workloads, so that the warm stages find their kernels
        # compiled in the cache.
        (topdrift("demo", "--out", "warm-demo.h5", "--horizon", "0.05"), "the demo's kernels"),
        (topdrift("pick", "looping-nutation", "--target", "1e-3"), "pick's kernels"),
        (
            topdrift(
                "roundoff",
                "looping-nutation",
                "--method",
                "leapfrog",
                "--step",
                "1e-3",
                "--steps",
                "1000",
            ),
            "the round-off study's kernels",
        ),
        (topdrift("exact", "looping-nutation", "--at", "1"), "the exact solution's kernels"),
        (topdrift("gate", "--baseline", "base.json"), "the gate's kernels"),
        # The gate times as many rounds as its baseline has: one long enough to stop mid-way.
        (
            topdrift("baseline", "--sweep", "small.toml", "--rounds", "100", "--out", "long.json"),
            "a baseline of 100 rounds",
        ),
    ]
    for cmd, what in steps:
        print(f"setting up {what}: {' '.join(cmd[3:])}", flush=True)
        done = subprocess.run(cmd, cwd=root, capture_output=True, text=True)
        if done.returncode not in (0, 1):  # 1: a negative answer (gate, pick), still warm
            raise SystemExit(f"set-up failed ({what}): {done.stderr.strip()[-400:]}")
    return {
        "results": root / "small.h5",
        "report": root / "rep" / "report.md",
        "baseline": root / "base.json",
        "long baseline": root / "long.json",
    }


@dataclass
class Trial:
    argv: list[str]
    env: dict = field(default_factory=dict)
    # Files that must keep their bytes whatever the stop (inputs, a file the command replaces).
    kept: list[Path] = field(default_factory=list)


def workload(command: str, here: Path, inputs: dict) -> Trial:
    """The command on a workload that keeps it busy for well over the latest stage."""
    res = str(inputs["results"])
    if command == "demo":
        return Trial(["demo", "--out", str(here / "demo.h5"), "--horizon", "2000"])
    if command in ("methods", "cases"):
        return Trial([command])
    if command == "describe":  # builds the extended-precision reference, tens of seconds
        return Trial(
            ["describe", str(inputs["results"].parent / "long-free.toml"), "--reference"],
            env={"TOPDRIFT_REFERENCE_CACHE": str(here / "refs")},
        )
    if command == "exact":
        return Trial(["exact", "looping-nutation", "--at", *(str(t) for t in range(1, 40001))])
    if command == "run":
        return Trial(
            [
                "run",
                "looping-nutation",
                "--method",
                "leapfrog",
                "--step",
                "1e-6",
                "--horizon",
                "200",
                "--out",
                str(here / "run.h5"),
            ]
        )
    if command == "summary":
        return Trial(["summary", res])
    if command == "plot":
        return Trial(
            [
                "plot",
                res,
                "--kind",
                "drift",
                "--case",
                "looping-nutation",
                "--out",
                str(here / "drift.png"),
            ]
        )
    if command == "report":  # over a report it wrote before: kept unless the new one is whole
        shutil.copytree(inputs["report"].parent, here / "rep")
        return Trial(["report", res, "--out", str(here / "rep")], kept=[here / "rep" / "report.md"])
    if command == "sweep":
        return Trial(
            [
                "sweep",
                str(inputs["results"].parent / "busy.toml"),
                "--out",
                str(here / "sweep.h5"),
                "--jobs",
                "1",
            ]
        )
    if command == "pick":
        return Trial(["pick", "looping-nutation", "--target", "1e-8"])
    if command == "roundoff":
        return Trial(
            [
                "roundoff",
                "looping-nutation",
                "--method",
                "leapfrog",
                "--step",
                "1e-3",
                "--steps",
                "1e9",
                "--plot",
                str(here / "r.png"),
            ]
        )
    if command == "baseline":  # --force over an existing baseline: kept unless the new is whole
        shutil.copy(inputs["baseline"], here / "base.json")
        return Trial(
            [
                "baseline",
                "--sweep",
                str(inputs["results"].parent / "small.toml"),
                "--rounds",
                "100",
                "--out",
                str(here / "base.json"),
                "--force",
            ],
            kept=[here / "base.json"],
        )
    if command == "gate":
        return Trial(["gate", "--baseline", str(inputs["long baseline"])])
    raise SystemExit(f"no workload for command '{command}'")


def file_problems(here: Path, trial: Trial, before: dict, status: int) -> list[str]:
    """What a stop left half done in the trial's folder."""
    problems = []
    if status != 0:
        problems += [f"{p.name} changed" for p in trial.kept if digest(p) != before[p]]
    for p in here.rglob("*"):
        if p.is_dir():
            continue
        if p.suffix == ".png" and not p.read_bytes().endswith(b"IEND\xaeB`\x82"):
            problems.append(f"{p.name} is a partial PNG")
        if p.name.startswith(".") or p.suffix in (".tmp", ".part"):
            problems.append(f"{p.name} left behind")
        if p.suffix == ".h5":
            import h5py

            try:
                with h5py.File(p, "r"):
                    pass
            except OSError as exc:
                problems.append(f"{p.name} does not open: {exc}")
    return problems


@dataclass
class Row:
    command: str
    stage: str
    signal: str
    latency: float | None  # None: finished before the signal
    status: int
    last: str
    problems: list[str]
    # The command had done its work and the signal came in its last milliseconds, as the
    # process ended: its answer and its status stand (benchmarks/cli/entry.py, _exit_now).
    exiting: bool = False

    @property
    def failed(self) -> bool:
        if self.problems:
            return True
        if self.latency is None:
            return False
        if self.exiting:
            return self.latency > LIMIT_S
        return self.latency > LIMIT_S or self.status != EXPECTED[getattr(signal, self.signal)]


def one(command: str, stage: tuple, sig: int, root: Path, inputs: dict, n: int) -> Row:
    name, delay, cold, _ = stage
    here = root / f"trial-{n:03d}-{command}-{name}"
    here.mkdir()
    trial = workload(command, here, inputs)
    env = dict(os.environ, **trial.env)
    if cold:
        env["NUMBA_CACHE_DIR"] = str(here / "numba-cache")
    watched = [*trial.kept, *inputs.values()]
    before = {p: digest(p) for p in watched}
    lines: list[str] = []
    busy = threading.Event()
    marker = re.compile(BUSY.get(command, r"(?!)"))
    proc = subprocess.Popen(
        topdrift(*trial.argv),
        cwd=here,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )

    def read(stream, keep: bool):
        for line in stream:
            if keep:
                lines.append(line)
            if marker.search(line):
                busy.set()

    readers = [
        threading.Thread(target=read, args=(proc.stdout, False), daemon=True),
        threading.Thread(target=read, args=(proc.stderr, True), daemon=True),
    ]
    for r in readers:
        r.start()
    if name == "busy":
        busy.wait(BUSY_WAIT_S)
    time.sleep(delay)
    latency = None
    if proc.poll() is None:
        t0 = time.monotonic()
        proc.send_signal(sig)
        try:
            proc.wait(timeout=WAIT_S)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        latency = time.monotonic() - t0
    else:
        proc.wait()
    for r in readers:
        r.join(timeout=5)
    problems = file_problems(here, trial, before, proc.returncode)
    problems += [f"input {p.name} changed" for p in inputs.values() if digest(p) != before[p]]
    if any("Traceback" in ln for ln in lines):
        problems.append("traceback on stderr")
    last = lines[-1].strip() if lines else "(nothing on stderr)"
    exiting = (
        latency is not None
        and latency <= LIMIT_S
        and proc.returncode in (0, 1)  # the command's own answer, not a stop's status
        and not any(" stopped by " in ln for ln in lines)
    )
    if latency is not None and not lines and not exiting:
        problems.append("no line on stderr")
    shutil.rmtree(here / "numba-cache", ignore_errors=True)
    sig_name = signal.Signals(sig).name
    return Row(command, name, sig_name, latency, proc.returncode, last, problems, exiting)


def print_row(r: Row) -> None:
    took = "finished before the signal" if r.latency is None else f"{r.latency:6.3f}"
    if r.exiting:
        took = f"finished, signal in its exit {r.latency:.3f}"
    mark = "FAIL" if r.failed else "ok"
    last = r.last if len(r.last) <= 110 else r.last[:107] + "..."
    print(f"{r.command:9s} {r.stage:9s} {r.signal:8s} {took:>8s} {r.status:4d} {mark:4s} {last}")
    for p in r.problems:
        print(f"{'':37s}! {p}")
    sys.stdout.flush()


def main() -> int:
    from topdrift.benchmarks.cli.entry import COMMANDS

    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--only", nargs="+", choices=COMMANDS, help="these commands only")
    ap.add_argument("--stages", nargs="+", choices=[s[0] for s in STAGES], help="these stages")
    ap.add_argument("--keep", metavar="DIR", help="work in DIR and keep it (default: a temp dir)")
    args = ap.parse_args()
    root = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="stop-latency-"))
    root.mkdir(parents=True, exist_ok=True)
    affinity = sorted(os.sched_getaffinity(0))
    print(
        f"CPU: {cpu_model()}; cores this process may use: {affinity}; load average "
        f"{os.getloadavg()[0]:.2f}"
    )
    try:
        inputs = setup(root)
        rows = []
        print(
            f"{'command':9s} {'stage':9s} {'signal':8s} {'latency':>8s} {'exit':>4s} check "
            "last stderr line"
        )
        n = 0
        for command in args.only or COMMANDS:
            for stage in STAGES:
                if args.stages and stage[0] not in args.stages:
                    continue
                if stage[0] == "busy" and command not in BUSY:
                    continue
                for sig in stage[3]:
                    n += 1
                    rows.append(one(command, stage, sig, root, inputs, n))
                    print_row(rows[-1])
    finally:
        if not args.keep:
            shutil.rmtree(root, ignore_errors=True)
    measured = [r.latency for r in rows if r.latency is not None and not r.exiting]
    before = sum(r.latency is None or r.exiting for r in rows)
    failed = [r for r in rows if r.failed]
    print(
        f"{len(measured)} stops measured, largest latency {max(measured, default=0):.3f} s "
        f"(limit {LIMIT_S} s); {before} finished before the signal; {len(failed)} failed"
    )
    return 1 if failed else 0


if __name__ == "__main__":
    raise SystemExit(main())
