"""Fixtures shared by the test files: the command line run in this process, the tiny top as a
case file, a method swapped in the registry for one test, a run asked to stop, and the
references' cache directory of the session."""

from __future__ import annotations

import json
import signal

import pytest
from tiny_cases import TOP_TOML, write_case

from topdrift.benchmarks.cli import entry as cli_entry
from topdrift.benchmarks.run.reference_cache import CACHE_ENV
from topdrift.benchmarks.run.runner import StopFlag
from topdrift.integrators import UnknownMethod, get, register, unregister


@pytest.fixture(autouse=True, scope="session")
def reference_cache_of_the_session(tmp_path_factory):
    """Extended-precision references built by the tests go to a directory of the session, not
    to the user's cache (a test that needs its own sets the variable again)."""
    mp = pytest.MonkeyPatch()
    mp.setenv(CACHE_ENV, str(tmp_path_factory.mktemp("reference-cache")))
    yield
    mp.undo()


@pytest.fixture
def command_line(capsys):
    """command_line(*argv) runs `topdrift ARGV` in this process: (exit status, stdout, stderr).
    A refusal by the argument parser (SystemExit) gives its exit status, as a shell sees it."""

    def run(*argv: str) -> tuple[int, str, str]:
        capsys.readouterr()
        try:
            rc = cli_entry.main([str(a) for a in argv])
        except SystemExit as exc:
            rc = exc.code
        cap = capsys.readouterr()
        return rc, cap.out, cap.err

    return run


@pytest.fixture
def command_json(command_line):
    """command_json(*argv) runs `topdrift ARGV --json`: (exit status, the JSON document, stderr)."""

    def run(*argv: str) -> tuple[int, dict, str]:
        rc, out, err = command_line(*argv, "--json")
        return rc, json.loads(out), err

    return run


@pytest.fixture
def top_case(tmp_path):
    """The command-line tests' top (tiny_cases.TOP_TOML) as tmp_path/top.toml."""
    return write_case(tmp_path, "top.toml", TOP_TOML)


@pytest.fixture
def swap_method():
    """swap_method(method) registers a stand-in under its name for this one test; what the name
    held before is registered again at teardown (through the registry's public calls)."""
    held = []

    def swap(method):
        name = method.info.name
        try:
            previous = get(name)
        except UnknownMethod:
            previous = None
        held.append((name, previous))
        register(method, replace=True)
        return method

    yield swap
    for name, previous in reversed(held):
        if previous is None:
            unregister(name)
        else:
            register(previous, replace=True)


class _StopAt:
    """A progress sink that asks the run to stop once it has taken `k` samples."""

    def __init__(self, stop: StopFlag, k: int):
        self.stop, self.k = stop, k

    def begin(self, *_):
        pass

    def flushed(self, *_):
        pass

    def end(self, *_):
        pass

    def update(self, k, _steps):
        if k >= self.k:
            self.stop.signum = signal.SIGINT


@pytest.fixture
def stop_at():
    """stop_at(k) -> (stop flag, progress sink) for execute(): the sink sets the flag, as a
    SIGINT would, once the run has taken k samples."""

    def make(k: int) -> tuple[StopFlag, _StopAt]:
        stop = StopFlag()
        return stop, _StopAt(stop, k)

    return make
