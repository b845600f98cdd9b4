"""ControlledStepper: what the adaptive families' steppers share (rk45 and dop853, gbs,
taylor-adaptive). Their kernels keep an internal state `yi` at the end of the last accepted step
and a controller array `ctrl`; an output is handed out at any later time. The bookkeeping around
a kernel call (refusing a time before the current one, what a failure leaves behind) and the
snapshot of the arrays that carry the run are the same for all of them; what differs is the
kernel call and what makes a controller array sound, and a subclass supplies those two.
"""

from __future__ import annotations

from abc import abstractmethod

import numpy as np

from topdrift.integrators.base import ST_OK, Stepper
from topdrift.integrators.validation import (
    MethodRefused,
    SnapshotRefused,
    check_snapshot,
    snapshot_identity,
)


class ControlledStepper(Stepper):
    """A run of an adaptive method. Subclasses set:

    - `CT_T`: the index in `ctrl` of the internal state's time (a failure stops there);
    - `ARRAYS`: the names of the arrays a snapshot carries (y and yi among them);
    - `call_kernel(t_end, y_out)`: advance the internal state past or onto t_end, write the
      output there into y_out, return an ST_* status;
    - `snapshot_fields()`: validation.check_snapshot's field table for those arrays;
    - `controller_sound(snap)`: whether a snapshot's `ctrl` (with its t and arrays) is a state
      the kernel can continue from.
    Everything else (the method, its settings) is set by the subclass's `begin`."""

    CT_T: int
    ARRAYS: tuple[str, ...]

    def check_target(self, t_end: float) -> None:
        """Refuse a time the run cannot reach (before now; a subclass adds its own limits)."""
        if not t_end >= self.t:
            raise MethodRefused(
                f"{self.method.name}: asked for t = {t_end!r}, before the current time {self.t!r}"
            )

    @abstractmethod
    def call_kernel(self, t_end: float, y_out: np.ndarray) -> int:
        """One kernel call up to t_end; its status."""

    @abstractmethod
    def snapshot_fields(self) -> dict:
        """The check_snapshot field table of ARRAYS and the counters."""

    @abstractmethod
    def controller_sound(self, snap: dict) -> bool:
        """Whether snap['ctrl'] is a controller state advance_to can continue from."""

    def advance_to(self, t_end: float) -> int:
        if self.status != ST_OK:
            return self.status
        t_end = float(t_end)
        self.check_target(t_end)
        y_out = np.empty_like(self.yi)
        status = self.call_kernel(t_end, y_out)
        if status != ST_OK:
            # The last good state is the internal one, at the end of the last accepted step.
            self.status = int(status)
            self.t_fail = float(self.ctrl[self.CT_T])
            self.t = self.t_fail
            self.y = self.yi.copy()
            return self.status
        self.t = t_end
        self.y = y_out
        return ST_OK

    def snapshot(self) -> dict:
        """Plain numbers, strings and arrays; the identity (method, form, settings with the
        tolerances) refuses a snapshot of other settings or of another method."""
        snap = snapshot_identity(self.method.name, self.form, self.settings)
        snap.update({k: getattr(self, k).copy() for k in self.ARRAYS})
        snap.update(t=self.t, status=self.status, t_fail=self.t_fail)
        return snap

    def restore(self, snap: dict) -> None:
        check_snapshot(
            snap,
            method=self.method.name,
            form=self.form,
            settings=self.settings,
            fields=self.snapshot_fields(),
        )
        if not self.controller_sound(snap):
            raise SnapshotRefused(f"{self.method.name}: snapshot field 'ctrl' is not a controller")
        for k in self.ARRAYS:
            if k == "y":
                self.y = np.array(snap[k], dtype=np.float64)  # outputs already handed out stay
            else:
                getattr(self, k)[...] = snap[k]
        self.t = float(snap["t"])
        self.status = int(snap["status"])
        self.t_fail = float(snap["t_fail"])
