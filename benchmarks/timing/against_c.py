"""Per-step cost of the order-2 splittings against the same algorithm in plain C.

    python benchmarks/timing/against_c.py [--steps N] [--repeats R]

Compiles c_reference/strang.c with the system compiler at -O3 (skips, saying so, where there is
none), runs the Euler-form leapfrog and the body-form Strang splitting for N steps in both, and
prints ns per step and the ratio numba / C, best of R rounds alternating between the two, with
the CPU it ran on. The verdict has two parts: the ratio at most 1.15 in both forms, and the end
states identical (|dy| = 0, the Euler form's whole turns of phi and psi the same): the C code is
the same algorithm, so any difference in the numbers means the comparison is of two different
things.
"""

from __future__ import annotations

import argparse
import ctypes
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from topdrift.benchmarks.gate.machine import fingerprint
from topdrift.integrators import get
from topdrift.models import RigidBody, body_state, euler_state

HERE = Path(__file__).resolve().parent
TARGET = 1.15


def build_c(workdir: Path):
    cc = shutil.which("cc") or shutil.which("gcc") or shutil.which("clang")
    if cc is None:
        return None, "no C compiler on this machine"
    lib = workdir / "libstrang.so"
    cmd = [
        cc,
        "-O3",
        "-shared",
        "-fPIC",
        str(HERE / "c_reference" / "strang.c"),
        "-o",
        str(lib),
        "-lm",
    ]
    r = subprocess.run(cmd, capture_output=True, text=True)
    if r.returncode != 0:
        return None, f"compiling the C reference failed: {r.stderr.strip()}"
    so = ctypes.CDLL(str(lib))
    dp = ctypes.POINTER(ctypes.c_double)
    lp = ctypes.POINTER(ctypes.c_long)
    so.leapfrog_euler.argtypes = [dp, dp, ctypes.c_double, ctypes.c_double, ctypes.c_long, lp]
    so.strang_body.argtypes = [dp, dp, ctypes.c_double, ctypes.c_double, ctypes.c_long]
    for fn in (so.leapfrog_euler, so.strang_body):
        fn.restype = ctypes.c_long
    return so, cmd[0]


def time_pair(form: str, fn, y0, p, h, n, repeats):
    """Best of `repeats` rounds of each, numba and C alternating round by round: this machine's
    speed drifts by a third over seconds (measured: the same numba loop at 41 and 58 ns per step
    minutes apart), so timing one side's rounds after the other's would compare two machines."""
    m = get("leapfrog")
    code = 0 if form == "euler" else 1
    m.start(code, p.copy(), 0.0, y0.copy(), {"step": h}).advance_to(10 * h)  # compile or load
    dp = ctypes.POINTER(ctypes.c_double)
    lp = ctypes.POINTER(ctypes.c_long)
    best_nb = best_c = float("inf")
    for _ in range(repeats):
        s = m.start(code, p.copy(), 0.0, y0.copy(), {"step": h})
        t0 = time.perf_counter()
        s.advance_to(n * h)
        best_nb = min(best_nb, time.perf_counter() - t0)
        y = np.ascontiguousarray(y0.copy())
        turns = np.zeros(2, dtype=np.int64)
        args = (y.ctypes.data_as(dp), p.ctypes.data_as(dp), h, 0.5 * h, n)
        if form == "euler":
            args += (turns.ctypes.data_as(lp),)
        t0 = time.perf_counter()
        done = fn(*args)
        best_c = min(best_c, time.perf_counter() - t0)
        assert done == n, f"C loop stopped at step {done}"
    same_turns = form != "euler" or np.array_equal(np.asarray(s.turns), turns)
    return best_nb / n * 1e9, s.y.copy(), best_c / n * 1e9, y, same_turns


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--steps", type=int, default=2_000_000)
    ap.add_argument("--repeats", type=int, default=25)
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        so, how = build_c(Path(tmp))
        if so is None:
            print(f"skipped: {how}")
            return 0
        top = RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1))
        p = np.ascontiguousarray(top.params())
        start = (0.3, 0.9, 0.2, 1.0, 0.5, 40.0)
        h = 1e-4
        worst = 0.0
        identical = True
        fp = fingerprint()
        print(f"CPU: {fp['cpu']} (family {fp['family']}, model {fp['model']}), "
              f"{fp['cores']} cores, numba {fp['numba']}, LLVM {fp['llvm']}")  # fmt: skip
        print(f"{args.steps} steps, best of {args.repeats}; C built with {how} -O3")
        print(f"{'splitting':24s} {'numba ns':>9s} {'C ns':>9s} {'ratio':>7s}  {'|dy| end':>9s}")
        for form, fn, y0 in (
            ("euler", so.leapfrog_euler, euler_state(top, *start)),
            ("body", so.strang_body, body_state(top, *start)),
        ):
            got = time_pair(form, fn, y0, p, h, args.steps, args.repeats)
            ns_nb, y_nb, ns_c, y_c, same_turns = got
            # The numba stepper hands out the closed state; close the C one the same way.
            label = f"leapfrog ({form} form)"
            ratio = ns_nb / ns_c
            worst = max(worst, ratio)
            diff = _closed_difference(form, y_c, y_nb, p, h)
            identical = identical and diff == 0.0 and same_turns
            turns = "" if form != "euler" else ("  turns equal" if same_turns else "  TURNS DIFFER")
            print(f"{label:24s} {ns_nb:9.1f} {ns_c:9.1f} {ratio:7.2f}  {diff:9.2e}{turns}")
        ok = worst <= TARGET and identical
        print(f"worst ratio {worst:.2f} (target {TARGET}), end states "
              f"{'identical' if identical else 'DIFFERENT'}: "
              f"{'meets' if ok else 'MISSES'} the target")  # fmt: skip
        return 0 if ok else 1


def _closed_difference(form, y_c, y_nb, p, h) -> float:
    from topdrift.models.flows import flow_b

    y = y_c.copy()
    flow_b(0 if form == "euler" else 1, 0.5 * h, y, p)
    return float(np.max(np.abs(y - y_nb)))


if __name__ == "__main__":
    sys.exit(main())
