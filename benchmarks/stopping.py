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
command as any other. A signal that lands in a finalizer (a `__del__` or a weakref callback,
run whenever an object is freed) is held the same way: Python would print the exception as
"ignored" and go on. A cold compile can take seconds (measured: 1.3 to 16 s from the signal to
the end of the process, benchmarks/timing/stop_latency.py), so while `raising()` is in force
the main thread does not compile at all: numba's `Dispatcher.compile` is wrapped so that a
compile (or a cache load) asked for by the main thread runs in a helper thread while the main
thread waits in short joins, where a signal raises at once. The compile left behind runs on
(a daemon thread: the program ends without it); numba's own state stays whole because its
code is never interrupted, and its cache files are written to a temporary name and renamed.
"""

from __future__ import annotations

import contextlib
import importlib.abc
import os
import signal
import sys
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


# Where Python swallows an exception ("Exception ignored in ...") and goes on: a __del__ method
# and a weakref callback (weakref.py's own: WeakValueDictionary's removal, finalize). Measured:
# a SIGTERM landing in WeakValueDictionary's removal during pick was lost and pick ran on for
# 21 s to exit 0.
_SWALLOWING_FILE = f"{os.sep}weakref.py"


def _in_compiler(frame) -> bool:
    while frame is not None:
        if frame.f_code is _compile_in_thread.__code__:  # the compiler runs in another thread
            return False
        name = frame.f_code.co_filename
        if any(part in name for part in _COMPILER):
            return True
        frame = frame.f_back
    return False


def _in_swallowing_call(frame) -> bool:
    while frame is not None:
        code = frame.f_code
        if code.co_name == "__del__" or code.co_filename.endswith(_SWALLOWING_FILE):
            return True
        frame = frame.f_back
    return False


def _raise(signum, frame):
    if _in_compiler(frame) or _in_swallowing_call(frame):
        _held["signum"] = _held["signum"] or signum
        signal.setitimer(signal.ITIMER_REAL, RECHECK_S)
        return
    _held["signum"] = 0
    raise Interrupted(signum)


def _recheck(_signum, frame):
    if _held["signum"]:
        _raise(_held["signum"], frame)


# numba's own Dispatcher.compile, once wrapped; the wrapper is in force while raising() is.
_compiler = {"original": None, "raising": 0}
_DISPATCHER = "numba.core.dispatcher"


def _compile_in_thread(self, sig):
    """Dispatcher.compile, run in a helper thread when the main thread asks for it under
    raising() (see the module docstring); a nested compile, one in another thread or one
    outside raising() runs as numba's own."""
    original = _compiler["original"]
    from numba.core.compiler_lock import global_compiler_lock

    if not _compiler["raising"] or not _in_main_thread() or global_compiler_lock.is_locked():
        return original(self, sig)
    box = {}

    def work():
        try:
            box["value"] = original(self, sig)
        except BaseException as exc:  # noqa: BLE001 - handed to the main thread as it was
            box["error"] = exc

    helper = threading.Thread(target=work, name="topdrift-compile", daemon=True)
    helper.start()
    while helper.is_alive():
        helper.join(RECHECK_S)  # a signal raises Interrupted here
    if "error" in box:
        raise box["error"]
    return box["value"]


def _wrap_dispatcher(module) -> None:
    cls = module.Dispatcher
    if _compiler["original"] is None:
        _compiler["original"] = cls.compile
        cls.compile = _compile_in_thread


class _WrapOnImport(importlib.abc.MetaPathFinder):
    """Wraps numba's Dispatcher.compile as soon as numba's dispatcher module has been executed
    (numba is imported late, by the command, never before raising() is in force)."""

    def find_spec(self, fullname, path, target=None):
        if fullname != _DISPATCHER:
            return None
        sys.meta_path.remove(self)
        import importlib.util

        spec = importlib.util.find_spec(fullname)
        if spec is None or spec.loader is None:
            return spec
        execute = spec.loader.exec_module

        def exec_module(module):
            execute(module)
            _wrap_dispatcher(module)

        spec.loader.exec_module = exec_module
        return spec


def _wrap_compiler() -> None:
    if _compiler["original"] is not None:
        return
    if _DISPATCHER in sys.modules:
        _wrap_dispatcher(sys.modules[_DISPATCHER])
    elif not any(isinstance(f, _WrapOnImport) for f in sys.meta_path):
        sys.meta_path.insert(0, _WrapOnImport())


@contextlib.contextmanager
def raising():
    """Context manager: SIGINT and SIGTERM raise Interrupted (see the module docstring)."""
    if not _in_main_thread():
        yield
        return
    _wrap_compiler()
    old_alarm = signal.signal(signal.SIGALRM, _recheck)
    _compiler["raising"] += 1
    try:
        with _handlers(_raise):
            yield
    finally:
        _compiler["raising"] -= 1
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
