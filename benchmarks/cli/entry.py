"""The `topdrift` command line. Each subcommand lives in its own module under
topdrift.benchmarks.cli and exposes `add_parser(subparsers)` and `run(args) -> int`."""

from __future__ import annotations

# Only these two at import time: console() must put its signal handlers in place before
# anything slow is imported (see console).
import signal
import sys

# Subcommand modules, in the order `topdrift --help` lists them.
COMMANDS = (
    "demo",
    "methods",
    "describe",
    "exact",
    "cases",
    "run",
    "summary",
    "plot",
    "report",
    "sweep",
    "pick",
    "roundoff",
    "baseline",
    "gate",
)

# Exit statuses, the same for every command (the table in README.md): 0 done (the gate: no
# regression), 1 done with a negative answer (the gate: a regression; run and sweep: a run did
# not end ok; pick: no method met the target; baseline: not written), 2 bad input, 3 an internal
# error (a bug: one line on stderr, never Python's traceback and status 1, so that a CI job can
# tell a crash from a regression), 130 or the signal's status when interrupted.
EXIT_OK = 0
EXIT_FAILED = 1
EXIT_BAD_INPUT = 2
EXIT_INTERNAL = 3


def package_version() -> str:
    """The installed distribution's version (pyproject.toml), as `topdrift --version` prints it."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("topdrift")
    except PackageNotFoundError:  # run from a source tree that was never installed
        return "unknown (not installed)"


def build_parser():
    import argparse
    import importlib

    class _Parser(argparse.ArgumentParser):
        def error(self, message: str) -> None:  # one line, exit 2, as for every bad input
            sys.stderr.write(f"topdrift: error: {message}\n")
            raise SystemExit(EXIT_BAD_INPUT)

    parser = _Parser(
        prog="topdrift",
        description="Long-run integrator benchmarks for spinning rigid bodies.",
    )
    parser.add_argument("--version", action="version", version=f"topdrift {package_version()}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True
    for name in COMMANDS:
        importlib.import_module(f"topdrift.benchmarks.cli.{name}").add_parser(sub)
    return parser


def _stopped_line(command: str | None, exc) -> str:
    """The line a stop prints. Every stage that writes adds what it finished and kept (the
    `detail`); a stop anywhere else comes before anything was written."""
    detail = exc.detail or "nothing written"
    if command is None:  # before the command line was read: the program was starting
        return f"topdrift stopped by {exc.name} while starting; {detail}"
    return f"topdrift: {command} stopped by {exc.name}: {detail}"


# Set once the command has done all it does: a signal after that changes nothing (console).
_finished = {"done": False}


def main(argv: list[str] | None = None) -> int:
    from topdrift.benchmarks import stopping

    command = None
    _finished["done"] = False
    try:
        # SIGINT and SIGTERM raise from here on, wherever the command is (benchmarks/stopping.py),
        # even while the heavy modules (numba, the kernels) are still being imported; the loops
        # that write switch to a flag for as long as they write.
        with stopping.raising():
            args = build_parser().parse_args(argv)
            command = args.command
            code = _run(args)
            _finished["done"] = True
            return code
    except stopping.Interrupted as exc:
        sys.stderr.write(_stopped_line(command, exc) + "\n")
        return exc.exit_status
    except KeyboardInterrupt:  # a SIGINT before the handlers were in place
        sys.stderr.write(f"topdrift: {command or 'topdrift'} stopped by SIGINT\n")
        return 130


def _run(args) -> int:
    from topdrift.benchmarks.errors import UserError
    from topdrift.integrators import MethodRefused, UnknownMethod
    from topdrift.models import BodyError, SingularAttitude

    try:
        return int(args.func(args) or 0)
    except (UserError, BodyError, SingularAttitude, MethodRefused, UnknownMethod) as exc:
        sys.stderr.write(f"topdrift: error: {exc}\n")
        return EXIT_BAD_INPUT
    except BrokenPipeError:
        return EXIT_OK
    except Exception as exc:  # noqa: BLE001 - every other exception is a bug of ours
        import os
        import traceback

        where = _where(exc)
        sys.stderr.write(
            f"topdrift: internal error: {type(exc).__name__}: {_one_line(exc)}{where} "
            "(a bug; set TOPDRIFT_TRACEBACK=1 for the traceback)\n"
        )
        if os.environ.get("TOPDRIFT_TRACEBACK"):
            traceback.print_exc()
        return EXIT_INTERNAL


def _one_line(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    return text if len(text) <= 300 else text[:297] + "..."


def _where(exc: BaseException) -> str:
    import os
    import traceback

    tb = traceback.extract_tb(exc.__traceback__)
    if not tb:
        return ""
    last = tb[-1]
    return f" at {os.path.basename(last.filename)}:{last.lineno}"


class _StoppedWhileStarting(BaseException):  # noqa: N818 - a stop, not an error
    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = signum


def _stop_while_starting(signum, _frame):
    if _finished["done"]:  # the command has finished: its answer and its status stand
        return
    raise _StoppedWhileStarting(signum)


def _exit_now(code: int) -> None:
    """End the process with `code` without the interpreter's teardown: the command has closed
    its files and written its output. After a command that finished, Python's own exit
    handlers (atexit) still run, with SIGINT and SIGTERM blocked so that a late signal can
    neither cut them short nor end the process by the signal's default action."""
    import atexit
    import os
    import threading

    stopped = code in (128 + signal.SIGINT, 128 + signal.SIGTERM)
    main_thread = threading.main_thread()
    working = [t for t in threading.enumerate() if t is not main_thread and not t.daemon]
    if working and not stopped:
        raise SystemExit(code)  # a thread still working: Python's own exit waits for it
    signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT, signal.SIGTERM})
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (BrokenPipeError, ValueError):  # a closed pipe: nothing more to say
            pass
    if not stopped:  # a stopped command has said what it kept; nothing is left to wait for
        atexit._run_exitfuncs()
    os._exit(code)


def console() -> None:
    """The `topdrift` program: main(), with two things only a whole process needs.

    First, SIGINT and SIGTERM are caught from the first line on: the imports before main() has
    its own handlers in place (numba, the kernels) take a second or more, and a stop there is
    one line too, not a traceback. Second, a quick end after a stop: a command stopped by a
    signal has closed its files and said what it kept by the time main() returns, and the
    interpreter's own teardown (numba's and LLVM's, about a second on a busy machine) would only
    delay the end of the process past the second a stop may take, so it is skipped. It is
    skipped after a command that finished too (measured: 0.3 to 0.75 s, during which a signal
    ended the process by its default action, with no line): a signal that comes once the command
    has finished leaves its status and its output as they are."""
    for s in (signal.SIGINT, signal.SIGTERM):
        signal.signal(s, _stop_while_starting)
    try:
        code = main()
    except _StoppedWhileStarting as exc:
        name = signal.Signals(exc.signum).name
        sys.stderr.write(f"topdrift stopped by {name} while starting; nothing written\n")
        code = 128 + exc.signum
    _exit_now(code)


if __name__ == "__main__":
    console()
