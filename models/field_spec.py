"""The field a case names, as a value: its kind and its constants, checked. The kernels that
evaluate it are in fields.py; the parameter slots it fills are in body.py."""

from __future__ import annotations

import math
from dataclasses import dataclass

FIELD_UNIFORM = 0
FIELD_GRAVITY_GRADIENT = 1
FIELD_KINDS = ("uniform-gravity", "gravity-gradient")


class FieldError(ValueError):
    """A field description that cannot be; the message names the key."""


@dataclass(frozen=True)
class Field:
    """kind: one of FIELD_KINDS; orbit_rate: the mean motion n (rad/s) of the circular orbit,
    only for the gravity gradient (0.0 for uniform gravity)."""

    kind: str = "uniform-gravity"
    orbit_rate: float = 0.0

    def __post_init__(self) -> None:
        if self.kind not in FIELD_KINDS:
            raise FieldError(
                f"kind: unknown field {self.kind!r}; expected one of {', '.join(FIELD_KINDS)}"
            )
        n = self.orbit_rate
        if isinstance(n, bool) or not isinstance(n, (int, float)):
            raise FieldError(f"orbit_rate: expected a number, got {type(n).__name__}")
        n = float(n)
        if self.kind == "gravity-gradient":
            if not math.isfinite(n) or n <= 0.0:
                raise FieldError(
                    f"orbit_rate: the mean motion of the orbit must be positive and finite, "
                    f"got {n!r}"
                )
        elif n != 0.0:
            raise FieldError("orbit_rate: uniform gravity has no orbit; leave orbit_rate out")
        object.__setattr__(self, "orbit_rate", n)

    @property
    def code(self) -> int:
        return FIELD_KINDS.index(self.kind)

    @property
    def uniform(self) -> bool:
        return self.kind == "uniform-gravity"

    def as_dict(self) -> dict:
        return {"kind": self.kind, "orbit_rate": self.orbit_rate}


UNIFORM_GRAVITY = Field()
