"""Kutta's 3/8 rule, a classical explicit Runge-Kutta method of order 4, as a topdrift method.

W. Kutta, "Beitrag zur naeherungsweisen Integration totaler Differentialgleichungen",
Zeitschrift fuer Mathematik und Physik 46 (1901) 435-453; the tableau as printed in Hairer,
Norsett and Wanner, Solving Ordinary Differential Equations I, sec. II.1 (from memory):

    0   |
    1/3 |  1/3
    2/3 | -1/3   1
    1   |  1    -1    1
    ----+--------------------
        |  1/8   3/8  3/8  1/8

The package holds only the step; topdrift's FixedStepMethod does the rest (settings, the step
grid, counting the right-hand-side calls, snapshots, failures).
"""

from __future__ import annotations

import numpy as np

from topdrift.integrators import FixedStepMethod, MethodInfo


def kutta38_step(f, t: float, y: np.ndarray, h: float) -> np.ndarray:
    """One step of the 3/8 rule from y over h; f(y) is the counted right-hand side (the system
    is autonomous, so t is not needed)."""
    k1 = f(y)
    k2 = f(y + (h / 3.0) * k1)
    k3 = f(y + h * (k2 - k1 / 3.0))
    k4 = f(y + h * (k1 - k2 + k3))
    return y + (h / 8.0) * (k1 + 3.0 * (k2 + k3) + k4)


KUTTA38 = FixedStepMethod(
    MethodInfo(
        name="kutta38",
        family="external",
        order=4,
        symplectic=False,
        forms=("body", "euler"),
        control="step",
        keeps=(),
        compensated=False,
        description="Kutta's 3/8 rule, explicit Runge-Kutta of order 4 (example plug-in)",
        source="Kutta 1901, Z. Math. Phys. 46, 435",
    ),
    kutta38_step,
)


def methods() -> list[FixedStepMethod]:
    """What the entry point `topdrift.integrators` hands to topdrift."""
    return [KUTTA38]
