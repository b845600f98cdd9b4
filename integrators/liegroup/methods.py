"""Lie-group Runge-Kutta methods at a fixed step, body form: the attitude moves only by
quaternion exponentials (turns), so |q| = 1 by construction, with no renormalisation step.

  lie-rkmk4  Runge-Kutta-Munthe-Kaas, classical RK4 tableau (Munthe-Kaas, BIT 38 (1998) 92).
  lie-cg3    Crouch-Grossman of order 3 (Crouch and Grossman, J. Nonlinear Sci. 3 (1993) 1):
             a = (3/4; 119/216, 17/108), b = (13/51, -2/3, 24/17), c = (0, 3/4, 17/24), the
             coefficients as given by Owren and Marthinsen, BIT 39 (1999) 116 (from memory;
             their order conditions checked in rationals in tests/test_liegroup.py).
  lie-cf4    commutator-free of order 4 (Celledoni, Marthinsen and Owren, Future Gener.
             Comput. Syst. 19 (2003) 341; from memory; local order 5 checked in 40 digits and the
             global order measured in tests/test_liegroup.py).

kernel.py has the equations. None is symplectic (explicit Runge-Kutta methods are not; common
practice). What each keeps (the rule of integrators/base.py; checked in tests/test_keeps.py):
|q| to round-off in all three (a product of unit quaternions), and p_psi on a Lagrange top (every
stage's m3 rate m1 w2 - m2 w1 vanishes there in exact arithmetic, and the turns do not touch
m). None keeps the energy; none keeps anything to the bit.
"""

from __future__ import annotations

from topdrift.integrators.liegroup.kernel import (
    SCHEME_CF4,
    SCHEME_CG3,
    SCHEME_RKMK4,
    liegroup_steps,
)
from topdrift.integrators.scheme_stepper import SchemeMethod

FAMILY = "lie-group-rk"


class LieGroupMethod(SchemeMethod):
    """One of the methods of kernel.py at a fixed step (integrators/scheme_stepper.py)."""

    family = FAMILY
    kernel = staticmethod(liegroup_steps)


METHODS = [
    LieGroupMethod(
        "lie-rkmk4",
        SCHEME_RKMK4,
        4,
        ("norm", "p_psi"),
        "Runge-Kutta-Munthe-Kaas, classical RK4 tableau in the algebra with the dexpinv terms to "
        "u^2; attitude by quaternion exponentials; order 4, 4 evaluations a step",
        "Munthe-Kaas, BIT 38 (1998) 92",
    ),
    LieGroupMethod(
        "lie-cg3",
        SCHEME_CG3,
        3,
        ("norm", "p_psi"),
        "Crouch-Grossman, three stages, a product of turns per stage; order 3, 3 evaluations a "
        "step",
        "Crouch and Grossman, J. Nonlinear Sci. 3 (1993) 1; coefficients and order conditions "
        "of Owren and Marthinsen, BIT 39 (1999) 116",
    ),
    LieGroupMethod(
        "lie-cf4",
        SCHEME_CF4,
        4,
        ("norm", "p_psi"),
        "commutator-free, classical RK4 stages, two turns in the fourth stage and in the "
        "update; order 4, 4 evaluations a step",
        "Celledoni, Marthinsen and Owren, Future Gener. Comput. Syst. 19 (2003) 341",
    ),
]
