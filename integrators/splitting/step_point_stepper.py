"""StepPointStepper: what the two variable-step families of the Euler-form splittings share
(sundman.py, time-reversible; sundman_sym.py, symplectic in extended phase space).

Both keep a closed step point (t_n as a clock hi + lo, y_n in w, the kernel's auxiliary values
in aux, the whole turns of the point's phi and psi) and hand out a sample y at t that is one
fixed step of the table from the point, never fed back (sundman_kernel.sundman_sample). A call
steps in the direction of t_end from the point, so turning back retraces the steps taken. What
differs is the kernel that takes the steps and the step control's own constants, which a
subclass supplies: `take_steps`, and `control_fields` / `control_state` / `check_control` /
`restore_control` for the constants in a snapshot.
"""

from __future__ import annotations

from abc import abstractmethod
from dataclasses import dataclass, field

import numpy as np

from topdrift.integrators.base import N_COUNTERS, ST_OK, Method, MethodRefused, Stepper
from topdrift.integrators.splitting.sundman_kernel import N_EULER, sundman_sample
from topdrift.integrators.validation import check_snapshot, snapshot_identity, stepper_fields
from topdrift.models.flows import N_KICK_RATES

CALL_STEPS = 1 << 20  # steps per kernel call: a long interval is advanced in bounded pieces


@dataclass
class StepPointStepper(Stepper):
    """A variable-step run; w, aux and backup are sized by the subclass's start."""

    method: Method | None = None
    settings: dict = field(default_factory=dict)
    eps: float = 0.0  # > 0; its sign per call is the direction
    w: np.ndarray = field(default_factory=lambda: np.zeros(N_EULER))
    aux: np.ndarray = field(default_factory=lambda: np.zeros(0))
    clock: np.ndarray = field(default_factory=lambda: np.zeros(2))
    w_turns: np.ndarray = field(default_factory=lambda: np.zeros(2, dtype=np.int64))
    backup: np.ndarray = field(default_factory=lambda: np.zeros(0))
    rates: np.ndarray = field(default_factory=lambda: np.zeros(N_KICK_RATES))

    # What a subclass supplies.
    @abstractmethod
    def take_steps(self, eps: float, t_end: float) -> tuple[int, bool]:
        """At most CALL_STEPS steps of eps towards t_end: (status, whether the point reached it)."""

    @abstractmethod
    def control_fields(self) -> dict:
        """check_snapshot's field table for the step control's constants."""

    @abstractmethod
    def control_state(self) -> dict:
        """Those constants, copied, for a snapshot."""

    @abstractmethod
    def check_control(self, snap: dict) -> None:
        """Raise SnapshotRefused when the snapshot's constants cannot drive the control."""

    @abstractmethod
    def restore_control(self, snap: dict) -> None:
        """Set the constants from a checked snapshot."""

    @property
    def t_point(self) -> float:
        """t_n, the time of the last step point, rounded once."""
        return float(self.clock[0] + self.clock[1])

    def sample_at(self, t_end: float) -> int:
        """y at t_end: one fixed step of the table from the step point."""
        m = self.method
        dt = (t_end - self.clock[0]) - self.clock[1]
        out = np.empty(N_EULER)
        turns = self.w_turns.copy()
        st = sundman_sample(
            self.params, m.kick_table, m.drift_table, dt, self.w, self.aux, out, self.rates,
            self.counters, turns,
        )  # fmt: skip
        if st != ST_OK:
            return int(st)
        self.y = out
        self.turns[:] = turns
        return ST_OK

    def advance_to(self, t_end: float) -> int:
        if self.status != ST_OK:
            return self.status
        t_end = float(t_end)
        if not np.isfinite(t_end):
            raise MethodRefused(f"{self.method.name}: t = {t_end!r} is not a finite time")
        if t_end == self.t:
            return ST_OK
        if self.turns.shape[0] == 0 and self.w_turns.shape[0] != 0:
            # keep_angles_unfolded() was called: the step points do not fold either
            self.w_turns = np.zeros(0, dtype=np.int64)
        ahead = (t_end - self.clock[0]) - self.clock[1]
        eps = self.eps if ahead >= 0.0 else -self.eps
        while True:
            status, reached = self.take_steps(eps, t_end)
            if status != ST_OK or reached:
                break
        if status == ST_OK:
            status = self.sample_at(t_end)
            if status == ST_OK:
                self.t = t_end
                return ST_OK
        self.t = self.t_point  # the last good state is the step point
        self.t_fail = self.t
        self.y = self.w.copy()
        self.turns[:] = self.w_turns
        self.status = int(status)
        return self.status

    def snapshot_fields(self) -> dict:
        return {
            **stepper_fields(N_COUNTERS),
            "y": (np.float64, (N_EULER,)),
            "turns": (np.int64, self.turns.shape),
            "w": (np.float64, (N_EULER,)),
            "aux": (np.float64, self.aux.shape),
            "clock": (np.float64, (2,)),
            "w_turns": (np.int64, self.w_turns.shape),
            **self.control_fields(),
        }

    def snapshot(self) -> dict:
        snap = snapshot_identity(self.method.name, self.form, self.settings)
        snap.update(
            t=self.t,
            status=self.status,
            t_fail=self.t_fail,
            counters=self.counters.copy(),
            y=self.y.copy(),
            turns=self.turns.copy(),
            w=self.w.copy(),
            aux=self.aux.copy(),
            clock=self.clock.copy(),
            w_turns=self.w_turns.copy(),
            **self.control_state(),
        )
        return snap

    def restore(self, snap: dict) -> None:
        check_snapshot(
            snap,
            method=self.method.name,
            form=self.form,
            settings=self.settings,
            fields=self.snapshot_fields(),
        )
        self.check_control(snap)
        self.t = float(snap["t"])
        self.status = int(snap["status"])
        self.t_fail = float(snap["t_fail"])
        self.counters[:] = snap["counters"]
        self.y = np.array(snap["y"], dtype=np.float64)
        self.turns[:] = snap["turns"]
        self.w[:] = snap["w"]
        self.aux[:] = snap["aux"]
        self.clock[:] = snap["clock"]
        self.w_turns[:] = snap["w_turns"]
        self.restore_control(snap)
