"""Adaptive embedded Runge-Kutta methods: Dormand-Prince 5(4) (`rk45`) and DOP853 (`dop853`).

Both run on the one tableau-driven kernel in embedded_kernel.py (one body, compiled into one
entry point per state form).

Settings (floats, checked by validation.py): "rtol", "atol" (required, positive; rtol >= 100
machine epsilons, where scipy clamps instead); "first_step" (optional, else Hairer's
starting-step heuristic); "horizon" (optional: the last time the run will ask for; steps are then
clipped to end exactly on it, as scipy's t_bound, and the starting step never exceeds the
interval. Without a horizon no step is ever clipped and every output, the last included, comes
from the dense output.)

advance_to(t_out) steps while the internal time is below t_out, never shortening a step for an
output time, then evaluates the dense output at t_out: the step sequence does not depend on how
often the run is sampled. The controller (internal t, y, f, the proposed step, the last step's
stages and dense coefficients) lives in the stepper and is part of its snapshot, with the whole
turns of phi and psi: the Euler form folds them after every accepted step (embedded_kernel.py,
models/turns.py), and keep_angles_unfolded() lets them grow. The state handed out at an output
time comes from the dense output between the last step's ends, so its folded angles may lie up
to that step's movement past pi; the samples fold them exactly on the way to the file.

Counters (kept by the kernels): steps = accepted steps; rejected = rejected attempts; evals =
every right-hand-side evaluation: 1 for f(t0), 1 for the starting-step heuristic (none with
first_step), 6 per rk45 attempt; 11 per dop853 attempt plus 1 per accepted step (its FSAL stage
is evaluated after acceptance, as in Hairer's code, where scipy evaluates it on every attempt),
plus 3 per dop853 step whose dense output serves an output time. The accepted steps themselves
match scipy's RK45 / DOP853 step for step on the same problem, tolerances and first step.

Failures: a state past the chart's edge (singular(form, y)) stops with ST_SINGULAR; a step below
10 ulp of t with ST_STEP_UNDERFLOW, or ST_DIVERGED when the attempts that drove it there were
not finite. t_fail, t and y are then the end of the last accepted step.
"""

from __future__ import annotations

import math

import numpy as np

from topdrift.integrators.base import (
    N_COUNTERS,
    Method,
    MethodInfo,
    MethodRefused,
)
from topdrift.integrators.controlled_stepper import ControlledStepper
from topdrift.integrators.rk.embedded_kernel import (
    CT_DENSE_OK,
    CT_H,
    CT_H_PREV,
    CT_T,
    CT_T_OLD,
    N_CTRL,
    N_TOL,
    TL_ATOL,
    TL_EXPONENT,
    TL_RTOL,
    TL_T_BOUND,
    advance_kernel,
    start_run,
)
from topdrift.integrators.rk.packed import pack
from topdrift.integrators.rk.tableaux import DOP853, DP5, Tableau
from topdrift.integrators.validation import (
    EPS,
    FINITE_WHILE_OK,
    Setting,
    stepper_fields,
)
from topdrift.models import FORM_SIZE

# rtol below 100 machine epsilons is refused: the error estimate is round-off there (scipy
# clamps it to that floor instead, with a warning).
SETTINGS = (
    Setting(
        "rtol",
        minimum=100 * EPS,
        floor="100 machine epsilons",
        why="where the error estimate is round-off",
    ),
    Setting("atol"),
    Setting("first_step", required=False),
    Setting("horizon", required=False, positive=False),
)

# What a Runge-Kutta method keeps (the rule: integrators/base.py). Every Runge-Kutta method keeps
# the linear invariants of the equations in exact arithmetic (common practice). In the Euler
# form p_phi and p_psi have a right-hand side that is exactly 0.0, so they never change: to the
# bit. In the body form p_psi = m3 is linear, but its rate m1 w2 - m2 w1 rounds to a few ulps
# instead of 0: to round-off (measured: rk4, gauss4, gauss6, 6 random starts, 2e4 steps: m3
# unchanged in 5 starts, 1.5-6.5e-17 relative in the sixth). L.e_z is not linear in (q, m),
# energy and |q| are not quadratic invariants an explicit method keeps: not kept.
KEEPS_BY_FORM = {"euler": (("p_phi", "p_psi", "norm"), ()), "body": ((), ("p_psi",))}


class EmbeddedRK(Method):
    """An embedded explicit Runge-Kutta pair with FSAL and dense output, scipy's controller."""

    def __init__(self, tab: Tableau, description: str) -> None:
        self.tableau = tab
        self.packed = pack(tab)
        self.kernel_args = self.packed.args()
        self.info = MethodInfo(
            name=tab.name,
            family="adaptive-rk",
            order=tab.order,
            symplectic=False,
            forms=("body", "euler"),
            control="tolerance",
            keeps=(),
            keeps_roundoff=("p_psi",),
            keeps_by_form=KEEPS_BY_FORM,
            compensated=False,
            description=description,
            source=tab.source,
        )

    @property
    def settings_spec(self):
        return SETTINGS

    def _settings(self, settings: dict, t0: float) -> dict:
        s = self.settings(settings)
        horizon, first = s["horizon"], s["first_step"]
        if horizon is not None:
            if not horizon > t0:
                raise MethodRefused(
                    f"{self.name}: horizon {horizon!r} must be later than the start {t0!r}"
                )
            if first is not None and first > horizon - t0:
                raise MethodRefused(
                    f"{self.name}: first_step {first!r} exceeds the interval to the horizon"
                )
        return s

    def start(self, form, params, t0, y0, settings) -> EmbeddedStepper:
        s = self._settings(settings, float(t0))
        return EmbeddedStepper.begin(self, int(form), params, float(t0), y0, s)


