"""A fixed-step method from one step: the base classes for a plug-in that writes a step and
nothing else.

`FixedStepMethod(info, step)` is a Method whose stepper, a `FixedStepStepper`, does everything but
the step: the settings ({"step": h}, checked by validation.py), the step grid (base.grid_steps;
the time is t0 + n h, so it never accumulates round-off), the counters, the status and t_fail,
and snapshot / restore. The step is a plain Python function

    step(f, t, y, h) -> y_new

where f(y) -> dy/dt is the model's right-hand side for the run's body and form, handed in by the
stepper, which counts every call itself: the evaluations counter is what the step really did,
not what it says it did. y is read-only (return a new array); t is the time at the start of the
step. A step that returns a state of the wrong shape, or raises, stops the run with ST_FAILED
(the reason in `message`); a non-finite state stops it with ST_DIVERGED, a state outside its form's
chart (the Euler angles at the pole) with ST_SINGULAR; y and t are then the last good step's.

This is the path for a method written in Python, at a few microseconds per evaluation. A method
that needs kernel speed is a coefficient table for one of the built-in kernel families or a
numba kernel of its own behind the plain Stepper contract (see docs/plugins.md).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from topdrift.integrators.base import (
    C_EVALS,
    C_FORCE_EVALS,
    C_STEPS,
    N_COUNTERS,
    ST_DIVERGED,
    ST_FAILED,
    ST_OK,
    ST_SINGULAR,
    Method,
    MethodInfo,
    MethodRefused,
    Stepper,
    grid_steps,
)
from topdrift.integrators.validation import check_snapshot, snapshot_identity, stepper_fields
from topdrift.models import FORM_NAMES
from topdrift.models.dynamics import rhs, singular

StepFunction = Callable[[Callable[[np.ndarray], np.ndarray], float, np.ndarray, float], np.ndarray]


class FixedStepStepper(Stepper):
    """A run of a FixedStepMethod: steps of `h` on the grid t0 + n h, forward only.

    Counters: C_STEPS counts the steps that ended in a good state; C_EVALS every call of the
    right-hand side the step function made, the failed step's included, and C_FORCE_EVALS the
    same (every call evaluates the torque)."""

    def __init__(self, method: FixedStepMethod, form: int, params, t0: float, y0, settings):
        super().__init__(form=form, params=params, t=t0, y=y0)
        self.method = method
        self.settings = settings
        self.h = settings["step"]
        self.t0 = float(t0)
        self.n = 0  # steps taken since t0
        self.message = ""  # why the run stopped, when the step function failed
        self._dy = np.empty(y0.shape[0])
        self.f = self._counted_rhs()

    def _counted_rhs(self) -> Callable[[np.ndarray], np.ndarray]:
        form, p, counters, size = self.form, self.params, self.counters, self.y.shape[0]

        def f(y: np.ndarray) -> np.ndarray:
            """dy/dt at y for this run's body and form, as a new array; every call counted."""
            y = np.ascontiguousarray(y, dtype=np.float64)
            if y.shape != (size,):
                raise ValueError(f"f: a state of this form has {size} entries, got {y.shape}")
            counters[C_EVALS] += 1
            counters[C_FORCE_EVALS] += 1  # the whole right-hand side: the torque too
            dy = np.empty(size)
            rhs(form, y, p, dy)
            return dy

        return f

    def _fail(self, status: int, message: str) -> int:
        self.status = status
        self.t_fail = self.t0 + self.n * self.h
        self.t = self.t_fail
        self.message = message
        return status

    def advance_to(self, t_end: float) -> int:
        """Take the whole number of steps to t_end (base.grid_steps); refuses a time off the
        grid or before the current time."""
        if self.status != ST_OK:
            return self.status
        t_end = float(t_end)
        name = self.method.name
        k = grid_steps(name, self.t, t_end, self.h)
        if k < 0:
            raise MethodRefused(
                f"{name}: asked for t = {t_end!r}, before the current time {self.t!r}"
            )
        step = self.method.step
        size = self.y.shape
        for _ in range(k):
            y = self.y.copy()
            y.flags.writeable = False
            t = self.t0 + self.n * self.h
            try:
                y_new = step(self.f, t, y, self.h)
            except Exception as exc:  # a failing plug-in is the run's result, not a crash
                return self._fail(ST_FAILED, f"{name}: step failed: {type(exc).__name__}: {exc}")
            y_new = np.array(y_new, dtype=np.float64)
            if y_new.shape != size:
                return self._fail(
                    ST_FAILED, f"{name}: step returned shape {y_new.shape}, expected {size}"
                )
            if not np.all(np.isfinite(y_new)):
                return self._fail(ST_DIVERGED, f"{name}: non-finite state")
            if singular(self.form, y_new):
                return self._fail(ST_SINGULAR, f"{name}: singular state")
            self.y = y_new
            self.n += 1
            self.counters[C_STEPS] += 1
        if k:
            self.t = t_end
        return ST_OK

    def _fields(self) -> dict:
        return {
            **stepper_fields(N_COUNTERS),
            "y": (np.float64, self.y.shape),
            "t0": (float, ()),
            "n": (int, ()),
        }

    def snapshot(self) -> dict:
        """The stepper's state as plain numbers and arrays, named by method, form and settings
        (the Stepper contract); `restore` of another method's snapshot is refused."""
        snap = snapshot_identity(self.method.name, self.form, self.settings)
        snap.update(
            t=self.t,
            t0=self.t0,
            n=self.n,
            y=self.y.copy(),
            counters=self.counters.copy(),
            status=self.status,
            t_fail=self.t_fail,
        )
        return snap

    def restore(self, snap: dict) -> None:
        """Take back a snapshot of this method, form and settings: every field is checked for
        kind, dtype and shape (validation.check_snapshot) before anything is assigned."""
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
        self.y = np.array(snap["y"], dtype=np.float64)
        self.counters[:] = snap["counters"]
        self.status = int(snap["status"])
        self.t_fail = float(snap["t_fail"])
        self.message = ""


class FixedStepMethod(Method):
    """A fixed-step method given by its MethodInfo (control "step") and a step function
    step(f, t, y, h) -> y_new (see the module note). Settings: {"step": h}, a positive finite
    float; subclasses may add keys through settings_spec and read them in `start`."""

    def __init__(self, info: MethodInfo, step: StepFunction) -> None:
        if not isinstance(info, MethodInfo):
            raise TypeError(f"FixedStepMethod: info must be a MethodInfo, got {info!r}")
        if info.control != "step":
            raise ValueError(f"{info.name}: a FixedStepMethod has control 'step'")
        if not callable(step):
            raise TypeError(f"{info.name}: step must be callable, got {step!r}")
        self.info = info
        self.step = step

    def start(self, form, params, t0, y0, settings) -> FixedStepStepper:
        """A stepper at (t0, y0) in the state form given, its settings validated; a form the
        method does not list is refused (MethodRefused)."""
        form = int(form)
        if form not in range(len(FORM_NAMES)) or FORM_NAMES[form] not in self.info.forms:
            raise MethodRefused(f"{self.name}: cannot run in state form code {form!r}")
        checked = self.settings(settings)
        y = self.start_state(form, y0)
        p = np.ascontiguousarray(params, dtype=np.float64)
        return FixedStepStepper(self, form, p, float(t0), y, checked)
