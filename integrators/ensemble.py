"""Ensembles: one kernel advances many starts of the same body at once, in parallel.

The step kernels of the splitting, Gauss-Legendre, first-order engine, Lie-group Runge-Kutta and
constrained (RATTLE) methods run once per
start inside a numba `prange` loop over the starts, so an ensemble is the same arithmetic as N
separate runs (member j gives the same bits as a single run from start j) spread over the cores.
Used for spread-of-outcome studies (the chaotic top) and for the round-off study (Brouwer's
law), where many perturbed starts turn one noisy error curve into a statistic.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from topdrift.integrators.constrained.kernel import rattle_steps
from topdrift.integrators.constrained.methods import ConstrainedMethod
from topdrift.integrators.engine.kernel import engine_steps
from topdrift.integrators.engine.methods import EngineMethod
from topdrift.integrators.gauss.kernel import N_ITERS, N_MEMO, gauss_steps, work_size
from topdrift.integrators.gauss.methods import GaussMethod
from topdrift.integrators.liegroup.kernel import liegroup_steps
from topdrift.integrators.liegroup.methods import LieGroupMethod
from topdrift.integrators.splitting.kernels import (
    close_compensated,
    close_plain,
    run_compensated,
    run_plain,
)
from topdrift.integrators.splitting.methods import SplittingMethod
from topdrift.models import FORM_SIZE
from topdrift.models.flows import FREE_COMPOSED, FREE_EXACT
from topdrift.models.turns import N_TURNS

from .base import N_COUNTERS, ST_OK, MethodRefused, grid_steps
from .lane_ensemble import lanes_apply, run_lane_blocks

# Members per block of the lane kernel: a block is advanced by one thread as one vector loop per
# sub-flow; 64 members of 7 components are 3.5 kB, in the first-level cache with room to spare.
LANE_BLOCK = 64


@njit(cache=True, parallel=True)
def _advance_plain(form, free, p, kick, drift, nsteps, W, fresh, counters, turns, status, out):
    for j in prange(W.shape[0]):
        if status[j] == ST_OK:
            st, _ = run_plain(
                form, free, p, kick, drift, nsteps, W[j], fresh[j], counters[j], turns[j]
            )
            status[j] = st
        close_plain(form, p, kick, W[j], fresh[j], out[j], counters[j])


@njit(cache=True, parallel=True)
def _advance_compensated(
    form, free, p, kick, drift, nsteps, W, E, D, fresh, counters, turns, status, out
):
    for j in prange(W.shape[0]):
        if status[j] == ST_OK:
            st, _ = run_compensated(
                form,
                free,
                p,
                kick,
                drift,
                nsteps,
                W[j],
                E[j],
                D[j],
                fresh[j],
                counters[j],
                turns[j],
            )
            status[j] = st
        close_compensated(form, p, kick, W[j], E[j], D[j], fresh[j], out[j], counters[j])


@njit(cache=True, parallel=True)
def _advance_gauss(
    form,
    p,
    h,
    nsteps,
    a,
    b,
    c,
    e,
    mu,
    b_hi,
    b_lo,
    compensated,
    max_iter,
    Y,
    C,
    F,
    M,
    Wk,
    counters,
    iters,
    turns,
    status,
):
    for j in prange(Y.shape[0]):
        if status[j] == ST_OK:
            st, _ = gauss_steps(
                form,
                Y[j],
                p,
                h,
                nsteps,
                a,
                b,
                c,
                e,
                mu,
                b_hi,
                b_lo,
                compensated,
                max_iter,
                C[j],
                F[j],
                M[j],
                Wk[j],
                counters[j],
                iters[j],
                turns[j],
            )
            status[j] = st


@njit(cache=True, parallel=True)
def _advance_engine(scheme, p, h, nsteps, Y, counters, status):
    for j in prange(Y.shape[0]):
        if status[j] == ST_OK:
            st, _ = engine_steps(scheme, Y[j], p, h, nsteps, counters[j])
            status[j] = st


@njit(cache=True, parallel=True)
def _advance_liegroup(scheme, p, h, nsteps, Y, counters, status):
    for j in prange(Y.shape[0]):
        if status[j] == ST_OK:
            st, _ = liegroup_steps(scheme, Y[j], p, h, nsteps, counters[j])
            status[j] = st


@njit(cache=True, parallel=True)
def _advance_constrained(scheme, p, h, nsteps, Y, counters, status):
    for j in prange(Y.shape[0]):
        if status[j] == ST_OK:
            st, _ = rattle_steps(scheme, Y[j], p, h, nsteps, counters[j])
            status[j] = st


class EnsembleStepper:
    """N starts of one body advanced together on the step grid of one splitting method.

    A member that fails (non-finite, or the Euler form at the pole) stops where it is with its
    status; the others go on. `y` holds the closed states (N x n) at `t`.

    `lanes`: advance the members of a plain splitting in SIMD lanes (lane_ensemble.py), blocks
    of LANE_BLOCK members over the threads; each member then differs from its single run by the
    lane sine and cosine's few ulps per call. None (the default) takes the lanes where they
    apply (`lanes_apply`: plain splittings, the Euler form, the body form of a symmetric body),
    False the scalar kernels, whose member j gives the same bits as a single run from start j.
    `uses_lanes` says which was taken."""

    def __init__(
        self,
        method,
        form: int,
        params: np.ndarray,
        t0: float,
        Y0: np.ndarray,
        step: float,
        lanes: bool | None = None,
    ):
        scalar_families = (EngineMethod, LieGroupMethod, ConstrainedMethod)
        if not isinstance(method, (SplittingMethod, GaussMethod, *scalar_families)):
            raise MethodRefused(
                f"{method.name}: ensembles run on the splitting methods (leapfrog and its "
                f"compositions), the Gauss-Legendre methods, plain or -kahan, the "
                f"first-order engine schemes, the Lie-group Runge-Kutta methods and rattle; "
                f"this method has no ensemble kernel"
            )
        Y0 = np.ascontiguousarray(Y0, dtype=np.float64)
        n = FORM_SIZE[form]
        if Y0.ndim != 2 or Y0.shape[1] != n or Y0.shape[0] < 1:
            raise MethodRefused(f"ensemble: starts must be an N x {n} array, got {Y0.shape}")
        single = method.start(form, params, t0, Y0[0], {"step": step})  # checks the method
        self.method = method
        self.form = int(form)
        self.params = single.params
        self.gauss = isinstance(method, GaussMethod)
        # The scalar body-form kernels: (scheme, y, p, h, nsteps, counters), nothing else kept.
        self.engine = isinstance(method, scalar_families)
        self.advance_scalar = (
            _advance_liegroup
            if isinstance(method, LieGroupMethod)
            else _advance_constrained
            if isinstance(method, ConstrainedMethod)
            else _advance_engine
        )
        self.step = float(step)
        self.compensated = method.info.compensated
        self.t0 = float(t0)
        self.t = float(t0)
        self.n = 0
        m = Y0.shape[0]
        self.W = Y0.copy()
        self.E = np.zeros_like(Y0)
        self.D = np.zeros_like(Y0)
        self.fresh = np.ones((m, 1), dtype=np.int64)
        self.counters = np.zeros((m, N_COUNTERS), dtype=np.int64)
        # Whole turns of phi and psi per member, as a single run counts them (models/turns.py).
        self.turns = np.zeros((m, N_TURNS), dtype=np.int64)
        self.status = np.zeros(m, dtype=np.int64)
        self.y = Y0.copy()
        if self.gauss:
            s = single.tab.b.shape[0]
            self.tab = single.tab
            self.max_iter = single.max_iter
            self.C = np.zeros_like(Y0)
            self.F = np.zeros((m, s * n))
            self.M = np.full((m, N_MEMO), np.nan)
            self.Wk = np.zeros((m, work_size(s, n)))
            self.iters = np.zeros((m, N_ITERS), dtype=np.int64)
        elif not self.engine:
            self.kick = single.kick
            self.drift = single.drift
            self.free = single.free
        covered = (
            not self.gauss
            and not self.engine
            and not self.compensated
            and self.free in (FREE_EXACT, FREE_COMPOSED)  # both the symmetric flow at I1 = I2
            and lanes_apply(self.form, self.params)
        )
        if lanes and not covered:
            raise MethodRefused(
                f"ensemble of {method.name}: the lane kernels cover plain splittings in the "
                f"Euler form and in the body form of a symmetric body (I1 = I2) only"
            )
        self.uses_lanes = bool(covered) if lanes is None else bool(lanes)
        if self.uses_lanes:
            self._lane_blocks(Y0)

    def _lane_blocks(self, Y0: np.ndarray) -> None:
        """The members as blocks of LANE_BLOCK lanes (blocks x components x lanes); the lanes
        past the last member hold member 0's start, never advance and are never read. The
        per-member counters and statuses are views of the blocks' own."""
        m, n = Y0.shape
        nb = -(-m // LANE_BLOCK)
        full = nb * LANE_BLOCK
        padded = np.concatenate([Y0, np.repeat(Y0[:1], full - m, axis=0)])
        self.lane_W = np.ascontiguousarray(padded.reshape(nb, LANE_BLOCK, n).transpose(0, 2, 1))
        self.lane_out = self.lane_W.copy()
        self.lane_fresh = np.ones((nb, 1), dtype=np.int64)
        self.lane_counters = np.zeros((nb, LANE_BLOCK, N_COUNTERS), dtype=np.int64)
        self.lane_turns = np.zeros((nb, N_TURNS, LANE_BLOCK), dtype=np.int64)
        self.lane_status = np.zeros((nb, LANE_BLOCK), dtype=np.int64)
        self.lane_live = np.zeros((nb, LANE_BLOCK), dtype=np.int64)
        self.lane_live.reshape(full)[:m] = 1
        self.lane_done = np.zeros((nb, LANE_BLOCK), dtype=np.int64)
        self.counters = self.lane_counters.reshape(full, N_COUNTERS)[:m]
        self.status = self.lane_status.reshape(full)[:m]

    def _advance_lanes(self, k: int) -> None:
        run_lane_blocks(
            self.form, self.params, self.kick, self.drift, k, self.lane_W, self.lane_fresh,
            self.lane_counters, self.lane_turns, self.lane_status, self.lane_live,
            self.lane_done, self.lane_out,
        )  # fmt: skip
        m, n = self.y.shape
        self.y[:] = self.lane_out.transpose(0, 2, 1).reshape(-1, n)[:m]
        self.turns[:] = self.lane_turns.transpose(0, 2, 1).reshape(-1, N_TURNS)[:m]

    def low_parts(self) -> np.ndarray | None:
        """What compensated summation has not yet added into `y` (N x n), where the state is
        exactly y + low: the Gauss-Legendre methods' Kahan terms. None when there is none to
        add (plain methods, and the splittings, whose `y` is already rounded once from
        w + (e + d))."""
        if self.gauss and self.compensated:
            return self.C
        return None

    def advance_to(self, t_end: float) -> np.ndarray:
        k = grid_steps(f"ensemble of {self.method.name}", self.t, t_end, self.step)
        if k < 0:
            raise MethodRefused(
                f"ensemble of {self.method.name}: t = {t_end!r} is before the current time "
                f"{self.t!r}; ensembles run forward only"
            )
        if k == 0:
            return self.status
        if self.uses_lanes:
            self._advance_lanes(k)
        elif self.engine:
            self.advance_scalar(
                self.method.scheme,
                self.params,
                self.step,
                k,
                self.y,
                self.counters,
                self.status,
            )
        elif self.gauss:
            t = self.tab
            _advance_gauss(
                self.form,
                self.params,
                self.step,
                k,
                t.a,
                t.b,
                t.c,
                t.e,
                t.mu,
                t.b_hi,
                t.b_lo,
                self.compensated,
                self.max_iter,
                self.y,
                self.C,
                self.F,
                self.M,
                self.Wk,
                self.counters,
                self.iters,
                self.turns,
                self.status,
            )
        elif self.compensated:
            _advance_compensated(
                self.form,
                self.free,
                self.params,
                self.kick,
                self.drift,
                k,
                self.W,
                self.E,
                self.D,
                self.fresh,
                self.counters,
                self.turns,
                self.status,
                self.y,
            )
        else:
            _advance_plain(
                self.form,
                self.free,
                self.params,
                self.kick,
                self.drift,
                k,
                self.W,
                self.fresh,
                self.counters,
                self.turns,
                self.status,
                self.y,
            )
        self.n += k
        self.t = float(t_end)
        return self.status
