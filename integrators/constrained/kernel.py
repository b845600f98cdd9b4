"""RATTLE on the rotation matrix for a heavy body, body form only.

The body as a constrained system (Leimkuhler and Reich, Simulating Hamiltonian Dynamics, CUP
2004, the rigid body in rotation-matrix coordinates): the attitude R (body to space) is a 3 x 3
matrix held to R^T R = I by a symmetric multiplier, the kinetic energy is tr(R' D R'^T) / 2 with
the mass matrix D = diag(d), d_i = (I1 + I2 + I3) / 2 - I_i (so that I = tr(D) 1 - D), its
conjugate momentum P = R' D, and the potential V(R) = M g e_z . R chi. The RATTLE step on (R, P):

  P+ = P - h/2 grad V(R) - h/2 R L,          R1 = R + h P+ D^-1,        R1^T R1 = I,
  P1 = P+ - h/2 grad V(R1) - h/2 R1 L1,       R1^T P1 D^-1 + D^-1 P1^T R1 = 0,

with L, L1 symmetric multipliers. In body axes (P = R hat(w) D, m = I w: the skew part of R^T P
is hat(m) / 2) and with W = R^T R1, the step reads

  m* = m + h/2 tau(q)                                  (half kick, tau = M g Gamma x chi)
  vee(W D - D W^T) = h m*,  W in SO(3)                  (the position step: the skew part of
                                                        R^T R1 D; the symmetric part is the
                                                        multiplier L, 6 numbers, eliminated)
  q1 = q w,  m1 = W^T m* + h/2 tau(q1)                 (the symmetric L1 drops out of m1)

For a free body this is the discrete Moser-Veselov map (McLachlan and Scovel, J. Nonlinear
Sci. 5 (1995) 233, show the equivalence). The orthogonality constraint is held by solving for
W as a unit quaternion w: its six equations hold by construction, and Newton's method solves
the three that remain, from the first-order guess W = I + h hat(w*) (w* = I^-1 m*), with the
exact Jacobian d vee(W D - D W^T) = (tr(W D) 1 - W D) W dtheta for W -> W (1 + hat(dtheta))
(checked against finite differences in tests/test_rattle.py). The iteration stops when its
last correction is at the rounding level (NEWTON_TOL), not after a fixed count; a step whose
iteration has not converged in NEWTON_MAXIT iterations is not committed and the run stops with
ST_NO_CONVERGENCE. The quaternion q changes by products with unit quaternions, and the constraint
|q|^2 = 1 (that is R^T R = I) is then solved on the new attitude along its gradient at the old
one, as SHAKE and RATTLE solve theirs: a correction that is zero in exact arithmetic and keeps
the constraint at the rounding level of one step, however many steps are taken.

The torque at the end of a step is the one at the start of the next: one evaluation per step,
and one more at the start of every call. Everything is scalar inside a step; nothing is
allocated.
"""

from __future__ import annotations

import math

from numba import njit

from topdrift.integrators.base import (
    C_EVALS,
    C_FORCE_EVALS,
    C_STEPS,
    ST_DIVERGED,
    ST_NO_CONVERGENCE,
    ST_OK,
)
from topdrift.models.body import P_I1, P_I2, P_I3, P_MGX, P_MGY, P_MGZ
from topdrift.models.forms import FORM_BODY
from topdrift.models.quaternion import qmul, rotate_inverse, vertical_in_body

SCHEME_RATTLE = 0

# Newton's last correction (radians) at which W is taken as converged: 64 eps. The rounding floor
# of a correction is a few eps times the spread of the moments (the residual rounds at eps times
# the largest d_i, the Jacobian is about the inertia); quadratic convergence reaches it from
# 1e-8 in one iteration, so a correction of that size means the previous one had converged.
NEWTON_TOL = 64.0 * 2.0**-52
NEWTON_MAXIT = 20


@njit(cache=True, inline="always")
def _torque(p, q0, q1, q2, q3):
    g1, g2, g3 = vertical_in_body(q0, q1, q2, q3)
    cx, cy, cz = p[P_MGX], p[P_MGY], p[P_MGZ]
    return g2 * cz - g3 * cy, g3 * cx - g1 * cz, g1 * cy - g2 * cx


