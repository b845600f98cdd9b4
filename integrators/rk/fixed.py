"""Explicit Runge-Kutta methods at a fixed step: the classical RK4 (`rk4`) and the same with
compensated summation of the state increments (`rk4-kahan`).

Settings: {"step": h}. advance_to(t_end) takes round((t_end - t) / h) steps and refuses an
interval that is not a whole number of steps to 1e-9 relative: output times must fall on the
step grid (the runner arranges that). The time is kept as t0 + (steps taken) h, so it does not
accumulate round-off either; self.t is then the requested t_end itself.
"""

from __future__ import annotations

import math

import numpy as np

from topdrift.integrators.base import ST_OK, Method, MethodInfo, MethodRefused, Stepper
from topdrift.integrators.rk.fixed_kernel import explicit_kernel
from topdrift.integrators.rk.packed import pack
from topdrift.integrators.rk.tableaux import RK4, Tableau
from topdrift.models import FORM_SIZE

# Relative slack for "a whole number of steps": output times are computed as t0 + k * dt by
# the caller, which rounds at the level of 1e-16 relative; 1e-9 leaves room and still catches a
# grid that is off by any meaningful fraction of a step.
GRID_RTOL = 1e-9

# Explicit RK keeps p_phi and p_psi exactly in the Euler form only (their rhs is exactly 0.0);
# in the body form it keeps nothing to round-off, and `keeps` must hold in every form.
_KEEPS: tuple[str, ...] = ()


class FixedStepRK(Method):
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
            keeps=_KEEPS,
            compensated=kahan,
            description=description,
            source=tab.source
            + ("; compensated summation of Kahan (1965), Comm. ACM 8, 40" if kahan else ""),
        )

    def _step(self, settings: dict) -> float:
        unknown = sorted(set(settings) - {"step"})
        if unknown:
            raise MethodRefused(
                f"{self.name}: unknown setting(s) {', '.join(map(repr, unknown))}; known: step"
            )
        h = settings.get("step")
        if isinstance(h, bool) or not isinstance(h, (int, float)):
            raise MethodRefused(f"{self.name}: needs a positive finite step, got {h!r}")
        h = float(h)
        if not (h > 0.0 and math.isfinite(h)):
            raise MethodRefused(f"{self.name}: needs a positive finite step, got {h!r}")
        return h

    def check(self, body, form: str, settings: dict) -> None:
        super().check(body, form, settings)
        self._step(settings)

    def start(self, form, params, t0, y0, settings) -> FixedStepper:
        h = self._step(settings)
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
        st.kernel = explicit_kernel(form)
        st.h = h
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
    method: FixedStepRK

    def advance_to(self, t_end: float) -> int:
        if self.status != ST_OK:
            return self.status
        t_end = float(t_end)
        span = t_end - self.t
        if not span >= 0.0:
            raise MethodRefused(
                f"{self.method.name}: asked for t = {t_end!r}, before the current time {self.t!r}"
            )
        k = round(span / self.h)
        if abs(span - k * self.h) > GRID_RTOL * max(abs(span), self.h):
            raise MethodRefused(
                f"{self.method.name}: t = {t_end!r} is not on the step grid: {span!r} is "
                f"{span / self.h:.12g} steps of {self.h!r}, not a whole number"
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

    _ARRAYS = ("y", "yi", "comp", "counters")

    def snapshot(self) -> dict:
        """Plain numbers and arrays only; `h` and `kahan` refuse a snapshot of other settings."""
        snap = {k: getattr(self, k).copy() for k in self._ARRAYS}
        snap.update(
            kahan=int(self.method.kahan),
            form=self.form,
            t=self.t,
            h=self.h,
            t0=self.t0,
            steps_done=self.steps_done,
            status=self.status,
            t_fail=self.t_fail,
        )
        return snap

    def restore(self, snap: dict) -> None:
        self.check_snapshot(snap)
        name = self.method.name
        if int(snap.get("kahan", -1)) != int(self.method.kahan) or int(snap.get("form", -1)) != int(
            self.form
        ):
            raise MethodRefused(f"{name}: snapshot is of another method or form")
        if float(snap["h"]) != self.h:
            raise MethodRefused(f"{name}: snapshot has step {snap['h']!r}, this stepper {self.h!r}")
        for k in self._ARRAYS:
            src = np.asarray(snap[k])
            if src.shape != getattr(self, k).shape:
                raise MethodRefused(f"{name}: snapshot field {k!r} has the wrong shape")
            if k == "y":
                self.y = src.astype(np.float64, copy=True)
            else:
                getattr(self, k)[...] = src
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
