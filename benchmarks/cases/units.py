"""Angles and angular rates written with a unit in case files ("70 deg", "600 rpm"), converted
once to SI (rad, rad/s). A bare number is already SI."""

from __future__ import annotations

import math
import re

# Factor to SI. Both tables are part of the case-file contract (docs/case-files.md).
ANGLE_UNITS = {
    "rad": 1.0,
    "mrad": 1e-3,
    "deg": math.pi / 180.0,
    "rev": 2.0 * math.pi,
}
RATE_UNITS = {
    "rad/s": 1.0,
    "deg/s": math.pi / 180.0,
    "rev/s": 2.0 * math.pi,
    "rpm": 2.0 * math.pi / 60.0,
    "rev/min": 2.0 * math.pi / 60.0,
}

# A decimal number, optional exponent, then the unit; spaces between are optional.
_QUANTITY = re.compile(r"^\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-z/]+)\s*$")


class UnitProblem(ValueError):
    """What is wrong with a quantity, without the key (the caller adds it)."""


def to_si(value, kind: str) -> float:
    """A number (SI already) or a string "<number> <unit>" -> float in rad or rad/s.

    kind is "angle" or "rate". Booleans, non-finite numbers and unknown units are refused.
    """
    table, other, other_kind = (
        (ANGLE_UNITS, RATE_UNITS, "rate") if kind == "angle" else (RATE_UNITS, ANGLE_UNITS, "angle")
    )
    if isinstance(value, bool):
        raise UnitProblem(f"expected a number or a string with a unit, got {value!r}")
    if isinstance(value, (int, float)):
        value = float(value)
        if not math.isfinite(value):
            raise UnitProblem(f"must be finite, got {value}")
        return value
    if not isinstance(value, str):
        raise UnitProblem(f"expected a number or a string with a unit, got {type(value).__name__}")
    match = _QUANTITY.match(value)
    if match is None:
        raise UnitProblem(
            f"cannot read {value!r}; write a number (SI) or '<number> <unit>', "
            f"units: {', '.join(table)}"
        )
    number, unit = match.groups()
    if unit in other:
        raise UnitProblem(
            f"'{unit}' is a unit of {other_kind}, not of {kind}; use one of {', '.join(table)}"
        )
    if unit not in table:
        raise UnitProblem(f"unknown unit '{unit}'; use one of {', '.join(table)}")
    result = float(number) * table[unit]
    if not math.isfinite(result):
        raise UnitProblem(f"must be finite, got {value!r}")
    return result
