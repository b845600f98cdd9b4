"""Stopping on SIGINT and SIGTERM at any stage of any command, with a line saying what was done.

Two modes, because stopping is safe at any moment except in the middle of a write:

- `raising()`: the command line's mode around every command. A signal raises `Interrupted` in
  the main thread at its next bytecode (a compiled kernel returns first: the runner and the
  round-off study advance long intervals in pieces of a bounded number of steps so that this
  comes within a second). Reading, sizing, planning and computing in memory are stopped this
  way; nothing is lost because nothing is being written. `Interrupted` is a BaseException, like
  KeyboardInterrupt, so that no `except Exception` that stands for "one run failed" takes a stop
  for a failure.
- `deferred()`: around a loop that writes a results file. A signal only sets a `StopFlag`; the
  loop looks at it between samples and between runs and stops at the next point where the file
  is consistent (HDF5 is never left half way through a write), and the command then says what
  it finished and what is left.

The first signal counts; later ones while a deferred stop is under way are ignored (SIGKILL
always ends a process, and the file stays readable up to its last flush).

One place may not be interrupted even while nothing is written: numba compiling (or loading) a
kernel. LLVM calls back into Python there, and an exception raised in such a callback is
swallowed and leaves numba half way (measured: "no compiled object yet for <Library ...>", a
crash). So a signal that lands while numba's or llvmlite's code is on the stack is held, and
looked at again every RECHECK_S (SIGALRM) until the compiler has returned; then it stops the
command as any other. A cold compile can take seconds; a cached kernel loads in about 0.1 s.
"""

from __future__ import annotations

import contextlib
import os
import signal
import threading
from dataclasses import dataclass

SIGNALS = (signal.SIGINT, signal.SIGTERM)
# 128 + the signal number, as shells report a process ended by it.
EXIT_STATUS = {signal.SIGINT: 130, signal.SIGTERM: 143}


def signal_name(signum: int) -> str:
    try:
        return signal.Signals(signum).name
    except ValueError:
        return f"signal {signum}"


def exit_status(signum: int) -> int:
    return EXIT_STATUS.get(signum, 130)


@dataclass
class StopFlag:
    """Set by a deferred signal handler (or by a test); loops that write look at it."""

    signum: int = 0

    @property
    def requested(self) -> bool:
        return self.signum != 0

    @property
    def exit_status(self) -> int:
        return exit_status(self.signum)

    @property
    def name(self) -> str:
        return signal_name(self.signum)


class Interrupted(BaseException):  # noqa: N818 - a stop, not an error
    """A stop asked for by a signal; `detail` says what the command had done and kept."""

    def __init__(self, signum: int, detail: str = ""):
        super().__init__(signum, detail)
        self.signum = signum
        self.detail = detail

    def saying(self, detail: str) -> Interrupted:
        """The same stop, with what was done; an inner, more precise detail is kept."""
        return self if self.detail else Interrupted(self.signum, detail)

    @property
    def exit_status(self) -> int:
        return exit_status(self.signum)

    @property
    def name(self) -> str:
        return signal_name(self.signum)


def _in_main_thread() -> bool:
    # Python delivers signals to the main thread only, and only it may install handlers.
    return threading.current_thread() is threading.main_thread()


@contextlib.contextmanager
def _handlers(handler):
    if not _in_main_thread():
        yield
        return
    old = {s: signal.signal(s, handler) for s in SIGNALS}
    try:
        yield
    finally:
        for s, h in old.items():
            signal.signal(s, h)


# Seconds between two looks at a signal held while the compiler runs.
RECHECK_S = 0.05
# Source folders of the code a signal must not interrupt (see the module docstring).
_COMPILER = (f"{os.sep}numba{os.sep}", f"{os.sep}llvmlite{os.sep}")
_held = {"signum": 0}


def _in_compiler(frame) -> bool:
    while frame is not None:
        name = frame.f_code.co_filename
        if any(part in name for part in _COMPILER):
            return True
        frame = frame.f_back
    return False


def _raise(signum, frame):
    if _in_compiler(frame):
        _held["signum"] = _held["signum"] or signum
        signal.setitimer(signal.ITIMER_REAL, RECHECK_S)
        return
    _held["signum"] = 0
    raise Interrupted(signum)


def _recheck(_signum, frame):
    if _held["signum"]:
        _raise(_held["signum"], frame)


@contextlib.contextmanager
def raising():
    """Context manager: SIGINT and SIGTERM raise Interrupted (see the module docstring)."""
    if not _in_main_thread():
        yield
        return
    old_alarm = signal.signal(signal.SIGALRM, _recheck)
    try:
        with _handlers(_raise):
            yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old_alarm)
        _held["signum"] = 0


@contextlib.contextmanager
def deferred(stop: StopFlag | None = None):
    """Context manager yielding a StopFlag that SIGINT and SIGTERM set instead of raising."""
    stop = stop if stop is not None else StopFlag()
    if _held["signum"]:  # a signal held while the compiler ran: it asks this loop to stop
        stop.signum = _held["signum"]
        _held["signum"] = 0

    def on_signal(signum, _frame):
        if not stop.requested:
            stop.signum = signum

    with _handlers(on_signal):
        yield stop


def check(stop: StopFlag | None) -> None:
    """Raise Interrupted when a stop was asked for (for loops that plan under `deferred`)."""
    if stop is not None and stop.requested:
        raise Interrupted(stop.signum)
