"""The stepper of a family whose compiled kernel advances k fixed steps of one of its schemes in
the body form, `steps(scheme, y, params, h, k, counters) -> (status, steps done)`: the engine
schemes and the Lie-group methods. It keeps the grid t0 + n h, runs forward only (none of these
schemes is symmetric, so a step back is no inverse of a step forward), and snapshots as plain
named numbers and arrays (validation.check_snapshot)."""

from __future__ import annotations

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
from topdrift.integrators.validation import check_snapshot, snapshot_identity, stepper_fields
from topdrift.models.forms import FORM_BODY


class SchemeStepper(Stepper):
    """A run of `method` (its `name` and `scheme`) with the family's k-step `kernel`."""

    def __init__(self, method, form, params, t0, y0, settings, kernel):
        super().__init__(form=form, params=params, t=t0, y=y0)
        self.method_name = method.name
        self.scheme = method.scheme
        self.kernel = kernel
        self.settings = settings
        self.h = settings["step"]
        self.t0 = float(t0)
        self.steps_done = 0

    def advance_to(self, t_end: float) -> int:
        if self.status != ST_OK:
            return self.status
        t_end = float(t_end)
        k = grid_steps(self.method_name, self.t, t_end, self.h)
        if k < 0:
            raise MethodRefused(
                f"{self.method_name}: asked for t = {t_end!r}, before the current time {self.t!r}"
            )
        if k == 0:
            return ST_OK
        status, done = self.kernel(self.scheme, self.y, self.params, self.h, int(k), self.counters)
        self.steps_done += int(done)
        if status != ST_OK:
            self.status = int(status)
            self.t_fail = self.t0 + self.steps_done * self.h
            self.t = self.t_fail
            return self.status
        self.t = t_end
        return ST_OK

    def _fields(self) -> dict:
        return {
            **stepper_fields(N_COUNTERS),
            "y": (np.float64, self.y.shape),
            "t0": (float, ()),
            "steps_done": (int, ()),
        }

    def snapshot(self) -> dict:
        snap = snapshot_identity(self.method_name, self.form, self.settings)
        snap.update(
            t=self.t,
            y=self.y.copy(),
            counters=self.counters.copy(),
            t0=self.t0,
            steps_done=self.steps_done,
            status=self.status,
            t_fail=self.t_fail,
        )
        return snap

    def restore(self, snap: dict) -> None:
        check_snapshot(
            snap,
            method=self.method_name,
            form=self.form,
            settings=self.settings,
            fields=self._fields(),
        )
        self.y = np.array(snap["y"], dtype=np.float64)  # states already handed out stay
        self.counters[:] = snap["counters"]
        self.t = float(snap["t"])
        self.t0 = float(snap["t0"])
        self.steps_done = int(snap["steps_done"])
        self.status = int(snap["status"])
        self.t_fail = float(snap["t_fail"])


class SchemeMethod(Method):
    """A method of such a family: one scheme number of its kernel, at a fixed step, body form.
    A family subclasses it with its own `family`, `kernel` and (for ensembles) its own type."""

    family = ""
    kernel = None  # the family's k-step kernel, as a staticmethod
    symplectic = False  # True for a family whose every scheme is a symplectic map

    def __init__(self, name, scheme, order, keeps_roundoff, description, source, keeps=()):
        self.scheme = scheme
        self.info = MethodInfo(
            name=name,
            family=self.family,
            order=order,
            symplectic=self.symplectic,
            forms=("body",),
            control="step",
            keeps=tuple(keeps),
            keeps_roundoff=keeps_roundoff,
            compensated=False,
            description=description,
            source=source,
        )

    def start(self, form, params, t0, y0, settings) -> Stepper:
        if int(form) != FORM_BODY:
            raise MethodRefused(f"{self.name}: runs in the body form only (form code {form!r})")
        checked = self.settings(settings)
        y = self.start_state(FORM_BODY, y0)
        p = np.ascontiguousarray(params, dtype=np.float64)
        return SchemeStepper(self, FORM_BODY, p, float(t0), y, checked, type(self).kernel)
