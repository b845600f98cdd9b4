"""Splitting methods: the Strang step on either state form and its compositions.

One method per coefficient table (compositions.py), each running in both forms:

- euler: H = H_a + H_b on the canonical Euler-angle variables; A = H_a (theta, psi move
  linearly), B = H_b (theta fixed: kick p_theta, move phi and psi). Symplectic.
- body: kinetic and potential energy on (q, m); A = the exact free flow (for I1 != I2 by
  Jacobi elliptic functions, models/free_asymmetric.py), B = the kick from gravity. Every piece
  is the exact flow of a Hamiltonian on the Lie-Poisson space, so the method is a Poisson map
  (symplectic on the coadjoint orbit), for any principal moments and centre of mass, and every
  table reaches its order on any body.

Each composition of the Strang step also has a `-composed` twin whose body-form free flow, for
I1 != I2, is the cheaper second-order composition of the symmetric free flow with a turn about
body axis 2 (models/flows.py free_body_composed): still a Poisson map and of the table's order
(a composition of symmetric second-order steps), with a larger error constant. For I1 = I2 and
in the euler form the twin is the same method, to the bit. The Blanes-Moan tables have no such
twin: they are not compositions of the Strang step and need the exact sub-flows for their order.

Each method has a `-kahan` twin that evaluates every sub-flow as an increment free of
cancellation and adds it with compensated summation (TwoSum), so that round-off grows like the
square root of the number of steps (Hairer, McLachlan and Razakarivony, BIT 48 (2008) 231).

Settings: {"step": h}, a positive finite float. A stepper runs backwards (time reversal) when its
first advance_to asks for an earlier time; once it has taken a step it keeps that direction,
because its state carries the pending closing kick of the direction it goes (kernels.py).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from topdrift.integrators.base import (
    N_COUNTERS,
    ST_OK,
    Method,
    MethodInfo,
    MethodRefused,
    Stepper,
    grid_steps,
)
from topdrift.integrators.splitting.compositions import TABLES, SplittingTable
from topdrift.integrators.splitting.kernels import (
    close_compensated,
    close_plain,
    run_compensated_body,
    run_compensated_euler,
    run_plain_body,
    run_plain_euler,
)
from topdrift.integrators.validation import check_snapshot, snapshot_identity, stepper_fields
from topdrift.models import FORM_SIZE
from topdrift.models.body import P_ROTOR_GENERAL
from topdrift.models.flows import FREE_AXES, FREE_COMPOSED, FREE_EXACT
from topdrift.models.forms import FORM_EULER, FORM_NAMES

# What every splitting here keeps by construction (the rule: integrators/base.py). euler: p_phi
# and p_psi are never written (the same bits after any number of steps), |q| is 1 trivially.
# body: m3 is never written when the body is symmetric with chi on axis 3 (the only case in
# which p_psi is an invariant): to the bit; both pieces keep L.e_z in exact arithmetic and round-
# off moves it (about 3e-13 relative over 10^6 steps of the plain variant, tests/
# test_splitting.py), and the free flow renormalises q every step: to round-off. Energy is
# kept by no splitting, only bounded.
KEEPS_BY_FORM = {"euler": (("p_phi", "p_psi", "norm"), ()), "body": (("p_psi",), ("p_phi", "norm"))}
# The -axes twins (body form only): the rotations about axes 1 and 2 move m3, so p_psi is not
# kept even for a symmetric top; every piece is invariant under turns about the vertical, so
# L.e_z (p_phi) is kept to round-off, and q is renormalised every step.
KEEPS_AXES = {"body": ((), ("p_phi", "norm"))}
# The tables that get an -axes twin: the Strang step and one composition of order 4 and of 6.
AXES_TABLES = ("", "s4", "kl6")


@dataclass
class SplittingStepper(Stepper):
    """A run of a splitting method: the open state w (and its compensation e) on the grid
    t0 + n step, n signed (negative when running backwards); y is the closed state handed out."""

    method: Method | None = None
    settings: dict = field(default_factory=dict)  # checked settings, for the snapshot identity
    step: float = 0.0  # > 0; the direction is the sign of n
    kick: np.ndarray = field(default_factory=lambda: np.zeros(0))  # scaled b_0..b_s
    drift: np.ndarray = field(default_factory=lambda: np.zeros(0))  # scaled a_1..a_s
    compensated: bool = False
    free: int = FREE_EXACT  # the body form's free flow for I1 != I2 (models/flows.py)
    t0: float = 0.0
    n: int = 0  # steps taken since t0, signed; t on the grid is t0 + n step
    w: np.ndarray = field(default_factory=lambda: np.zeros(0))  # open state
    e: np.ndarray = field(default_factory=lambda: np.zeros(0))  # compensation terms
    fresh: np.ndarray = field(default_factory=lambda: np.ones(1, dtype=np.int64))
    scratch: np.ndarray = field(default_factory=lambda: np.zeros(0))
    direction: int = 1  # +1 forward, -1 backward: the sign the coefficients are scaled with

    def _face(self, direction: int) -> None:
        """Scale the coefficient tables for the direction: h times the table, or -h times it
        (the same bits as a stepper of step -h, which is what backwards means)."""
        if direction == self.direction:
            return
        signed = self.step if direction > 0 else -self.step
        self.kick = np.ascontiguousarray(self.method.kick_table * signed)
        self.drift = np.ascontiguousarray(self.method.drift_table * signed)
        self.direction = direction

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
        # The entry of this run's form only: a run compiles one form's loop, not both.
        if self.compensated:
            run = run_compensated_euler if self.form == FORM_EULER else run_compensated_body
            return run(
                self.free,
                self.params,
                self.kick,
                self.drift,
                k,
                self.w,
                self.e,
                self.scratch,
                self.fresh,
                self.counters,
                self.turns,
            )
        run = run_plain_euler if self.form == FORM_EULER else run_plain_body
        return run(
            self.free,
            self.params,
            self.kick,
            self.drift,
            k,
            self.w,
            self.fresh,
            self.counters,
            self.turns,
        )

    def advance_to(self, t_end: float) -> int:
        if self.status != ST_OK:
            return self.status
        t_end = float(t_end)
        name = self.method.name
        k = grid_steps(name, self.t, t_end, self.step)
        if k == 0:
            return ST_OK
        direction = 1 if k > 0 else -1
        if self.n != 0 and direction != self.direction:
            raise MethodRefused(
                f"{name}: cannot turn back from t = {self.t!r} to {t_end!r}: a splitting stepper "
                f"keeps the direction of its first step (its state holds that direction's "
                f"pending kick); start a new stepper at t = {self.t!r} instead"
            )
        self._face(direction)
        k = abs(k)
        entry = (self.w.copy(), self.e.copy(), self.fresh.copy(), self.turns.copy())
        status, done = self._run(k)
        if status != ST_OK:
            # Keep the last good state: repeat the good steps from the entry state (the same
            # bits, since a step depends on nothing else); the counters keep the work of both.
            self.w[:], self.e[:], self.fresh[:], self.turns[:] = entry
            spare = self.counters.copy()
            self._run(done)
            self.counters[:] = spare
            self.n += direction * done
            self.t = self.t0 + self.n * self.step
            self.t_fail = self.t
            self.status = int(status)
            self._close()
            return self.status
        self.n += direction * k
        self.t = t_end
        self._close()
        return ST_OK

    def _fields(self) -> dict:
        state = (np.float64, self.w.shape)
        return {
            **stepper_fields(N_COUNTERS),
            "t0": (float, ()),
            "n": (int, ()),
            "w": state,
            "e": state,
            "fresh": (int, ()),
            "y": state,
            "turns": (np.int64, self.turns.shape),
        }

    def snapshot(self) -> dict:
        snap = snapshot_identity(self.method.name, self.form, self.settings)
        snap.update(
            t=self.t,
            t0=self.t0,
            n=self.n,
            w=self.w.copy(),
            e=self.e.copy(),
            fresh=int(self.fresh[0]),
            y=self.y.copy(),
            counters=self.counters.copy(),
            turns=self.turns.copy(),
            status=self.status,
            t_fail=self.t_fail,
        )
        return snap

    def restore(self, snap: dict) -> None:
        check_snapshot(
            snap,
            method=self.method.name,
            form=self.form,
            settings=self.settings,
            fields=self._fields(),
        )
        self.t = float(snap["t"])
        self.t0 = float(snap["t0"])
        self.n = int(snap["n"])
        self._face(-1 if self.n < 0 else 1)
        self.w[:] = snap["w"]
        self.e[:] = snap["e"]
        self.fresh[0] = int(snap["fresh"])
        self.y = np.array(snap["y"], dtype=np.float64)
        self.counters[:] = snap["counters"]
        self.turns[:] = snap["turns"]
        self.status = int(snap["status"])
        self.t_fail = float(snap["t_fail"])


class SplittingMethod(Method):
    """A splitting method from a coefficient table (compositions.py), in both forms."""

    kicks_potential = True  # its B flow is the field's kick (base.Method says why)

    def __init__(
        self, table: SplittingTable, compensated: bool, composed: bool = False, axes: bool = False
    ) -> None:
        if (composed or axes) and table.kind != "composition":
            raise ValueError(f"{table.key}: only compositions of the Strang step have a twin")
        if axes and (composed or compensated):
            raise ValueError(f"{table.key}: the -axes twin has no composed or compensated variant")
        self.table = table
        self.compensated = compensated
        self.free = FREE_AXES if axes else FREE_COMPOSED if composed else FREE_EXACT
        # The coefficients of one step in order (compositions.py), before scaling by the step.
        self.kick_table, self.drift_table = table.sequence()
        name = "leapfrog" + (f"-{table.key}" if table.key else "")
        if composed:
            name += "-composed"
        if axes:
            name += "-axes"
        if compensated:
            name += "-kahan"
        evals = 2 * table.stages
        if axes:
            self.info = MethodInfo(
                name=name,
                family="splitting",
                order=table.order,
                symplectic=True,
                forms=("body",),
                control="step",
                keeps=(),
                keeps_roundoff=("p_phi", "norm"),
                keeps_by_form=KEEPS_AXES,
                compensated=False,
                description=(
                    f"{table.title}; body form only: the free rotation split into exact "
                    "rotations about the principal axes 3, 2, 1, 2, 3 (the quaternion splitting "
                    "of rigid-molecule codes) / gravity kick on (q, m); "
                    f"{table.stages} free rotations of 5 axis turns and {table.stages + 1} "
                    "kicks per step"
                ),
                source=(
                    "axis sequence: Miller, Eleftheriou, Pattnaik, Ndirango, Newns and Martyna, "
                    f"J. Chem. Phys. 116 (2002) 8649; composition: {table.source}"
                ),
            )
            return
        self.info = MethodInfo(
            name=name,
            family="splitting",
            order=table.order,
            symplectic=True,
            forms=("euler", "body"),
            control="step",
            keeps=("p_psi",),
            keeps_roundoff=("p_phi", "norm"),
            keeps_by_form=KEEPS_BY_FORM,
            compensated=compensated,
            description=(
                f"{table.title}; euler: drift H_a / kick H_b on the Euler angles, body: "
                + (
                    "free flow composed of the symmetric one and a turn about axis 2 for "
                    "I1 != I2 (cheaper, larger error)"
                    if composed
                    else "exact free flow (elliptic functions for I1 != I2)"
                )
                + f" / gravity kick on (q, m); {evals} sub-flows per step"
                + ("; compensated summation of the increments" if compensated else "")
            ),
            source=table.source,
        )

    def start(
        self, form: int, params: np.ndarray, t0: float, y0: np.ndarray, settings: dict
    ) -> Stepper:
        checked = self.settings(settings)
        h = checked["step"]
        form, y = checked_start(self, self.free, form, params, y0)
        n = y.shape[0]
        return SplittingStepper(
            form=form,
            params=np.ascontiguousarray(params, dtype=np.float64),
            t=float(t0),
            y=y.copy(),
            method=self,
            settings=checked,
            step=h,
            kick=np.ascontiguousarray(self.kick_table * h),
            drift=np.ascontiguousarray(self.drift_table * h),
            compensated=self.compensated,
            free=self.free,
            t0=float(t0),
            n=0,
            w=y.copy(),
            e=np.zeros(n),
            fresh=np.ones(1, dtype=np.int64),
            scratch=np.zeros(n),
        )


METHODS = (
    [SplittingMethod(t, c) for t in TABLES for c in (False, True)]
    + [SplittingMethod(t, False, composed=True) for t in TABLES if t.kind == "composition"]
    + [SplittingMethod(t, False, axes=True) for t in TABLES if t.key in AXES_TABLES]
)


def checked_start(
    method: Method, free: int, form, params: np.ndarray, y0
) -> tuple[int, np.ndarray]:
    """(form code, a float64 copy of y0) for a splitting's start, or MethodRefused with the
    reason: a form the method lacks, a state of the wrong size, or a rotor off the figure axis
    under an exact free flow."""
    form = int(form)
    if form not in range(len(FORM_NAMES)) or FORM_NAMES[form] not in method.info.forms:
        raise MethodRefused(f"{method.name}: cannot run in state form code {form!r}")
    n = FORM_SIZE[form]
    y = np.array(y0, dtype=np.float64)
    if y.shape != (n,):
        raise MethodRefused(f"{method.name}: a state of this form has {n} entries, not {y.size}")
    if free != FREE_AXES and params[P_ROTOR_GENERAL] != 0.0:
        # models/flows.py: the rigid free flow and the rotor's turn do not commute here, so
        # no exact free flow of this gyrostat is at hand; the -axes split is exact for it.
        raise MethodRefused(
            f"{method.name}: a rotor off the figure axis of a symmetric body has no exact free "
            "flow here; use a leapfrog-*-axes method or another family"
        )
    return form, y
