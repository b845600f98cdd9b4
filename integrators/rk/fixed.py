"""Explicit Runge-Kutta methods at a fixed step: the classical RK4 (`rk4`) and the same with
compensated summation of the state increments (`rk4-kahan`), on the kernel in fixed_kernel.py.

Settings: {"step": h}, a positive finite float. advance_to(t_end) takes the whole number of
steps the grid rule of the contract gives (base.grid_steps) and refuses a time off the grid or
before the current time. The time is kept as t0 + (steps taken) h, so it does not accumulate
round-off either; self.t is then the requested t_end itself.
"""

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

# What explicit Runge-Kutta keeps (the rule: integrators/base.py; the reasons beside the table in
# rk/adaptive.py): p_phi and p_psi to the bit in the Euler form, p_psi to round-off in the body.
from topdrift.integrators.rk.adaptive import KEEPS_BY_FORM
from topdrift.integrators.rk.fixed_kernel import explicit_kernel
from topdrift.integrators.rk.packed import pack
from topdrift.integrators.rk.tableaux import RK4, Tableau
from topdrift.integrators.validation import check_snapshot, snapshot_identity, stepper_fields
from topdrift.models import FORM_SIZE


class FixedStepRK(Method):
    """An explicit Runge-Kutta tableau at a fixed step, plain or with compensated summation."""

    def __init__(self, tab: Tableau, name: str, kahan: bool, description: str) -> None:
        if tab.a.shape[0] != tab.n_stages + 1:
            raise ValueError(f"{name}: a fixed-step tableau has its stages and b, nothing more")
        self.tableau = tab
        self.packed = pack(tab)
        self.kahan = kahan
        self.info = MethodInfo(
            name=name,
            family="explicit-rk",
            order=tab.order,
            symplectic=False,
            forms=("body", "euler"),
            control="step",
            keeps=(),
            keeps_roundoff=("p_psi",),
            keeps_by_form=KEEPS_BY_FORM,
            compensated=kahan,
            description=description,
            source=tab.source
            + ("; compensated summation of Kahan (1965), Comm. ACM 8, 40" if kahan else ""),
        )

    def start(self, form, params, t0, y0, settings) -> FixedStepper:
        checked = self.settings(settings)
        form = int(form)
        y0 = np.ascontiguousarray(y0, dtype=np.float64).copy()
        if y0.shape != (FORM_SIZE[form],):
            raise MethodRefused(
                f"{self.name}: state has shape {y0.shape}, the form needs {FORM_SIZE[form]}"
            )
        st = FixedStepper(
            form=form,
            params=np.ascontiguousarray(params, dtype=np.float64),
            t=float(t0),
            y=y0.copy(),
        )
        st.method = self
        st.settings = checked
        st.kernel = explicit_kernel(form)
        st.h = checked["step"]
        st.t0 = float(t0)
        st.steps_done = 0
        n = y0.shape[0]
        st.yi = y0
        st.comp = np.zeros(n)
        st.K = np.zeros(self.packed.n_rows * n)
        st.ytmp = np.empty(n)
        st.ynew = np.empty(n)
        st.binc = np.empty(n)
        return st


class FixedStepper(Stepper):
    """A run of FixedStepRK: the state in yi (y is the copy handed out), Kahan terms in comp."""

    method: FixedStepRK

    def advance_to(self, t_end: float) -> int:
        if self.status != ST_OK:
            return self.status
        t_end = float(t_end)
        k = grid_steps(self.method.name, self.t, t_end, self.h)
        if k < 0:
            raise MethodRefused(
                f"{self.method.name}: asked for t = {t_end!r}, before the current time {self.t!r}"
            )
        if k == 0:
            return ST_OK
        pk = self.method.packed
        status, done = self.kernel(
            (
                self.params,
                pk.a,
                int(self.method.tableau.n_stages),
                self.h,
                int(k),
                self.method.kahan,
                self.yi,
                self.comp,
                self.K,
                self.ytmp,
                self.ynew,
                self.binc,
                self.counters,
                self.turns,
            )
        )
        self.steps_done += int(done)
        if status != ST_OK:
            self.status = int(status)
            self.t_fail = self.t0 + self.steps_done * self.h
            self.t = self.t_fail
            self.y = self.yi.copy()
            return self.status
        self.t = t_end
        self.y = self.yi.copy()
        return ST_OK

    _ARRAYS = ("y", "yi", "comp", "counters", "turns")

    def _fields(self) -> dict:
        n = self.yi.shape[0]
        state = (np.float64, (n,))
        return {
            **stepper_fields(N_COUNTERS),
            "y": state,
            "yi": state,
            "comp": state,
            "t0": (float, ()),
            "steps_done": (int, ()),
            "turns": (np.int64, self.turns.shape),
        }

    def snapshot(self) -> dict:
        """Plain numbers, strings and arrays; the identity refuses other methods and steps."""
        snap = snapshot_identity(self.method.name, self.form, self.settings)
        snap.update({k: getattr(self, k).copy() for k in self._ARRAYS})
        snap.update(
            t=self.t,
            t0=self.t0,
            steps_done=self.steps_done,
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
        for k in self._ARRAYS:
            if k == "y":
                self.y = np.array(snap[k], dtype=np.float64)  # outputs already handed out stay
            else:
                getattr(self, k)[...] = snap[k]
        self.t = float(snap["t"])
        self.t0 = float(snap["t0"])
        self.steps_done = int(snap["steps_done"])
        self.status = int(snap["status"])
        self.t_fail = float(snap["t_fail"])


RK4_METHOD = FixedStepRK(RK4, "rk4", False, "classical fourth-order Runge-Kutta at a fixed step")
RK4_KAHAN = FixedStepRK(
    RK4,
    "rk4-kahan",
    True,
    "classical fourth-order Runge-Kutta at a fixed step, state increments added with "
    "compensated (Kahan) summation",
)

METHODS = [RK4_METHOD, RK4_KAHAN]
