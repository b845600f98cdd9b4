"""RATTLE on the rotation matrix at a fixed step, body form: the heavy body as a constrained
system on 3 x 3 matrices, R^T R = I held by its multiplier (kernel.py has the equations).

  rattle   the constrained Stormer-Verlet step on (R, P) (Leimkuhler and Reich, Simulating
           Hamiltonian Dynamics, CUP 2004); for a free body the discrete Moser-Veselov map
           (McLachlan and Scovel, J. Nonlinear Sci. 5 (1995) 233). The state stays the house's
           (q, m); R and P are the kernel's view of it.

Order 2, symmetric and symplectic (RATTLE is a symplectic map of the constrained cotangent
bundle; common practice, from the book above; checked numerically on a chart in
tests/test_rattle.py). What it keeps (the rule of integrators/base.py; checked in
tests/test_keeps.py): |q| to round-off (a product of unit quaternions, nothing renormalised),
p_phi = m . Gamma (the kicks are perpendicular to Gamma and W^T turns m and Gamma alike) and,
on a Lagrange top, p_psi = m3 (the step commutes with turns about the figure axis, whose
discrete Noether momentum is m3). The energy is not kept, only bounded.
"""

from __future__ import annotations

from topdrift.integrators.constrained.kernel import SCHEME_RATTLE, rattle_steps
from topdrift.integrators.scheme_stepper import SchemeMethod

FAMILY = "constrained"
SOURCE = (
    "Leimkuhler and Reich, Simulating Hamiltonian Dynamics, CUP 2004 (RATTLE on the rotation "
    "matrix); McLachlan and Scovel, J. Nonlinear Sci. 5 (1995) 233 (free body: discrete "
    "Moser-Veselov)"
)


class ConstrainedMethod(SchemeMethod):
    """A scheme of kernel.py at a fixed step (integrators/scheme_stepper.py), symplectic."""

    family = FAMILY
    kernel = staticmethod(rattle_steps)
    symplectic = True


METHODS = [
    ConstrainedMethod(
        "rattle",
        SCHEME_RATTLE,
        2,
        ("norm", "p_phi", "p_psi"),
        "RATTLE on the rotation matrix (constrained Stormer-Verlet, R^T R = I by a Newton solve "
        "to convergence each step); order 2, symplectic, one torque a step",
        SOURCE,
    ),
]
