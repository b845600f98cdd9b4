"""The field a body moves in: uniform gravity (the heavy top) or the gravity gradient of a
circular orbit, as numba functions that switch on the parameter slot P_FIELD of the flat
parameter array (the field as a value, `Field`, is in field_spec.py). The entry points
(models/dynamics.rhs, models/flows.flow_a/flow_b and their increments) choose between these and
the heavy top's own functions, which stay as they were compiled before fields.

uniform-gravity (FIELD_UNIFORM, code 0): V = M g chi.Gamma about the fixed point, the torque
M g Gamma x chi; the reference frame is inertial. Every kernel that ran before this module
existed takes this branch with the same arithmetic, so a heavy top keeps its bits.

gravity-gradient (FIELD_GRAVITY_GRADIENT, code 1): a rigid body whose centre of mass is on a
circular orbit of mean motion n about a point mass, in the orbit frame: e_x along the orbital
velocity, e_z toward the primary (nadir), e_y = e_z x e_x (against the orbit normal). The frame
turns at Omega = -n e_y relative to inertial space. With Gamma = R^T e_z (nadir in body axes,
the same row of R as the heavy top's vertical) and the body's momentum m = I w + h in body
axes, w its inertial rate,

    V = (3 n^2 / 2) Gamma.I Gamma                (mu / r^3 = n^2 on a circular orbit; the
                                                  trace term of the expansion is a constant)
    tau = 3 n^2 Gamma x (I Gamma)                (the gravity-gradient torque, common practice)
    w_rel = w + n R^T e_y                        (the rate relative to the orbit frame)
    J = T + V + n e_y.(R m)                      (the Jacobi integral: H - Omega.L in the
                                                  rotating frame, with T the shell's energy)

The rotating frame's term n e_y.(R m) is the momentum of a rotation about e_y, and T is left
invariant (unchanged by a turn of the whole body in space), so the two commute: the exact flow
of A = T + n L_y is the free flow followed by the frame turn, q <- Rot(e_y, n h) q with m fixed
(an inertially fixed body seen from the orbit frame turns at +n about e_y). V depends on the
attitude only, so its flow is the exact kick m += h tau. The splittings stay compositions of
exact flows.

plug-in fields (codes 2, 3, ...; models/field_plugins.py): torque and potential from the
plug-in's own compiled functions, reached through the generated dispatch (plugin_dispatch.py).
They are written in inertial axes (P_ORBIT_N is 0.0, so frame_rate is zero and frame_turn the
identity, bit for bit) and their torque may depend on the momentum too (damping, a control
law): the kick m += h tau(q, m) is then exact only for a conservative field, whose torque is of
the attitude alone; the splittings refuse the others (integrators/splitting/methods.py).
"""

from __future__ import annotations

import math

from numba import njit

from .body import P_FIELD, P_GG3N2, P_I1, P_I2, P_I3, P_MGX, P_MGY, P_MGZ, P_ORBIT_N
from .field_spec import FIELD_GRAVITY_GRADIENT, FIELD_UNIFORM
from .plugin_dispatch import plugin_potential, plugin_torque
from .quaternion import qmul, vertical_in_body


@njit(cache=True, inline="always")
def orbit_axis_in_body(q0, q1, q2, q3):
    """R^T e_y, the orbit frame's e_y in body axes (second row of R)."""
    return (
        2.0 * (q1 * q2 + q0 * q3),
        q0 * q0 - q1 * q1 + q2 * q2 - q3 * q3,
        2.0 * (q2 * q3 - q0 * q1),
    )


@njit(cache=True, inline="always")
def gradient_torque(p, g1, g2, g3):
    """3 n^2 Gamma x (I Gamma) from the nadir direction Gamma in body axes."""
    k = p[P_GG3N2]
    return (
        k * (p[P_I3] - p[P_I2]) * g2 * g3,
        k * (p[P_I1] - p[P_I3]) * g3 * g1,
        k * (p[P_I2] - p[P_I1]) * g1 * g2,
    )


@njit(cache=True, inline="always")
def other_torque(p, q0, q1, q2, q3, m1, m2, m3):
    """The torque in body axes of a field other than uniform gravity: the gravity gradient's
    (of q alone) or a plug-in's (of q, and of m for a non-conservative one)."""
    if p[P_FIELD] == FIELD_GRAVITY_GRADIENT:
        g1, g2, g3 = vertical_in_body(q0, q1, q2, q3)
        return gradient_torque(p, g1, g2, g3)
    return plugin_torque(p, q0, q1, q2, q3, m1, m2, m3)


