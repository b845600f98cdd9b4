"""The two arithmetics the exact solution's set-up runs in: plain doubles, and mpmath at the
caller's working precision. The start and the roots of the cubic are computed by the same code
in both (exact_start.py, exact_roots.py): in double to classify the motion and to decide the
refusals, in multiprecision for the constants the long-horizon evaluation is built from."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class Arithmetic:
    """The operations the set-up needs, in one arithmetic. `real` takes a double exactly."""

    name: str
    real: Callable[[float], Any]
    sqrt: Callable[[Any], Any]
    sin: Callable[[Any], Any]
    cos: Callable[[Any], Any]
    atan2: Callable[[Any, Any], Any]
    hypot: Callable[[Any, Any], Any]
    isfinite: Callable[[Any], bool]
    inf: Any


DOUBLE = Arithmetic(
    name="double",
    real=float,
    sqrt=math.sqrt,
    sin=math.sin,
    cos=math.cos,
    atan2=math.atan2,
    hypot=math.hypot,
    isfinite=math.isfinite,
    inf=math.inf,
)


def multiprecision() -> Arithmetic:
    """mpmath at whatever working precision is in force when the operations run (imported here,
    not at module load: mpmath costs start-up time that most commands do not need)."""
    import mpmath as mp

    return Arithmetic(
        name="mpmath",
        real=mp.mpf,
        sqrt=mp.sqrt,
        sin=mp.sin,
        cos=mp.cos,
        atan2=mp.atan2,
        hypot=mp.hypot,
        isfinite=mp.isfinite,
        inf=mp.inf,
    )
