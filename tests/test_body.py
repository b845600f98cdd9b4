"""RigidBody validation and the parameter array."""

import math

import numpy as np
import pytest

from topdrift.models import STANDARD_GRAVITY, BodyError, RigidBody
from topdrift.models.body import P_I1, P_I2, P_INV3, P_MGX, P_MGZ


def test_standard_gravity_is_the_conventional_value():
    # 9.80665 m/s^2, the standard acceleration of gravity (3rd CGPM, 1901).
    assert STANDARD_GRAVITY == 9.80665
    assert RigidBody(1.0, (1.0, 1.0, 1.0)).gravity == 9.80665


@pytest.mark.parametrize(
    "kwargs, field",
    [
        (dict(mass=-1.0, inertia=(1, 1, 1)), "mass"),
        (dict(mass=0.0, inertia=(1, 1, 1)), "mass"),
        (dict(mass=math.nan, inertia=(1, 1, 1)), "mass"),
        (dict(mass=1.0, inertia=(1, -1, 1)), "inertia[1]"),
        (dict(mass=1.0, inertia=(1, 1, math.inf)), "inertia[2]"),
        (dict(mass=1.0, inertia=(1, 1)), "inertia"),
        (dict(mass=1.0, inertia=(1, 1, 1), com=(0, math.nan, 0)), "com[1]"),
        (dict(mass=1.0, inertia=(1, 1, 1), gravity=-9.8), "gravity"),
        (dict(mass="heavy", inertia=(1, 1, 1)), "mass"),
        (dict(mass=True, inertia=(1, 1, 1)), "mass"),
    ],
)
def test_bad_bodies_name_the_field(kwargs, field):
    with pytest.raises(BodyError) as err:
        RigidBody(**kwargs)
    assert str(err.value).startswith(field + ":")
    assert "\n" not in str(err.value)


def test_triangle_inequality_of_principal_moments():
    # Common practice: I_i <= I_j + I_k for any rigid body (equality for a flat lamina).
    RigidBody(1.0, (1.0, 2.0, 3.0))  # a lamina in the 1-2 plane: allowed
    with pytest.raises(BodyError, match=r"inertia\[2\].*exceeds"):
        RigidBody(1.0, (1.0, 2.0, 3.1))


def test_free_body_allowed_and_params():
    b = RigidBody(2.0, (0.3, 0.3, 0.1))
    p = b.params()
    assert b.lagrange_top and b.symmetric and b.mgl == 0.0
    assert p[P_MGZ] == 0.0 and p[P_MGX] == 0.0
    top = RigidBody(2.0, (0.3, 0.3 * (1 + 1e-15), 0.1), com=(0.0, 0.0, 0.25))
    p = top.params()
    assert p[P_I1] == p[P_I2]  # symmetric to round-off becomes exactly symmetric
    assert p[P_MGZ] == pytest.approx(2.0 * 9.80665 * 0.25, rel=1e-15)
    assert p[P_INV3] == pytest.approx(10.0, rel=1e-15)


def test_kovalevskaya_recognised():
    assert RigidBody(1.0, (2.0, 2.0, 1.0), com=(0.1, 0.0, 0.0)).kovalevskaya
    assert not RigidBody(1.0, (2.0, 2.0, 1.0), com=(0.1, 0.0, 0.1)).kovalevskaya
    assert not RigidBody(1.0, (2.0, 2.0, 1.2), com=(0.1, 0.0, 0.0)).kovalevskaya
    assert isinstance(RigidBody(1.0, (2.0, 2.0, 1.0)).params(), np.ndarray)
