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

from topdrift.integrators.constrained.kernel import SCHEME_RATTLE, first_solve, rattle_steps
from topdrift.integrators.scheme_stepper import SchemeMethod
from topdrift.integrators.validation import MethodRefused

FAMILY = "constrained"
SOURCE = (
    "Leimkuhler and Reich, Simulating Hamiltonian Dynamics, CUP 2004 (RATTLE on the rotation "
    "matrix); McLachlan and Scovel, J. Nonlinear Sci. 5 (1995) 233 (free body: discrete "
    "Moser-Veselov)"
)


class ConstrainedMethod(SchemeMethod):
    """A scheme of kernel.py at a fixed step (integrators/scheme_stepper.py), symplectic."""

    # its kernel writes omega = I^-1 m: a gyrostat's rotor is refused, not ignored
    carries_rotors = False
    carries_fields = False  # its kernel writes M g Gamma x chi (uniform gravity) itself

    family = FAMILY
    kernel = staticmethod(rattle_steps)
    symplectic = True

    def start(self, form, params, t0, y0, settings):
        stepper = super().start(form, params, t0, y0, settings)
        # The position equations vee(W D - D W^T) = h m* have, about each body axis, the term
        # I_i sin(turn) (d_j + d_k = I_i), so they have no solution once h |w_i| > 1: refuse a
        # first step with none, with the reason, before anything runs. Later steps that lose
        # their solution stop the run with ST_NO_CONVERGENCE.
        its, worst = first_solve(stepper.y, stepper.params, stepper.h)
        if its < 0:
            raise MethodRefused(
                f"{self.name}: the first step's position equations have no solution at h = "
                f"{stepper.h!r} s (h |w_i| = {worst:.3g} about the fastest axis, and they have "
                f"none above 1); take a step below {stepper.h / max(worst, 1.0) / 2:.3g} s"
            )
        return stepper


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
