"""The kernels of the variable-step splittings (sundman.py): Euler form only.

Step control after Hairer and Soderlind, SIAM J. Sci. Comput. 26 (2005) 1838: a step-density
variable rho rides beside the state, the step is h = eps / rho, and rho follows the monitor
sigma along the motion (rho sigma = 1 is what the exact flow of the time-transformed system
keeps) through the symmetric update

    rho_(n+1/2) = rho_n + eps/2 G(y_n),   y_(n+1) = Phi(eps / rho_(n+1/2)) y_n,
    rho_(n+1)   = rho_(n+1/2) + eps/2 G(y_(n+1)),

G = d(ln rho)/dt along the motion. With Phi symmetric (a palindromic splitting table) the map
(y_n, rho_n) -> (y_(n+1), rho_(n+1)) run with -eps is its own inverse: the step sequence is
time-reversible, and nothing in it depends on the output times.

The monitor: sigma = 1 / sqrt(1 + omega^2 / Omega^2), omega^2 = theta'^2 + phi'^2 + psi'^2 (a
smooth stand-in for the fastest Euler-angle rate; phi' and psi' grow like 1 / sin^2(theta) at the
pole), Omega^2 a rate scale from the invariants (sundman.py). Every quantity G needs is at hand
where a step ends: the kick's rates at that theta (models/flows.py kick_euler_rates, which the
closing kick evaluates anyway) give phi', psi' and p_theta' (the torque), so G costs no force
evaluation. The closing kick of one step and the opening kick of the next share the rates: one
torque evaluation per step end, s per step for an s-stage table, as for the fixed-step kernel.

aux holds what belongs to the point y_n: the kick rates there (models/flows.py KR_*), rho_n and
G(y_n). clock holds t_n as an unevaluated sum (hi, lo), added with TwoSum: the variable steps
do not add up to round numbers, and the time of the millionth step should not carry a million
roundings.
"""

from __future__ import annotations

import math

from numba import njit

from topdrift.integrators.base import (
    C_EVALS,
    C_FORCE_EVALS,
    C_STEPS,
    ST_DIVERGED,
    ST_OK,
    ST_SINGULAR,
    ST_STEP_UNDERFLOW,
)
from topdrift.models.body import P_H3, P_INV1, P_INV3
from topdrift.models.dynamics import singular
from topdrift.models.flows import (
    KR_COS,
    KR_PHI,
    KR_PSI,
    KR_PTHETA,
    KR_SIN,
    N_KICK_RATES,
    kick_euler_apply,
    kick_euler_rates,
)
from topdrift.models.forms import FORM_EULER
from topdrift.models.turns import fold_euler

X_RHO = N_KICK_RATES  # aux[X_RHO]: rho_n
X_G = N_KICK_RATES + 1  # aux[X_G]: G(y_n)
N_AUX = N_KICK_RATES + 2
N_EULER = 6


@njit(cache=True, error_model="numpy", inline="always")
def _drift(h, y, p):
    # models/flows.py drift_euler, written out as splitting/kernels.py does (a call costs ~7 %)
    y[1] += h * y[4] * p[P_INV1]
    y[2] += h * (y[5] - p[P_H3]) * p[P_INV3]


@njit(cache=True, error_model="numpy", inline="always")
def _omega2_and_g(y, p, omega2, rates):
    """(omega^2, G) at y from the kick rates there. omega^2 = theta'^2 + phi'^2 + psi'^2;
    G = d(ln rho)/dt = (theta' theta'' + phi' phi'' + psi' psi'') / (Omega^2 + omega^2), with
    (A = p_phi - p_psi cos theta = I1 s^2 phi', d A/dt = p_psi s theta'):
      theta'' = p_theta' / I1,
      phi''   = theta' (p_psi s^2 - 2 A c) / (I1 s^3) = theta' (p_psi / I1 - 2 c phi') / s,
      psi''   = s theta' phi' - c phi''   (psi' = (p_psi - h3) / I3 - c phi')."""
    inv1 = p[P_INV1]
    s = rates[KR_SIN]
    c = rates[KR_COS]
    th1 = y[4] * inv1
    ph1 = rates[KR_PHI]
    ps1 = (y[5] - p[P_H3]) * p[P_INV3] + rates[KR_PSI]
    th2 = rates[KR_PTHETA] * inv1
    ph2 = th1 * (y[5] * inv1 - 2.0 * c * ph1) / s
    ps2 = s * th1 * ph1 - c * ph2
    w2 = th1 * th1 + ph1 * ph1 + ps1 * ps1
    return w2, (th1 * th2 + ph1 * ph2 + ps1 * ps2) / (omega2 + w2)


@njit(cache=True, error_model="numpy")
def monitor_at(y, p, omega2, out):
    """For tests and the start: out[0] = rho(y) = 1 / sigma(y), out[1] = G(y)."""
    rates = out[2:]
    kick_euler_rates(y, p, rates)
    w2, g = _omega2_and_g(y, p, omega2, rates)
    out[0] = math.sqrt(1.0 + w2 / omega2)
    out[1] = g


