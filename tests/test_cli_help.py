"""Every subcommand's --help prints its usage and options as text: argparse formats a help
string with % (a bare % in one once printed the option's whole internal dict instead)."""

import contextlib
import io

import pytest

from topdrift.benchmarks.cli.entry import build_parser


def commands():
    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    return sorted(sub.choices)


@pytest.mark.parametrize("command", commands())
def test_help_prints_plain_text(command):
    out = io.StringIO()
    with contextlib.redirect_stdout(out), pytest.raises(SystemExit) as stop:
        build_parser().parse_args([command, "--help"])
    assert stop.value.code == 0
    text = out.getvalue()
    assert text.startswith("usage: ") and command in text.splitlines()[0]
    assert "option_strings" not in text and "'dest':" not in text
