"""The `topdrift` command line. Each subcommand lives in its own module under
topdrift.benchmarks.cli and exposes `add_parser(subparsers)` and `run(args) -> int`."""

from __future__ import annotations

import argparse
import importlib
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

EXIT_OK = 0
EXIT_FAILED = 1
EXIT_BAD_INPUT = 2


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


if __name__ == "__main__":
    raise SystemExit(main())