@njit(cache=True, error_model="numpy")
def start_point(p, omega2, y, aux, counters):
    """aux at the start y_0: the kick rates, rho_0 = 1 / sigma(y_0) and G(y_0) (one torque)."""
    kick_euler_rates(y, p, aux)
    w2, g = _omega2_and_g(y, p, omega2, aux)
    aux[X_RHO] = math.sqrt(1.0 + w2 / omega2)
    aux[X_G] = g
    counters[C_EVALS] += 1
    counters[C_FORCE_EVALS] += 1


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
def sundman_steps(
    p, kick, drift, eps, omega2, t_end, max_steps, y, aux, clock, backup, counters, turns
):
    """Variable steps of the table (kick b_0..b_s, drift a_1..a_s, unscaled) with signed eps,
    as long as the next step ends on this side of t_end, at most max_steps of them.
    y (closed state at t_n), aux and clock advance; backup is scratch of N_EULER + N_AUX.
    Returns (status, steps done, reached): reached when the next step would pass t_end. On a
    failure y, aux and clock are those of the last good step."""
    s = drift.shape[0]
    status = ST_OK
    done = 0
    attempted = 0
    reached = False
    half = 0.5 * eps
    for _ in range(max_steps):
        rho_half = aux[X_RHO] + half * aux[X_G]
        if not (rho_half > 0.0 and math.isfinite(rho_half)):
            status = ST_DIVERGED  # the step density left (0, inf): eps too long for the monitor
            break
        h = eps / rho_half
        over = (clock[0] - t_end) + clock[1] + h
        if (eps > 0.0 and over > 0.0) or (eps < 0.0 and over < 0.0):
            reached = True
            break
        if abs(h) <= 4.0 * 2.220446049250313e-16 * abs(clock[0]):
            status = ST_STEP_UNDERFLOW
            break
        for i in range(N_EULER):
            backup[i] = y[i]
        for i in range(N_AUX):
            backup[N_EULER + i] = aux[i]
        attempted += 1
        kick_euler_apply(kick[0] * h, y, aux)  # the rates at theta_n, cached in aux
        for i in range(s - 1):
            _drift(drift[i] * h, y, p)
            kick_euler_rates(y, p, aux)
            kick_euler_apply(kick[i + 1] * h, y, aux)
        _drift(drift[s - 1] * h, y, p)
        bad = singular(FORM_EULER, y)
        if not bad:
            kick_euler_rates(
                y, p, aux
            )  # at theta_(n+1): this step's closing kick, the next's opening
            kick_euler_apply(kick[s] * h, y, aux)
            acc = 0.0
            for i in range(N_EULER):
                acc += y[i]
            w2, g = _omega2_and_g(y, p, omega2, aux)
            if not math.isfinite(acc + g):
                status = ST_DIVERGED
        else:
            status = ST_SINGULAR
        if status != ST_OK:
            for i in range(N_EULER):
                y[i] = backup[i]
            for i in range(N_AUX):
                aux[i] = backup[N_EULER + i]
            break
        aux[X_RHO] = rho_half + half * g
        aux[X_G] = g
        _add_time(clock, h)
        fold_euler(y, turns)
        done += 1
    counters[C_STEPS] += done
    counters[C_EVALS] += 2 * s * attempted
    counters[C_FORCE_EVALS] += s * attempted  # one torque per inner kick and one per step end
    return status, done, reached


@njit(cache=True, error_model="numpy")
def sundman_sample(p, kick, drift, dt, y, aux, out, rates, counters, turns_out):
    """The state at t_n + dt by one step of dt of the table from the point (y, aux), into out
    (y and aux unchanged: the sample is never fed back into the step sequence). rates is scratch
    of N_KICK_RATES; turns_out starts as the point's turns. Returns the status of out."""
    s = drift.shape[0]
    for i in range(N_EULER):
        out[i] = y[i]
    if dt == 0.0:
        return ST_OK
    for i in range(N_KICK_RATES):
        rates[i] = aux[i]
    kick_euler_apply(kick[0] * dt, out, rates)
    for i in range(s - 1):
        _drift(drift[i] * dt, out, p)
        kick_euler_rates(out, p, rates)
        kick_euler_apply(kick[i + 1] * dt, out, rates)
    _drift(drift[s - 1] * dt, out, p)
    counters[C_EVALS] += 2 * s
    counters[C_FORCE_EVALS] += s
    if singular(FORM_EULER, out):
        return ST_SINGULAR
    kick_euler_rates(out, p, rates)
    kick_euler_apply(kick[s] * dt, out, rates)
    acc = 0.0
    for i in range(N_EULER):
        acc += out[i]
    if not math.isfinite(acc):
        return ST_DIVERGED
    fold_euler(out, turns_out)
    return ST_OK
