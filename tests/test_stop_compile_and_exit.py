"""Two stops the first round of stopping missed: a signal while numba compiles a kernel (it
waited for the compiler, seconds on a cold cache) and a signal in the last fraction of a second
of a command that had finished (the interpreter's teardown, where it ended the process by the
signal's default action with no line)."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import threading
import time

import pytest

from topdrift.benchmarks import stopping


def _fresh_kernel():
    # Defined anew per call, never cached: its first call compiles in this process.
    from numba import njit

    @njit
    def triangle(n):
        total = 0.0
        for i in range(1, n + 1):
            total += i
        return total

    return triangle


def test_a_signal_while_a_kernel_compiles_stops_at_once_and_the_kernel_stays_whole():
    triangle = _fresh_kernel()
    threading.Timer(0.02, os.kill, (os.getpid(), signal.SIGINT)).start()
    t0 = time.monotonic()
    with pytest.raises(stopping.Interrupted), stopping.raising():
        triangle(1000)
    waited = time.monotonic() - t0
    compiling = [t for t in threading.enumerate() if t.name == "topdrift-compile"]
    # The stop came while the compiler still ran (else this test would show nothing): the
    # compile goes on in its helper thread.
    assert compiling, f"the compile had ended before the stop ({waited:.3f} s)"
    assert waited < 1.0, waited  # generous: the join looks every RECHECK_S = 0.05 s
    for t in compiling:
        t.join(timeout=120)
    # numba's state is whole: the abandoned compile finished and the kernel is right.
    # Gauss's sum 1 + ... + n = n (n + 1) / 2 (common practice).
    assert triangle(1000) == 1000 * 1001 / 2
    assert len(triangle.overloads) == 1


def test_a_compile_outside_raising_runs_in_the_calling_thread():
    triangle = _fresh_kernel()
    before = {t.ident for t in threading.enumerate()}
    assert triangle(10) == 55  # 10 * 11 / 2 (common practice)
    assert not [
        t for t in threading.enumerate() if t.name == "topdrift-compile" and t.ident not in before
    ]


class _SignalsWhenFreed:
    def __init__(self, sig):
        self.sig = sig

    def __del__(self):
        os.kill(os.getpid(), self.sig)
        for _ in range(100_000):  # Python runs the handler here, inside __del__
            pass


def _finalizer_sends(sig):
    os.kill(os.getpid(), sig)
    for _ in range(100_000):  # inside weakref.finalize's call
        pass


class _Freed:
    pass


@pytest.mark.parametrize("where", ["__del__", "weakref.finalize"])
def test_a_signal_in_a_finalizer_is_held_until_it_returns_not_lost(where):
    # Python prints an exception raised in a __del__ or a weakref callback as "ignored" and
    # goes on (the Python reference, "Data model: object.__del__", and weakref.finalize): a stop
    # raised there would be lost and the command would run to its end.
    t0 = time.monotonic()
    with pytest.raises(stopping.Interrupted) as got, stopping.raising():
        if where == "__del__":
            _SignalsWhenFreed(signal.SIGTERM)  # freed at once
        else:
            import weakref

            weakref.finalize(_Freed(), _finalizer_sends, signal.SIGTERM)
        while time.monotonic() - t0 < 5.0:  # the command's own work, where the stop belongs
            pass
    assert got.value.signum == signal.SIGTERM
    assert time.monotonic() - t0 < 1.0  # held RECHECK_S = 0.05 s at a time, not lost


_LATE_SIGNAL = """
import atexit, os, signal, sys, time
sys.argv = ["topdrift", "methods"]
from topdrift.benchmarks.cli import entry

def late():  # a signal in the exit handlers, after the command has finished
    os.kill(os.getpid(), signal.{name})
    time.sleep(0.2)

atexit.register(late)
entry.console()
"""


@pytest.mark.parametrize("sig", ["SIGINT", "SIGTERM"])
def test_a_signal_after_the_command_finished_leaves_its_status_and_output(sig):
    done = subprocess.run(
        [sys.executable, "-c", _LATE_SIGNAL.format(name=sig)],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, (done.returncode, done.stderr)
    assert done.stderr == ""  # no "Exception ignored in atexit", no traceback, no stop line
    assert "leapfrog" in done.stdout  # the command's whole answer is there
