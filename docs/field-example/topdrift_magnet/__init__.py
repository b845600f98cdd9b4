"""Two plug-in fields for topdrift (docs/fields.md explains the contract).

magnetic-dipole: a body carrying a magnetic moment mu (body axes, A m^2) in a uniform magnetic
field B (tesla, space axes). V = -mu.(R^T B), torque mu x (R^T B) (common practice: the torque
and energy of a magnetic dipole, e.g. Jackson, Classical Electrodynamics, from memory). A
gradient of the attitude alone: conservative, and every splitting takes its exact kick. With B
along e_z it exerts no torque about e_z (p_phi kept); with mu on the figure axis too, none about
the figure axis (p_psi kept on a symmetric body).

linear-damping: tau = -c w, w the body's rate (a viscous drag, c in N m s). No gradient: energy is
no invariant, and the splittings refuse it (topdrift says why).
"""

from numba import njit

from topdrift.models.body import P_FIELD_C0, P_HW1, P_HW2, P_HW3, P_INV1, P_INV2, P_INV3
from topdrift.models.field_plugins import PluginField
from topdrift.models.quaternion import vertical_in_body

MU = P_FIELD_C0  # mu1, mu2, mu3 in the three slots from here
B = P_FIELD_C0 + 3  # B1, B2, B3


@njit(cache=True, inline="always")
def field_in_body(p, q0, q1, q2, q3):
    """R^T B from the rows of R: B1 (R^T e_x) + B2 (R^T e_y) + B3 (R^T e_z); for B along e_z
    this is B3 times the vertical of the heavy top to the bit."""
    x1 = q0 * q0 + q1 * q1 - q2 * q2 - q3 * q3
    x2 = 2.0 * (q1 * q2 - q0 * q3)
    x3 = 2.0 * (q1 * q3 + q0 * q2)
    y1 = 2.0 * (q1 * q2 + q0 * q3)
    y2 = q0 * q0 - q1 * q1 + q2 * q2 - q3 * q3
    y3 = 2.0 * (q2 * q3 - q0 * q1)
    z1, z2, z3 = vertical_in_body(q0, q1, q2, q3)
    b1, b2, b3 = p[B], p[B + 1], p[B + 2]
    return (
        b1 * x1 + b2 * y1 + b3 * z1,
        b1 * x2 + b2 * y2 + b3 * z2,
        b1 * x3 + b2 * y3 + b3 * z3,
    )


@njit(cache=True)
def dipole_torque(p, q0, q1, q2, q3, m1, m2, m3):
    b1, b2, b3 = field_in_body(p, q0, q1, q2, q3)
    u1, u2, u3 = p[MU], p[MU + 1], p[MU + 2]
    return u2 * b3 - u3 * b2, u3 * b1 - u1 * b3, u1 * b2 - u2 * b1


@njit(cache=True)
def dipole_potential(p, q0, q1, q2, q3):
    b1, b2, b3 = field_in_body(p, q0, q1, q2, q3)
    return -(p[MU] * b1 + p[MU + 1] * b2 + p[MU + 2] * b3)


def _triple(table, key):
    v = table.get(key)
    if v is None:
        raise ValueError(f"{key}: missing (three numbers)")
    if not isinstance(v, (list, tuple)) or len(v) != 3:
        raise ValueError(f"{key}: expected three numbers, got {v!r}")
    return tuple(float(x) for x in v)


def dipole_params(table):
    mu = _triple(table, "moment")
    b = _triple(table, "flux_density")
    if not any(mu) or not any(b):
        raise ValueError("moment: a zero moment or a zero field exerts no torque; use no field")
    return mu + b


def dipole_keeps(c):
    """p_phi with B along e_z; p_psi too with mu along the figure axis."""
    b_vertical = c[3] == 0.0 and c[4] == 0.0
    mu_axial = c[0] == 0.0 and c[1] == 0.0
    keeps = set()
    if b_vertical:
        keeps.add("p_phi")
        if mu_axial:
            keeps.add("p_psi")
    return keeps


MAGNETIC_DIPOLE = PluginField(
    name="magnetic-dipole",
    description="a magnetic moment (body axes) in a uniform magnetic field (space axes)",
    keys={"moment": "magnetic moment mu, body axes, A m^2", "flux_density": "B, space axes, T"},
    params=dipole_params,
    torque=dipole_torque,
    potential=dipole_potential,
    conservative=True,
    keeps=dipole_keeps,
)


@njit(cache=True)
def damping_torque(p, q0, q1, q2, q3, m1, m2, m3):
    c = p[P_FIELD_C0]
    w1 = m1 * p[P_INV1] - p[P_HW1]
    w2 = m2 * p[P_INV2] - p[P_HW2]
    w3 = m3 * p[P_INV3] - p[P_HW3]
    return -c * w1, -c * w2, -c * w3


def damping_params(table):
    if "coefficient" not in table:
        raise ValueError("coefficient: missing (the damping coefficient c, N m s)")
    c = table["coefficient"]
    if isinstance(c, (list, tuple)) or not c > 0.0:
        raise ValueError(f"coefficient: must be one positive number, got {c!r}")
    return (float(c),)


LINEAR_DAMPING = PluginField(
    name="linear-damping",
    description="viscous damping of the body's rate, tau = -c w (no potential)",
    keys={"coefficient": "damping coefficient c, N m s"},
    params=damping_params,
    torque=damping_torque,
    potential=None,
    conservative=False,
    keeps=(),
)
