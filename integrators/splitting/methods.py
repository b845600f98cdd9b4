"""Splitting methods: the Strang step on either state form and its compositions.

One method per coefficient table (compositions.py), each running in both forms:

- euler: H = H_a + H_b on the canonical Euler-angle variables; A = H_a (theta, psi move
  linearly), B = H_b (theta fixed: kick p_theta, move phi and psi). Symplectic.
- body: kinetic and potential energy on (q, m); A = the exact free flow (for I1 != I2 its
  symmetric second-order composition with a turn about body axis 2), B = the kick from gravity.
  Every piece is the exact flow of a Hamiltonian on the Lie-Poisson space, so the method is a
  Poisson map (symplectic on the coadjoint orbit), for any principal moments and centre of mass.

Each method has a `-kahan` twin that evaluates every sub-flow as an increment free of
cancellation and adds it with compensated summation (TwoSum), so that round-off grows like the
square root of the number of steps (Hairer, McLachlan and Razakarivony, BIT 48 (2008) 231).

Settings: {"step": h}. A negative h runs backwards (time reversal); the runner uses h > 0.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from topdrift.integrators.base import (
    ST_OK,
    Method,
    MethodInfo,
    MethodRefused,
    Stepper,
    name_key,
)
from topdrift.integrators.splitting.compositions import TABLES, SplittingTable
from topdrift.integrators.splitting.kernels import (
    close_compensated,
    close_plain,
    run_compensated,
    run_plain,
)
from topdrift.models import FORM_BODY, FORM_SIZE, RigidBody, form_code
from topdrift.models.body import P_I1, P_I2

# A requested interval may differ from a whole number of steps by this much, relative.
GRID_RTOL = 1e-9

# What every splitting here keeps to round-off by construction, in both forms: euler: p_phi
# and p_psi are never written (the same bits after any number of steps), |q| is 1 trivially;
# body: both pieces keep L.e_z in exact arithmetic (in the plain variant round-off moves it by
# about 3e-13 relative over 10^6 steps, tests/test_splitting.py), m3 is never written when the
# body is symmetric with chi on axis 3 (the only case in which p_psi is an invariant), and
# the free flow renormalises q every step. Energy is not kept by any splitting, only bounded.
KEEPS = ("p_phi", "p_psi", "norm")


@dataclass
class SplittingStepper(Stepper):
    step: float = 0.0
    kick: np.ndarray = field(default_factory=lambda: np.zeros(0))  # h-scaled b_0..b_s
    drift: np.ndarray = field(default_factory=lambda: np.zeros(0))  # h-scaled a_1..a_s
    compensated: bool = False
    t0: float = 0.0
    n: int = 0  # steps taken since t0; t on the grid is t0 + n h
    w: np.ndarray = field(default_factory=lambda: np.zeros(0))  # open state
    e: np.ndarray = field(default_factory=lambda: np.zeros(0))  # compensation terms
    fresh: np.ndarray = field(default_factory=lambda: np.ones(1, dtype=np.int64))
    scratch: np.ndarray = field(default_factory=lambda: np.zeros(0))
    # name_key of the method: every table has the same arrays, so only this tells their
    # snapshots apart.
    method_key: int = 0

    def _close(self) -> None:
        out = np.empty_like(self.w)
        if self.compensated:
            close_compensated(
                self.form,
                self.params,
                self.kick,
                self.w,
                self.e,
                self.scratch,
                self.fresh,
                out,
                self.counters,
            )
        else:
            close_plain(self.form, self.params, self.kick, self.w, self.fresh, out, self.counters)
        self.y = out

    def _run(self, k: int) -> tuple[int, int]:
        if self.compensated:
            return run_compensated(
                self.form,
                self.params,
                self.kick,
                self.drift,
                k,
                self.w,
                self.e,
                self.scratch,
                self.fresh,
                self.counters,
            )
        return run_plain(
            self.form, self.params, self.kick, self.drift, k, self.w, self.fresh, self.counters
        )

    def advance_to(self, t_end: float) -> int:
        if self.status != ST_OK:
            return self.status
        t_end = float(t_end)
        x = (t_end - self.t) / self.step
        k = round(x)
        if not abs(x - k) <= GRID_RTOL * max(1.0, abs(k)):
            raise MethodRefused(
                f"step {self.step!r}: the interval from t = {self.t!r} to {t_end!r} is "
                f"{x:.12g} steps, not a whole number; choose output times on the step grid"
            )
        if k < 0:
            raise MethodRefused(
                f"cannot go back from t = {self.t!r} to {t_end!r} with step {self.step!r}; "
                f"start a stepper with the opposite step instead"
            )
        if k == 0:
            return ST_OK
        entry = (self.w.copy(), self.e.copy(), self.fresh.copy())
        status, done = self._run(k)
        if status != ST_OK:
            # Keep the last good state: repeat the good steps from the entry state (the same
            # bits, since a step depends on nothing else); the counters keep the work of both.
            self.w[:], self.e[:], self.fresh[:] = entry
            spare = self.counters.copy()
            self._run(done)
            self.counters[:] = spare
            self.n += done
            self.t = self.t0 + self.n * self.step
            self.t_fail = self.t
            self.status = int(status)
            self._close()
            return self.status
        self.n += k
        self.t = t_end
        self._close()
        return ST_OK

    def snapshot(self) -> dict:
        return {
            "method_key": self.method_key,
            "t": self.t,
            "t0": self.t0,
            "n": self.n,
            "step": self.step,
            "w": self.w.copy(),
            "e": self.e.copy(),
            "fresh": int(self.fresh[0]),
            "y": self.y.copy(),
            "counters": self.counters.copy(),
            "status": self.status,
            "t_fail": self.t_fail,
        }

    def restore(self, snap: dict) -> None:
        self.check_snapshot(snap)
        if snap["method_key"] != self.method_key:
            raise MethodRefused("snapshot: made by another splitting method")
        if snap["step"] != self.step:
            raise MethodRefused(f"snapshot: made with step {snap['step']!r}, not {self.step!r}")
        self.t = float(snap["t"])
        self.t0 = float(snap["t0"])
        self.n = int(snap["n"])
        self.w[:] = snap["w"]
        self.e[:] = snap["e"]
        self.fresh[0] = int(snap["fresh"])
        self.y = np.array(snap["y"], dtype=np.float64)
        self.counters[:] = snap["counters"]
        self.status = int(snap["status"])
        self.t_fail = float(snap["t_fail"])


class SplittingMethod(Method):
    def __init__(self, table: SplittingTable, compensated: bool) -> None:
        self.table = table
        self.compensated = compensated
        self._kick, self._drift = table.sequence()
        name = "leapfrog" + (f"-{table.key}" if table.key else "")
        if compensated:
            name += "-kahan"
        evals = 2 * table.stages
        self.info = MethodInfo(
            name=name,
            family="splitting",
            order=table.order,
            symplectic=True,
            forms=("euler", "body"),
            control="step",
            keeps=KEEPS,
            compensated=compensated,
            description=(
                f"{table.title}; euler: drift H_a / kick H_b on the Euler angles, body: exact "
                f"free flow / gravity kick on (q, m); {evals} sub-flows per step"
                + (
                    "; refused in the body form for I1 != I2 (needs exact sub-flows)"
                    if table.kind != "composition"
                    else ""
                )
                + ("; compensated summation of the increments" if compensated else "")
            ),
            source=table.source,
        )

    def _refuse_inexact(self, params: np.ndarray, form: int) -> None:
        # A table that is not a composition of the symmetric Strang step relies on exact
        # sub-flows for its order; the body form's free flow is exact only for I1 == I2
        # (otherwise a symmetric second-order composition), and then the order falls to 2.
        if self.table.kind != "composition" and form == FORM_BODY and params[P_I1] != params[P_I2]:
            raise MethodRefused(
                f"{self.name}: reaches order {self.table.order} only with exact sub-flows, and "
                f"the free flow of a body with I1 != I2 is a second-order composition; use a "
                f"composition method (e.g. leapfrog-kl6, leapfrog-kl8)"
            )

    def check(self, body: RigidBody, form: str, settings: dict) -> None:
        super().check(body, form, settings)
        self._refuse_inexact(body.params(), form_code(form))

    def start(
        self, form: int, params: np.ndarray, t0: float, y0: np.ndarray, settings: dict
    ) -> Stepper:
        h = settings.get("step")
        if isinstance(h, bool) or not isinstance(h, (int, float)):
            raise MethodRefused(f"{self.name}: needs a step, got {h!r}")
        h = float(h)
        if not np.isfinite(h) or h == 0.0:
            raise MethodRefused(f"{self.name}: needs a finite non-zero step, got {h!r}")
        form = int(form)
        n = FORM_SIZE[form]
        self._refuse_inexact(params, form)
        y = np.array(y0, dtype=np.float64)
        if y.shape != (n,):
            raise MethodRefused(f"{self.name}: a state of this form has {n} entries, not {y.size}")
        return SplittingStepper(
            form=form,
            params=np.ascontiguousarray(params, dtype=np.float64),
            t=float(t0),
            y=y.copy(),
            step=h,
            kick=np.ascontiguousarray(self._kick * h),
            drift=np.ascontiguousarray(self._drift * h),
            compensated=self.compensated,
            t0=float(t0),
            n=0,
            w=y.copy(),
            e=np.zeros(n),
            fresh=np.ones(1, dtype=np.int64),
            scratch=np.zeros(n),
            method_key=name_key(self.name),
        )


METHODS = [SplittingMethod(t, c) for t in TABLES for c in (False, True)]
