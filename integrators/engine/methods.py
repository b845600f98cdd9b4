"""First-order engine schemes at a fixed step, body form: the steps real-time and robotics
engines take, here so that their energy drift and phase error can be seen beside the rest.

  engine-euler          explicit Euler on (q, m), the quaternion renormalised every step.
  engine-semi-implicit  semi-implicit Euler: kick the momentum with the torque, then turn the
                        body by the exact exponential of the new angular velocity, the angular
                        momentum held fixed in space meanwhile.
  engine-implicit-gyro  semi-implicit Euler with the gyroscopic term implicit in the body-frame
                        rate (one Newton iteration per step), then the same exact exponential.

Common practice, no single source (kernel.py has the equations). All are of order 1 and none is
symplectic: the exponential of a frozen angular velocity is not the flow of the kinetic energy
unless the body is a sphere, and the map of the semi-implicit scheme on the sphere |m| = const of
a free body changes area by a relative O(h^2) per step (measured, tests/test_engine.py), so
none of them is a Poisson map.

What each keeps (the rule of integrators/base.py; checked in tests/test_keeps.py):
  engine-euler          |q| (renormalised: 1 up to the rounding of one division), and p_psi on a
                        Lagrange top (m3's rate m1 w2 - m2 w1 vanishes in exact arithmetic).
  engine-semi-implicit  |q| (a product of unit quaternions), and p_phi = m.Gamma: the kick is
                        perpendicular to Gamma, and the turn carries m and Gamma alike. Not
                        p_psi: a finite turn about w = I^-1 m moves m3 by O(h^2) per step.
  engine-implicit-gyro  |q| (a product of unit quaternions), and p_psi on a Lagrange top (the
                        third Newton equation decouples there and its residual vanishes).
All to round-off, none to the bit; none keeps the energy.
"""

from __future__ import annotations

from topdrift.integrators.engine.kernel import (
    SCHEME_EXPLICIT,
    SCHEME_IMPLICIT_GYRO,
    SCHEME_SEMI_IMPLICIT,
    engine_steps,
)
from topdrift.integrators.scheme_stepper import SchemeMethod

FAMILY = "first-order-engine"
SOURCE = "common practice of real-time and robotics engines (no single source)"


class EngineMethod(SchemeMethod):
    """One of the schemes of kernel.py at a fixed step (integrators/scheme_stepper.py)."""

    family = FAMILY
    kernel = staticmethod(engine_steps)

    def __init__(self, name: str, scheme: int, keeps_roundoff: tuple, description: str):
        super().__init__(name, scheme, 1, keeps_roundoff, description, SOURCE)


METHODS = [
    EngineMethod(
        "engine-euler",
        SCHEME_EXPLICIT,
        ("norm", "p_psi"),
        "explicit Euler on (q, m), the quaternion renormalised every step; order 1, energy "
        "grows without bound",
    ),
    EngineMethod(
        "engine-semi-implicit",
        SCHEME_SEMI_IMPLICIT,
        ("norm", "p_phi"),
        "semi-implicit Euler: momentum kicked by the torque, body turned by the exact "
        "exponential of the new angular velocity; order 1, not symplectic",
    ),
    EngineMethod(
        "engine-implicit-gyro",
        SCHEME_IMPLICIT_GYRO,
        ("norm", "p_psi"),
        "semi-implicit Euler with the gyroscopic term implicit (one Newton iteration per step), "
        "then the exact exponential; order 1, damps the energy",
    ),
]
