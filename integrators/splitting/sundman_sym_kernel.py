"""The kernels of the symplectic variable-step splittings (sundman_sym.py): Euler form only.

The time transformation in extended phase space (Hairer, "Variable time step integration with
symplectic methods", Appl. Numer. Math. 25 (1997) 219). Positions Q = (t, theta, phi, psi),
momenta P = (e, p_theta, p_phi, p_psi), and the Euler-form Hamiltonian of the symmetric top

    H = T + C + V,   T = p_theta^2 / (2 I1),   C = (p_psi - h3)^2 / (2 I3),
    V(theta) = A^2 / (2 I1 s^2) + M g l c,     A = p_phi - p_psi c,  s, c = sin, cos(theta)

(phi, psi cyclic). With a step-size function g(theta) > 0 the Hamiltonian

    K(Q, P) = g(theta) (H + e)

generates, in a fictive time s, dt/ds = dK/de = g, de/ds = -dK/dt = 0, and on K = 0
(e = -H(y_0)) the orbits of H with the clock running at dt/ds = g: a fixed step eps in s is a
step of about eps g in t.

One step (the generalized Stormer-Verlet method applied to K; Hairer, Lubich and Wanner,
Geometric Numerical Integration, 2nd ed., Sec. VI.3 and VIII.2 [from memory]), eps' = gamma eps:

  half kick, implicit in p_theta only (t, phi, psi are cyclic: e, p_phi, p_psi do not move):
    x = p_theta_n - eps'/2 dK/dtheta(theta_n, x),
    dK/dtheta = g' (T(x) + W) - g F,   W = V + C + e,   F = -dV/dtheta (the kick's torque),
    i.e. a x^2 + x + c0 = 0 with a = eps' g' / (4 I1), c0 = eps'/2 (g' W - g F) - p_theta_n;
    the root that tends to the explicit kick (x -> -c0 as eps -> 0) is
    x = -2 c0 / (1 + sqrt(1 - 4 a c0)): no cancellation, and no real root (1 - 4 a c0 < 0, a
    step far too long for the monitor's slope) is ST_NO_CONVERGENCE.
  drift, implicit in theta_(n+1) only (the trapezoid of dK/dP):
    theta_(n+1) = theta_n + eps'/2 (g_n + g_(n+1)) x / I1, solved by Newton from the
    third-order guess theta_n + eps' v g_n (1 + eps' v g_n' / 2), v = x / I1, until the
    correction is at round-off (at most NEWTON_MAX iterations, else ST_NO_CONVERGENCE);
    then explicitly
    t     += eps'/2 (g_n + g_(n+1)),
    phi   += eps'/2 (g_n r_n + g_(n+1) r_(n+1)),                   r = A / (I1 s^2),
    psi   += eps'/2 (g_n (w3 - c_n r_n) + g_(n+1) (w3 - c_(n+1) r_(n+1))), w3 = (p_psi - h3)/I3.
  half kick, explicit: p_theta_(n+1) = x - eps'/2 dK/dtheta(theta_(n+1), x).

It is the composition of the symplectic Euler step and its adjoint on K: symmetric and
symplectic in (Q, P) for any smooth K. A palindromic composition of it (compositions.py) is
symmetric and symplectic of order 4 or 6 in eps. e, p_phi and p_psi are never written.

The monitor g depends on theta alone, so that dK/dP is g dH/dP and the half kick moves p_theta
only: g = 1 / sqrt(1 + omega^2 / Omega^2), omega^2 = r0^2 (1 + c^2), the square of the kick's
rates (phi', psi') at theta, r0 = A0 / (I1 s^2) with A0 = p_phi0 - p_psi0 c, p_phi0, p_psi0 and
Omega^2 frozen at the start (on the motion p_phi = p_phi0 and p_psi = p_psi0 to the bit, and
frozen constants keep g a function of theta only when the Jacobian is taken in p_phi, p_psi).
It goes to 0 like s^2 at the pole when A0 does not vanish there. Its slope:
    g' = -g^3 omega^2' / (2 Omega^2),
    omega^2' = 2 r0 r0' (1 + c^2) - 2 r0^2 c s,  r0' = (p_psi0 / I1 - 2 c r0) / s.

aux holds what belongs to theta at the point: the kick's rates in models/flows.py's KR_* layout
(so that sundman_kernel.sundman_sample can take a side step from it), then g, g' and V.
frozen holds p_phi0, p_psi0, 1 / Omega^2 and e.
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
    ST_SINGULAR,
    ST_STEP_UNDERFLOW,
)
from topdrift.models.body import P_H3, P_INV1, P_INV3, P_MGZ
from topdrift.models.flows import KR_COS, KR_PHI, KR_PSI, KR_PTHETA, KR_SIN, N_KICK_RATES
from topdrift.models.turns import fold_euler

Q_G = N_KICK_RATES  # aux[Q_G]: g at the point's theta
Q_DG = N_KICK_RATES + 1  # g'
Q_V = N_KICK_RATES + 2  # V
N_AUX = N_KICK_RATES + 3
F_PPHI0, F_PPSI0, F_INV_OMEGA2, F_E = range(4)
N_FROZEN = 4
N_EULER = 6
NEWTON_MAX = 12
# Newton stops once its correction is below this many units of theta's last place.
NEWTON_ULPS = 4.0
# ... or once it stops shrinking below this relative size (the residual's rounding floor).
NOISE = 1e-12
EPS64 = 2.220446049250313e-16
LAND_RTOL = 1e-9


@njit(cache=True, error_model="numpy", inline="always")
def _a_exact(p_phi, p_psi, s, c):
    """A = p_phi - p_psi c without the cancellation near the poles, where p_phi and +-p_psi
    nearly agree (pole-passage: A / p_psi ~ 4e-3): 1 -+ c = s^2 / (1 +- c)."""
    if c >= 0.0:
        return (p_phi - p_psi) + p_psi * (s * s / (1.0 + c))
    return (p_phi + p_psi) - p_psi * (s * s / (1.0 - c))


@njit(cache=True, error_model="numpy", inline="always")
def _g_dg(s, c, p, frozen):
    """(g, g') at the theta whose sine and cosine are s, c (module docstring)."""
    inv1 = p[P_INV1]
    q = 1.0 / s  # one division where three would do (a division's latency dominates here)
    r0 = _a_exact(frozen[F_PPHI0], frozen[F_PPSI0], s, c) * inv1 * (q * q)
    dr0 = (frozen[F_PPSI0] * inv1 - 2.0 * c * r0) * q
    cc = 1.0 + c * c
    w2 = r0 * r0 * cc
    dw2 = 2.0 * r0 * dr0 * cc - 2.0 * r0 * r0 * c * s
    g = 1.0 / math.sqrt(1.0 + w2 * frozen[F_INV_OMEGA2])
    return g, -0.5 * g * g * g * dw2 * frozen[F_INV_OMEGA2]


@njit(cache=True, error_model="numpy", inline="always")
def _at_theta(y, p, frozen, aux):
    """aux at y's theta: the kick's rates (KR_*), g, g' and V."""
    theta = y[1]
    p_psi = y[5]
    s = math.sin(theta)
    c = math.cos(theta)
    a = _a_exact(y[3], p_psi, s, c)
    r = a * p[P_INV1] / (s * s)
    aux[KR_PHI] = r
    aux[KR_PSI] = -(c * r)
    aux[KR_PTHETA] = r * (a * c / s - p_psi * s) + p[P_MGZ] * s
    aux[KR_SIN] = s
    aux[KR_COS] = c
    g, dg = _g_dg(s, c, p, frozen)
    aux[Q_G] = g
    aux[Q_DG] = dg
    aux[Q_V] = 0.5 * a * r + p[P_MGZ] * c


@njit(cache=True, error_model="numpy")
def sym_start(p, frozen, y, aux, counters):
    """aux at the start point (one evaluation of the rates, g and g')."""
    _at_theta(y, p, frozen, aux)
    counters[C_EVALS] += 1
    counters[C_FORCE_EVALS] += 1


@njit(cache=True, error_model="numpy")
def monitor_g(theta, p, frozen, out):
    """For tests: out[0] = g(theta), out[1] = g'(theta)."""
    g, dg = _g_dg(math.sin(theta), math.cos(theta), p, frozen)
    out[0] = g
    out[1] = dg


@njit(cache=True, error_model="numpy", inline="always")
def _add_time(clock, h):
    """clock (hi, lo) += h, TwoSum and a renormalisation (common practice, Knuth's TwoSum)."""
    hi = clock[0]
    s = hi + h
    bp = s - hi
    err = (hi - (s - bp)) + (h - bp)
    lo = clock[1] + err
    top = s + lo
    clock[1] = lo - (top - s)
    clock[0] = top


@njit(cache=True, error_model="numpy")
def sym_substep(p, frozen, ep, y, aux, clock, counters):
    """One generalized Stormer-Verlet step of length ep in s on K, in place on y (at aux's
    theta), aux and clock. Returns the status; on a failure y, aux, clock are partly written
    (the caller restores them). Counts one evaluation per Newton iteration and per point."""
    inv1 = p[P_INV1]
    half = 0.5 * ep
    cw = 0.5 * (y[5] - p[P_H3]) * (y[5] - p[P_H3]) * p[P_INV3] + frozen[F_E]  # C + e
    w3 = (y[5] - p[P_H3]) * p[P_INV3]
    g0 = aux[Q_G]
    dg0 = aux[Q_DG]
    # the implicit half kick: a x^2 + x + c0 = 0
    qa = half * dg0 * 0.5 * inv1
    c0 = half * (dg0 * (aux[Q_V] + cw) - g0 * aux[KR_PTHETA]) - y[4]
    disc = 1.0 - 4.0 * qa * c0
    if not disc >= 0.0:
        return ST_NO_CONVERGENCE
    x = -2.0 * c0 / (1.0 + math.sqrt(disc))
    # the implicit drift of theta: f(u) = u - theta_n - half v (g0 + g(u)) = 0
    v = x * inv1
    th0 = y[1]
    u = th0 + ep * v * g0 * (1.0 + 0.5 * ep * v * dg0)
    done = False
    last = math.inf
    for _ in range(NEWTON_MAX):
        g1, dg1 = _g_dg(math.sin(u), math.cos(u), p, frozen)
        counters[C_EVALS] += 1
        f = u - th0 - half * v * (g0 + g1)
        du = f / (1.0 - half * v * dg1)
        if not math.isfinite(du):
            return ST_DIVERGED
        # converged: a correction at round-off, or one that no longer shrinks once small
        # (the residual's own rounding, from g's, is reached)
        if abs(du) <= NEWTON_ULPS * EPS64 * abs(u) or (
            abs(du) >= last and abs(du) <= NOISE * abs(u)
        ):
            done = True
            break
        u -= du
        last = abs(du)
    if not done:
        return ST_NO_CONVERGENCE
    if not (0.0 < u < math.pi):
        return ST_SINGULAR
    r0 = aux[KR_PHI]
    c_0 = aux[KR_COS]
    y[1] = u
    _at_theta(y, p, frozen, aux)
    counters[C_EVALS] += 1
    counters[C_FORCE_EVALS] += 1
    g1 = aux[Q_G]
    r1 = aux[KR_PHI]
    y[0] += half * (g0 * r0 + g1 * r1)
    y[2] += half * (g0 * (w3 - c_0 * r0) + g1 * (w3 + aux[KR_PSI]))
    _add_time(clock, half * (g0 + g1))
    # the explicit half kick at theta_(n+1)
    y[4] = x - half * (aux[Q_DG] * (0.5 * x * x * inv1 + aux[Q_V] + cw) - g1 * aux[KR_PTHETA])
    return ST_OK


@njit(cache=True, error_model="numpy")
def sym_step(p, frozen, gammas, eps, y, aux, clock, counters):
    """One step of the composition (weights gammas, palindromic) with step eps in s."""
    for i in range(gammas.shape[0]):
        st = sym_substep(p, frozen, gammas[i] * eps, y, aux, clock, counters)
        if st != ST_OK:
            return st
    acc = y[0] + y[2] + y[4] + clock[0]
    if not math.isfinite(acc):
        return ST_DIVERGED
    return ST_OK


@njit(cache=True, error_model="numpy")
def sym_steps(p, frozen, gammas, eps, t_end, max_steps, y, aux, clock, backup, counters, turns):
    """Steps of signed eps as long as they end on this side of t_end, at most max_steps.
    A step that would pass t_end is taken, found to pass, and undone (its evaluations are
    counted: the one wasted step per output interval). backup is scratch of
    N_EULER + N_AUX + 2. Returns (status, steps done, reached); on a failure y, aux and
    clock are those of the last good step."""
    status = ST_OK
    done = 0
    reached = False
    nb = N_EULER + N_AUX
    for _ in range(max_steps):
        for i in range(N_EULER):
            backup[i] = y[i]
        for i in range(N_AUX):
            backup[N_EULER + i] = aux[i]
        backup[nb] = clock[0]
        backup[nb + 1] = clock[1]
        status = sym_step(p, frozen, gammas, eps, y, aux, clock, counters)
        if status == ST_OK:
            dt = (clock[0] - backup[nb]) + (clock[1] - backup[nb + 1])
            # a step that passes t_end by less than LAND_RTOL of itself lands on it: a run
            # turned back retraces its clock only to round-off amplified by the flow (4e-15 s
            # after 3000 steps of 2e-4 and back on pole-passage) and must not stop one step
            # short of its start; the sample is then a side step of at most LAND_RTOL dt
            over = (clock[0] - t_end) + clock[1] - LAND_RTOL * dt
            if (eps > 0.0 and over > 0.0) or (eps < 0.0 and over < 0.0):
                reached = True
            elif not (dt * eps > 0.0) or abs(dt) <= 4.0 * EPS64 * abs(clock[0]):
                status = ST_STEP_UNDERFLOW  # the clock stood still or ran the wrong way
        if status != ST_OK or reached:
            for i in range(N_EULER):
                y[i] = backup[i]
            for i in range(N_AUX):
                aux[i] = backup[N_EULER + i]
            clock[0] = backup[nb]
            clock[1] = backup[nb + 1]
            break
        fold_euler(y, turns)
        done += 1
    counters[C_STEPS] += done
    return status, done, reached
