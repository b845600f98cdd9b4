"""The `topdrift` command line. Each subcommand lives in its own module under
topdrift.benchmarks.cli and exposes `add_parser(subparsers)` and `run(args) -> int`."""

from __future__ import annotations

import argparse
import importlib
import os
import sys
import traceback

# Subcommand modules, in the order `topdrift --help` lists them.
COMMANDS = (
    "demo",
    "methods",
    "describe",
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


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # one line, exit 2, as for every bad input
        sys.stderr.write(f"topdrift: error: {message}\n")
        raise SystemExit(EXIT_BAD_INPUT)


def package_version() -> str:
    """The installed distribution's version (pyproject.toml), as `topdrift --version` prints it."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("topdrift")
    except PackageNotFoundError:  # run from a source tree that was never installed
        return "unknown (not installed)"


def build_parser() -> argparse.ArgumentParser:
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


def main(argv: list[str] | None = None) -> int:
    from topdrift.benchmarks.errors import UserError
    from topdrift.integrators import MethodRefused, UnknownMethod
    from topdrift.models import BodyError, SingularAttitude

    args = build_parser().parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except (UserError, BodyError, SingularAttitude, MethodRefused, UnknownMethod) as exc:
        sys.stderr.write(f"topdrift: error: {exc}\n")
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        sys.stderr.write("topdrift: interrupted\n")
        return 130
    except BrokenPipeError:
        return EXIT_OK
    except Exception as exc:  # noqa: BLE001 - every other exception is a bug of ours
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
    tb = traceback.extract_tb(exc.__traceback__)
    if not tb:
        return ""
    last = tb[-1]
    return f" at {os.path.basename(last.filename)}:{last.lineno}"


if __name__ == "__main__":
    raise SystemExit(main())
