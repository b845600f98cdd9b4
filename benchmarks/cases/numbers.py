"""The checks every number from outside goes through: command-line options, sweep files and the
baseline file keep to the range case files keep to (0, or a magnitude from SMALLEST to LARGEST,
finite; see schema.py for why), and counts are whole numbers within stated limits.

Each check names what it read (an option such as `--horizon`, or `FILE: key`) and raises one
UserError line; none lets an infinity, a NaN or a 1e30-step count through to the code that
would overflow, divide by it or loop over it.
"""

from __future__ import annotations

import math

from topdrift.benchmarks.cases.schema import LARGEST, SMALLEST
from topdrift.benchmarks.errors import UserError

_RANGE = f"({SMALLEST:g} to {LARGEST:g} in SI units)"


def _as_float(label: str, v) -> float:
    if isinstance(v, bool):
        raise UserError(f"{label}: expected a number, got {v!r}")
    try:
        return float(v)
    except (TypeError, ValueError, OverflowError):
        raise UserError(f"{label}: expected a number, got {v!r}") from None


def positive(label: str, v) -> float:
    """A finite number > 0 in the range topdrift computes with."""
    x = _as_float(label, v)
    if not (math.isfinite(x) and x > 0.0):
        raise UserError(f"{label}: must be a positive finite number, got {v!r}")
    if not SMALLEST <= x <= LARGEST:
        raise UserError(f"{label}: {x:g} is outside the range topdrift computes with {_RANGE}")
    return x


def non_negative(label: str, v) -> float:
    """0, or a positive number as `positive` takes it."""
    x = _as_float(label, v)
    if x == 0.0:
        return 0.0
    if not (math.isfinite(x) and x > 0.0):
        raise UserError(f"{label}: must be zero or a positive finite number, got {v!r}")
    return positive(label, x)


def _count(x: float) -> str:
    """A count as people write it: digits up to a billion, then 1e+12."""
    return str(int(x)) if x == math.floor(x) and abs(x) < 1e9 else f"{x:g}"


def whole(label: str, v, lo: int, hi: float, what: str = "a whole number") -> int:
    """An integer (or a float with an integer value, as 1e7 is) from lo to hi inclusive."""
    x = _as_float(label, v)
    span = f"from {_count(lo)} to {_count(hi)}"
    if not math.isfinite(x) or x != math.floor(x):
        raise UserError(f"{label}: need {what} {span}, got {v!r}")
    if not lo <= x <= hi:
        raise UserError(f"{label}: need {what} {span}, got {_count(x)}")
    return int(x)