@njit(cache=True, inline="always")
def position_step(d1, d2, d3, b1, b2, b3, w0, w1, w2, w3):
    """Solve vee(W D - D W^T) = b for the unit quaternion w of W by Newton's method from the
    guess (w0..w3). Returns (iterations, w0, w1, w2, w3), iterations -1 when the iteration did
    not converge (w is then the last iterate)."""
    for it in range(NEWTON_MAXIT):
        # W, the rotation matrix of w (body to space convention of models/quaternion.py)
        a11 = w0 * w0 + w1 * w1 - w2 * w2 - w3 * w3
        a22 = w0 * w0 - w1 * w1 + w2 * w2 - w3 * w3
        a33 = w0 * w0 - w1 * w1 - w2 * w2 + w3 * w3
        a12 = 2.0 * (w1 * w2 - w0 * w3)
        a21 = 2.0 * (w1 * w2 + w0 * w3)
        a13 = 2.0 * (w1 * w3 + w0 * w2)
        a31 = 2.0 * (w1 * w3 - w0 * w2)
        a23 = 2.0 * (w2 * w3 - w0 * w1)
        a32 = 2.0 * (w2 * w3 + w0 * w1)
        # residual r = b - vee(W D - D W^T)
        r1 = b1 - (a32 * d2 - d3 * a23)
        r2 = b2 - (a13 * d3 - d1 * a31)
        r3 = b3 - (a21 * d1 - d2 * a12)
        # A = tr(G) 1 - G with G = W D; solve A y = r by Cramer's rule, then dtheta = W^T y
        g11, g12, g13 = a11 * d1, a12 * d2, a13 * d3
        g21, g22, g23 = a21 * d1, a22 * d2, a23 * d3
        g31, g32, g33 = a31 * d1, a32 * d2, a33 * d3
        t = g11 + g22 + g33
        j11, j12, j13 = t - g11, -g12, -g13
        j21, j22, j23 = -g21, t - g22, -g23
        j31, j32, j33 = -g31, -g32, t - g33
        c11 = j22 * j33 - j23 * j32
        c12 = j23 * j31 - j21 * j33
        c13 = j21 * j32 - j22 * j31
        det = j11 * c11 + j12 * c12 + j13 * c13
        y1 = (r1 * c11 + r2 * (j13 * j32 - j12 * j33) + r3 * (j12 * j23 - j13 * j22)) / det
        y2 = (r1 * c12 + r2 * (j11 * j33 - j13 * j31) + r3 * (j13 * j21 - j11 * j23)) / det
        y3 = (r1 * c13 + r2 * (j12 * j31 - j11 * j32) + r3 * (j11 * j22 - j12 * j21)) / det
        e1 = a11 * y1 + a21 * y2 + a31 * y3
        e2 = a12 * y1 + a22 * y2 + a32 * y3
        e3 = a13 * y1 + a23 * y2 + a33 * y3
        # W <- W turn(dtheta), the turn as the unit quaternion (1, dtheta / 2) / |.|: a Cayley
        # turn, exact to second order, which is all a Newton correction needs
        s = 1.0 / math.sqrt(1.0 + 0.25 * (e1 * e1 + e2 * e2 + e3 * e3))
        w0, w1, w2, w3 = qmul(w0, w1, w2, w3, s, 0.5 * s * e1, 0.5 * s * e2, 0.5 * s * e3)
        size = math.sqrt(e1 * e1 + e2 * e2 + e3 * e3)
        if not math.isfinite(size):
            break
        if size <= NEWTON_TOL:
            return it + 1, w0, w1, w2, w3
    return -1, w0, w1, w2, w3