class EmbeddedStepper(ControlledStepper):
    """A run of an embedded pair; the controller's state is in the arrays below."""

    method: EmbeddedRK
    horizon: float | None

    @classmethod
    def begin(cls, method: EmbeddedRK, form: int, params, t0: float, y0, s: dict):
        y0 = np.ascontiguousarray(y0, dtype=np.float64).copy()
        if y0.shape != (FORM_SIZE[form],):
            raise MethodRefused(
                f"{method.name}: state has shape {y0.shape}, the form needs {FORM_SIZE[form]}"
            )
        params = np.ascontiguousarray(params, dtype=np.float64)
        st = cls(form=form, params=params, t=t0, y=y0.copy())
        st.method = method
        st.settings = s
        st.horizon = s["horizon"]
        st.kernel = advance_kernel(form)
        n = y0.shape[0]
        tab = method.tableau
        rows = method.packed.n_rows
        st.tol = np.empty(N_TOL)
        st.tol[TL_RTOL] = s["rtol"]
        st.tol[TL_ATOL] = s["atol"]
        st.tol[TL_T_BOUND] = math.inf if st.horizon is None else st.horizon
        st.tol[TL_EXPONENT] = -1.0 / (tab.error_order + 1)
        st.yi = y0  # internal state at ctrl[CT_T]
        st.f = np.empty(n)
        st.K = np.zeros(rows * n)
        st.yold = y0.copy()
        st.ynew = np.empty(n)
        st.ytmp = np.empty(n)
        st.ftmp = np.empty(n)
        st.etmp = np.empty(2 * n)
        st.dense = np.zeros((3 + tab.dense.shape[0]) * n)
        st.ctrl = np.zeros(N_CTRL)
        st.counters = np.zeros(N_COUNTERS, dtype=np.int64)
        pick = s["first_step"] is None
        interval = math.inf if st.horizon is None else st.horizon - t0
        h0 = start_run(
            form,
            params,
            st.yi,
            st.f,
            st.ytmp,
            st.ftmp,
            s["rtol"],
            s["atol"],
            tab.error_order,
            interval,
            pick,
            st.counters,
        )
        if not pick:
            h0 = s["first_step"]
        st.ctrl[CT_T] = t0
        st.ctrl[CT_H] = h0
        st.ctrl[CT_T_OLD] = t0
        st.ctrl[CT_H_PREV] = 0.0
        st.ctrl[CT_DENSE_OK] = 0.0
        return st

    CT_T = CT_T
    ARRAYS = ("y", "yi", "f", "K", "yold", "dense", "ctrl", "counters", "turns")

    def check_target(self, t_end: float) -> None:
        super().check_target(t_end)
        if self.horizon is not None and t_end > self.horizon:
            raise MethodRefused(
                f"{self.method.name}: asked for t = {t_end!r}, past the horizon {self.horizon!r} "
                f"the run was started with"
            )

    def call_kernel(self, t_end: float, y_out: np.ndarray) -> int:
        return self.kernel(
            (
                self.params,
                *self.method.kernel_args,
                self.tol,
                self.yi,
                self.f,
                self.K,
                self.yold,
                self.ynew,
                self.ytmp,
                self.etmp,
                self.dense,
                self.ctrl,
                self.counters,
                t_end,
                y_out,
                self.turns,
            )
        )

    @property
    def t_internal(self) -> float:
        """End of the last accepted step (at or after self.t)."""
        return float(self.ctrl[CT_T])

    @property
    def step_proposed(self) -> float:
        return float(self.ctrl[CT_H])

    def snapshot_fields(self) -> dict:
        n = self.yi.shape[0]
        state = (np.float64, (n,))
        return {
            **stepper_fields(N_COUNTERS),
            "y": state,
            "yi": state,
            "f": state,
            "yold": state,
            # The stages of the last attempt: a failed run may stop on a non-finite one.
            "K": (np.float64, self.K.shape, FINITE_WHILE_OK),
            "dense": (np.float64, self.dense.shape),
            "ctrl": (np.float64, self.ctrl.shape),
            "turns": (np.int64, self.turns.shape),
        }

    def controller_sound(self, snap: dict) -> bool:
        # What advance_to relies on (the kernel divides by the last step for dense output): the
        # internal time at or past the output time, the last step ending there, a step to try.
        ctrl, t = snap["ctrl"], snap["t"]
        return bool(
            ctrl[CT_T_OLD] <= t <= ctrl[CT_T]
            and ctrl[CT_H] > 0.0
            and ctrl[CT_H_PREV] >= 0.0
            and (ctrl[CT_H_PREV] > 0.0 or ctrl[CT_T] == t)
            and ctrl[CT_DENSE_OK] in (0.0, 1.0)
        )


RK45 = EmbeddedRK(
    DP5,
    "Dormand-Prince 5(4), FSAL, local extrapolation, 4th-order dense output; step control as "
    "scipy's RK45",
)
DOP853_METHOD = EmbeddedRK(
    DOP853,
    "Dormand-Prince 8(5,3) as coded by Hairer, FSAL, 7th-order dense output; step control as "
    "scipy's DOP853",
)

METHODS = [RK45, DOP853_METHOD]