@njit(cache=True, inline="always")
def other_potential(p, q0, q1, q2, q3, g1, g2, g3):
    """The potential of a field other than uniform gravity at a unit q (g: its nadir/vertical
    R^T e_z, which the gravity gradient takes)."""
    if p[P_FIELD] == FIELD_GRAVITY_GRADIENT:
        return gradient_potential(p, g1, g2, g3)
    return plugin_potential(p, q0, q1, q2, q3)


@njit(cache=True, inline="always")
def field_torque(p, q0, q1, q2, q3, m1, m2, m3):
    """The field's torque in body axes at the state (q, m) (q need not be unit for uniform
    gravity, which uses the unnormalised vertical as every kernel did before fields)."""
    if p[P_FIELD] == FIELD_UNIFORM:
        g1, g2, g3 = vertical_in_body(q0, q1, q2, q3)
        cx, cy, cz = p[P_MGX], p[P_MGY], p[P_MGZ]
        return g2 * cz - g3 * cy, g3 * cx - g1 * cz, g1 * cy - g2 * cx
    return other_torque(p, q0, q1, q2, q3, m1, m2, m3)


@njit(cache=True, inline="always")
def frame_rate(p, q0, q1, q2, q3):
    """-Omega in body axes, n R^T e_y: what the body's rate relative to the field's frame adds
    to its inertial rate (zero for uniform gravity; callers branch on the field instead of
    adding it, so a heavy top's bits stay)."""
    n = p[P_ORBIT_N]
    a1, a2, a3 = orbit_axis_in_body(q0, q1, q2, q3)
    return n * a1, n * a2, n * a3


@njit(cache=True, inline="always")
def gradient_potential(p, g1, g2, g3):
    """(3 n^2 / 2) Gamma.I Gamma for a unit Gamma."""
    return 0.5 * p[P_GG3N2] * (p[P_I1] * g1 * g1 + p[P_I2] * g2 * g2 + p[P_I3] * g3 * g3)


@njit(cache=True, error_model="numpy")
def frame_turn(h, y, p):
    """Exact flow of n e_y.(R m) over h: q <- Rot(e_y, n h) q, m unchanged. Written as
    q + (factor - 1) q with cos - 1 = -2 sin^2 of the quarter angle, as the free flows are."""
    quarter = 0.25 * h * p[P_ORBIT_N]
    t = math.sin(quarter)
    e0 = -2.0 * t * t
    s = 2.0 * t * math.cos(quarter)
    q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
    d0, d1, d2, d3 = qmul(e0, 0.0, s, 0.0, q0, q1, q2, q3)
    y[0] = q0 + d0
    y[1] = q1 + d1
    y[2] = q2 + d2
    y[3] = q3 + d3


@njit(cache=True, error_model="numpy")
def frame_turn_increment(h, y, p, d):
    """Add the frame turn to an increment d of the free flow (d = free(y) - y in the quaternion
    slots): the turned quaternion is Q (q + d) and its increment over q is d + (Q - 1)(q + d)."""
    quarter = 0.25 * h * p[P_ORBIT_N]
    t = math.sin(quarter)
    e0 = -2.0 * t * t
    s = 2.0 * t * math.cos(quarter)
    r0, r1, r2, r3 = y[0] + d[0], y[1] + d[1], y[2] + d[2], y[3] + d[3]
    u0, u1, u2, u3 = qmul(e0, 0.0, s, 0.0, r0, r1, r2, r3)
    d[0] += u0
    d[1] += u1
    d[2] += u2
    d[3] += u3


@njit(cache=True, error_model="numpy")
def field_kick(h, y, p):
    """Exact flow of V over h for a field other than uniform gravity: q fixed, m += h tau(q).
    Gamma from a quaternion whose norm is 1 to round-off (the kernels renormalise it). Exact
    for the gravity gradient and a conservative plug-in (torque of q alone)."""
    t1, t2, t3 = other_torque(p, y[0], y[1], y[2], y[3], y[4], y[5], y[6])
    y[4] += h * t1
    y[5] += h * t2
    y[6] += h * t3


@njit(cache=True, error_model="numpy")
def field_kick_increment(h, y, p, d):
    t1, t2, t3 = other_torque(p, y[0], y[1], y[2], y[3], y[4], y[5], y[6])
    d[0] = 0.0
    d[1] = 0.0
    d[2] = 0.0
    d[3] = 0.0
    d[4] = h * t1
    d[5] = h * t2
    d[6] = h * t3