@njit(cache=True)
def rattle_steps(scheme, y, p, h, nsteps, counters):
    """Take up to nsteps RATTLE steps of h in place on the body state y. Returns (status, steps
    taken); a step whose position solve does not converge (ST_NO_CONVERGENCE) or that comes out
    non-finite (ST_DIVERGED) is not committed. `scheme` is SCHEME_RATTLE (the one scheme)."""
    i1, i2, i3 = p[P_I1], p[P_I2], p[P_I3]
    half = 0.5 * (i1 + i2 + i3)
    d1, d2, d3 = half - i1, half - i2, half - i3
    hh = 0.5 * h
    t1, t2, t3 = _torque(p, y[0], y[1], y[2], y[3])
    counters[C_EVALS] += 1
    counters[C_FORCE_EVALS] += 1
    done = 0
    for _ in range(nsteps):
        q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
        k1, k2, k3 = y[4] + hh * t1, y[5] + hh * t2, y[6] + hh * t3
        # first-order guess: the Cayley turn by h w*, W = I + h hat(w*) + O(h^2)
        x1, x2, x3 = hh * k1 / i1, hh * k2 / i2, hh * k3 / i3
        s = 1.0 / math.sqrt(1.0 + x1 * x1 + x2 * x2 + x3 * x3)
        its, w0, w1, w2, w3 = position_step(
            d1, d2, d3, h * k1, h * k2, h * k3, s, s * x1, s * x2, s * x3
        )
        if its < 0:
            return ST_NO_CONVERGENCE, done
        a0, a1, a2, a3 = qmul(q0, q1, q2, q3, w0, w1, w2, w3)
        # The constraint on the new attitude, |q1|^2 = 1 (R1^T R1 = I), solved along its gradient
        # at the old attitude, q1 <- q1 + lam q, the way SHAKE and RATTLE take the multiplier
        # (one Newton step, exact to rounding since lam is a few eps): lam is zero in exact
        # arithmetic, and in floats it keeps the rounding of the products from accumulating.
        # Without it |q| drifted by 5e-11 over 1e6 steps of a steady motion (measured), because a
        # steady motion rounds the nearly equal w of every step the same way.
        lam = (1.0 - (a0 * a0 + a1 * a1 + a2 * a2 + a3 * a3)) / (
            2.0 * (a0 * q0 + a1 * q1 + a2 * q2 + a3 * q3)
        )
        a0, a1, a2, a3 = a0 + lam * q0, a1 + lam * q1, a2 + lam * q2, a3 + lam * q3
        n1, n2, n3 = rotate_inverse(w0, w1, w2, w3, k1, k2, k3)
        u1, u2, u3 = _torque(p, a0, a1, a2, a3)
        n1, n2, n3 = n1 + hh * u1, n2 + hh * u2, n3 + hh * u3
        counters[C_EVALS] += 1
        counters[C_FORCE_EVALS] += 1
        total = a0 + a1 + a2 + a3 + n1 + n2 + n3
        if not math.isfinite(total):
            return ST_DIVERGED, done
        y[0], y[1], y[2], y[3] = a0, a1, a2, a3
        y[4], y[5], y[6] = n1, n2, n3
        t1, t2, t3 = u1, u2, u3
        counters[C_STEPS] += 1
        done += 1
    return ST_OK, done


@njit(cache=True)
def first_solve(y, p, h):
    """The position solve of a first step from y: (iterations or -1, h max_i |w*_i|)."""
    i1, i2, i3 = p[P_I1], p[P_I2], p[P_I3]
    half = 0.5 * (i1 + i2 + i3)
    hh = 0.5 * h
    t1, t2, t3 = _torque(p, y[0], y[1], y[2], y[3])
    k1, k2, k3 = y[4] + hh * t1, y[5] + hh * t2, y[6] + hh * t3
    x1, x2, x3 = hh * k1 / i1, hh * k2 / i2, hh * k3 / i3
    s = 1.0 / math.sqrt(1.0 + x1 * x1 + x2 * x2 + x3 * x3)
    its, _, _, _, _ = position_step(
        half - i1, half - i2, half - i3, h * k1, h * k2, h * k3, s, s * x1, s * x2, s * x3
    )
    return its, 2.0 * max(abs(x1), abs(x2), abs(x3))


# The form this scheme runs in (kept here so that the methods module need not know it).
FORM = FORM_BODY
