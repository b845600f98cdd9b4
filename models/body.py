"""The rigid body about its fixed point, and the flat parameter array the kernels read."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .field_spec import UNIFORM_GRAVITY, Field

STANDARD_GRAVITY = 9.80665  # m/s^2, the conventional standard value (CGPM 1901)

# Named indices into the float64 parameter array every kernel receives.
P_I1 = 0
P_I2 = 1
P_I3 = 2
P_INV1 = 3  # 1/I1, kept so that kernels multiply instead of divide
P_INV2 = 4
P_INV3 = 5
P_MGX = 6  # M g chi_1: weight times centre-of-mass coordinates in body axes
P_MGY = 7
P_MGZ = 8  # M g l for a top with its centre of mass on axis 3
# A gyrostat's rotors: their constant momentum h relative to the body, in body axes, so that the
# total body momentum is m = I w + h. Kernels need h only through w = I^-1 m - I^-1 h, so the
# rate offset I^-1 h is kept beside it (zero for a plain body: m * inv - 0.0 is m * inv, bit
# for bit, which keeps every rotor-free result unchanged).
P_H1 = 9
P_H2 = 10
P_H3 = 11
P_HW1 = 12  # h1 / I1
P_HW2 = 13
P_HW3 = 14
# 1.0 when the rotor is not on the figure axis of a symmetric body (h1 or h2 non-zero, or
# I1 != I2 with any rotor): the rigid free flow and the rotor's turn then do not commute.
P_ROTOR_GENERAL = 15
# The field (models/fields.py): its code (0 uniform gravity, 1 the gravity gradient of a circular
# orbit), the orbit's mean motion n and 3 n^2, the gradient's strength. All 0.0 in uniform
# gravity, whose kernels never read the last two.
P_FIELD = 16
P_ORBIT_N = 17
P_GG3N2 = 18
# A plug-in field's constants (models/field_plugins.py), in the order its params() gives them;
# 0.0 for the built-in fields and for slots a plug-in leaves unused.
P_FIELD_C0 = 19
N_FIELD_CONSTANTS = 8
NPARAM = P_FIELD_C0 + N_FIELD_CONSTANTS

# Relative tolerance for "symmetric" and "on the axis": bodies built from geometry carry
# round-off in their moments, and an exactly solvable case should still be recognised.
SYMMETRY_RTOL = 1e-12


class BodyError(ValueError):
    """A body description that cannot be a rigid body; the message names the field."""


def _positive_finite(name: str, value: float) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.floating, np.integer)):
        raise BodyError(f"{name}: expected a number, got {type(value).__name__}")
    value = float(value)
    if not math.isfinite(value):
        raise BodyError(f"{name}: must be finite, got {value}")
    if value <= 0.0:
        raise BodyError(f"{name}: must be positive, got {value}")
    return value


def _finite(name: str, value: float) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.floating, np.integer)):
        raise BodyError(f"{name}: expected a number, got {type(value).__name__}")
    value = float(value)
    if not math.isfinite(value):
        raise BodyError(f"{name}: must be finite, got {value}")
    return value


@dataclass(frozen=True)
class RigidBody:
    """A rigid body turning about a fixed point in uniform gravity -g e_z, or about its centre
    of mass in another field (models/fields.py: the gravity gradient of a circular orbit).

    inertia: principal moments (I1, I2, I3) about the fixed point, kg m^2.
    com: centre of mass in the principal body axes, m (zero for a free body).
    rotor: the constant momentum of internal rotors relative to the body, in body axes, kg m^2/s
    (a gyrostat; zero for a rigid body). The body's momentum is then m = I w + h.
    field: the field it moves in (uniform gravity unless said); a field other than uniform
    gravity has no fixed point: the centre of mass is the origin and com must be zero.
    """

    mass: float
    inertia: tuple[float, float, float]
    com: tuple[float, float, float] = (0.0, 0.0, 0.0)
    gravity: float = STANDARD_GRAVITY
    rotor: tuple[float, float, float] = (0.0, 0.0, 0.0)
    field: Field = UNIFORM_GRAVITY

    def __post_init__(self) -> None:
        mass = _positive_finite("mass", self.mass)
        if len(self.inertia) != 3:
            raise BodyError(f"inertia: expected 3 principal moments, got {len(self.inertia)}")
        if len(self.com) != 3:
            raise BodyError(f"com: expected 3 coordinates, got {len(self.com)}")
        inertia = tuple(_positive_finite(f"inertia[{i}]", v) for i, v in enumerate(self.inertia))
        com = tuple(_finite(f"com[{i}]", v) for i, v in enumerate(self.com))
        if len(self.rotor) != 3:
            raise BodyError(f"rotor: expected 3 components, got {len(self.rotor)}")
        rotor = tuple(_finite(f"rotor[{i}]", v) for i, v in enumerate(self.rotor))
        gravity = _finite("gravity", self.gravity)
        if gravity < 0.0:
            raise BodyError(f"gravity: must not be negative, got {gravity}")
        # Each principal moment is at most the sum of the other two (equality: a flat body).
        for i in range(3):
            others = inertia[(i + 1) % 3] + inertia[(i + 2) % 3]
            if inertia[i] > others * (1.0 + 1e-12):
                raise BodyError(
                    f"inertia[{i}]: {inertia[i]:.6g} exceeds the sum of the other two "
                    f"({others:.6g}); no rigid body has these principal moments"
                )
        object.__setattr__(self, "mass", mass)
        object.__setattr__(self, "inertia", inertia)
        object.__setattr__(self, "com", com)
        object.__setattr__(self, "gravity", gravity)
        object.__setattr__(self, "rotor", rotor)
        if not isinstance(self.field, Field):
            raise BodyError(f"field: expected a Field, got {type(self.field).__name__}")
        if not self.field.uniform and any(v != 0.0 for v in com):
            raise BodyError(
                f"com: must be zero in the {self.field.kind} field, where the centre of mass is "
                f"the origin of the orbit frame (no fixed point), got {list(com)}"
            )

    @property
    def uniform_gravity(self) -> bool:
        """The heavy top's field: a fixed point in uniform gravity, inertial axes."""
        return self.field.uniform

    @property
    def keeps_energy(self) -> bool:
        """Energy is an invariant: every field but a plug-in one whose torque is no gradient."""
        return self.field.conservative

    @property
    def keeps_p_phi(self) -> bool:
        """L.e_z is an invariant: uniform gravity, or a plug-in field that says so."""
        return "p_phi" in self.field.keeps()

    @property
    def keeps_p_psi(self) -> bool:
        """L.e3 is an invariant: a Lagrange top (or gyrostat) in uniform gravity, or a symmetric
        body (any rotor on axis 3) in a plug-in field that says the field keeps it."""
        if self.field.uniform:
            return self.lagrange_top
        return "p_psi" in self.field.keeps() and self.symmetric and self.rotor_on_axis

    @property
    def weight(self) -> float:
        return self.mass * self.gravity

    @property
    def symmetric(self) -> bool:
        """I1 == I2 (to round-off): the free flow is exactly solvable in closed form."""
        i1, i2, _ = self.inertia
        return abs(i1 - i2) <= SYMMETRY_RTOL * max(i1, i2)

    @property
    def com_on_axis(self) -> bool:
        c1, c2, c3 = self.com
        scale = max(abs(c1), abs(c2), abs(c3), 1e-300)
        return abs(c1) <= SYMMETRY_RTOL * scale and abs(c2) <= SYMMETRY_RTOL * scale

    @property
    def has_rotor(self) -> bool:
        return any(v != 0.0 for v in self.rotor)

    @property
    def rotor_on_axis(self) -> bool:
        """No rotor, or one whose momentum lies along the figure axis 3 (h1 = h2 = 0)."""
        h1, h2, _ = self.rotor
        return h1 == 0.0 and h2 == 0.0

    @property
    def lagrange_top(self) -> bool:
        """Symmetric with its centre of mass on the figure axis, and any rotor on that axis: the
        exactly solvable heavy top (or gyrostat), the only body the canonical Euler-angle form
        describes. An off-axis rotor turns m3 (m3' = (h1 m2 - h2 m1) / I1), so p_psi is then no
        momentum of the motion. Only in uniform gravity: the gravity gradient's frame turns about
        e_y, so phi is no longer cyclic."""
        return self.uniform_gravity and self.symmetric and self.com_on_axis and self.rotor_on_axis

    @property
    def rotor_commutes(self) -> bool:
        """The rotor's turn about I^-1 h commutes with the rigid free flow: no rotor, or one on
        the figure axis of a symmetric body, where the two combine into one exact flow."""
        return not self.has_rotor or (self.symmetric and self.rotor_on_axis)

    @property
    def kovalevskaya(self) -> bool:
        """I1 == I2 == 2 I3 with the centre of mass in the equatorial plane (and off the pivot)."""
        i1, i2, i3 = self.inertia
        c1, c2, c3 = self.com
        r = math.hypot(c1, c2)
        return (
            self.uniform_gravity
            and self.symmetric
            and abs(i1 - 2.0 * i3) <= SYMMETRY_RTOL * i1
            and r > 0.0
            and abs(c3) <= SYMMETRY_RTOL * r
        )

    @property
    def mgl(self) -> float:
        """M g l: weight times the signed distance of the centre of mass along axis 3."""
        return self.weight * self.com[2]

    def params(self) -> np.ndarray:
        """The flat parameter array the kernels read (see the P_* indices)."""
        p = np.empty(NPARAM, dtype=np.float64)
        i1, i2, i3 = self.inertia
        if self.symmetric:
            # Make I1 == I2 bit-for-bit so that kernels see one symmetric body.
            i2 = i1
        p[P_I1], p[P_I2], p[P_I3] = i1, i2, i3
        p[P_INV1], p[P_INV2], p[P_INV3] = 1.0 / i1, 1.0 / i2, 1.0 / i3
        w = self.weight
        c1, c2, c3 = self.com
        if self.com_on_axis:
            c1 = c2 = 0.0
        p[P_MGX], p[P_MGY], p[P_MGZ] = w * c1, w * c2, w * c3
        h1, h2, h3 = self.rotor
        p[P_H1], p[P_H2], p[P_H3] = h1, h2, h3
        p[P_HW1], p[P_HW2], p[P_HW3] = h1 * p[P_INV1], h2 * p[P_INV2], h3 * p[P_INV3]
        p[P_ROTOR_GENERAL] = 0.0 if self.rotor_commutes else 1.0
        n = self.field.orbit_rate
        p[P_FIELD] = float(self.field.code)
        p[P_ORBIT_N] = n
        p[P_GG3N2] = 3.0 * n * n
        c = self.field.constants
        p[P_FIELD_C0 : P_FIELD_C0 + N_FIELD_CONSTANTS] = 0.0
        p[P_FIELD_C0 : P_FIELD_C0 + len(c)] = c
        return p

    def as_dict(self) -> dict:
        return {
            "mass": self.mass,
            "inertia": list(self.inertia),
            "com": list(self.com),
            "gravity": self.gravity,
            # only a gyrostat says so: a rigid body's record stays what it was
            **({"rotor": list(self.rotor)} if self.has_rotor else {}),
            # and only a body in another field names it
            **({"field": self.field.as_dict()} if not self.field.uniform else {}),
        }
