"""`gbs`: the Gragg-Bulirsch-Stoer extrapolation method with adaptive order and step, both forms.

The kernel (kernel.py) has the method and its controller (Hairer, Norsett and Wanner, Solving
ODEs I, sec. II.9). Settings (checked by validation.py): "rtol" and "atol" (required, positive;
rtol >= 100 machine epsilons, see SETTINGS).

advance_to(t_out) steps until t_out and shortens the step that would pass it so that it ends
there exactly: there is no dense output, and the steps depend on the output times (an accepted
shortened step keeps the longer proposal it cut short, so a sample costs about one extra step,
not a restart of the step control). The controller (time, proposed step and order, whether the
last attempt was rejected), f(y) and the whole turns of the Euler form's phi and psi are part of
the snapshot, so a restored stepper continues to the same bits.

Counters: steps = accepted steps; rejected = rejected attempts; evals = every right-hand-side
evaluation: 1 for f(y0), 1 for the starting step, n_j = 2 j for each line j computed in an
attempt, 1 for f at each accepted state (each also a force evaluation).
"""

from __future__ import annotations

import numpy as np

from topdrift.integrators.base import (
    N_COUNTERS,
    Method,
    MethodInfo,
    MethodRefused,
)
from topdrift.integrators.controlled_stepper import ControlledStepper
from topdrift.integrators.extrapolation import dense_kernel as dk
from topdrift.integrators.extrapolation.kernel import (
    CT_H,
    CT_K,
    CT_REJECTED,
    CT_T,
    K_MAX,
    K_MIN,
    N_CTRL,
    N_TOL,
    N_WORK,
    TL_ATOL,
    TL_RTOL,
    advance_kernel,
    first_derivative,
    start_line,
    start_step,
)
from topdrift.integrators.validation import (
    EPS,
    FINITE_WHILE_OK,
    Setting,
    stepper_fields,
)
from topdrift.models import FORM_SIZE

FAMILY = "extrapolation"

# The floor of the adaptive Runge-Kutta methods, for the same reason: the error estimate is the
# difference of two extrapolated solutions, which round-off swamps below about 100 eps
# (kernel.py: the extrapolation amplifies each line's rounding up to 256 times).
SETTINGS = (
    Setting(
        "rtol",
        minimum=100 * EPS,
        floor="100 machine epsilons",
        why="where the error estimate is round-off",
    ),
    Setting("atol"),
)

# What it keeps (the rule: integrators/base.py). Every line is a sum of the state and h times
# right-hand sides, and the extrapolation a linear combination of lines with weights summing to
# one: linear invariants are kept in exact arithmetic (common practice). In the Euler form the
# rates of p_phi and p_psi are exactly 0.0, so every substep, the smoothing (0.5 (a + a + h 0))
# and every Aitken-Neville update (a + (a - a) c) return them unchanged: to the bit. In the body
# form p_psi = m3 is linear but its rate rounds to a few ulps: to round-off. Energy, L.e_z and
# |q| are not linear: not kept.
KEEPS_BY_FORM = {"euler": (("p_phi", "p_psi", "norm"), ()), "body": ((), ("p_psi",))}


class GraggBulirschStoer(Method):
    """Extrapolated modified midpoint rule, orders 4..2 (K_MAX - 1) chosen by work per time."""

    info = MethodInfo(
        name="gbs",
        family=FAMILY,
        # The order varies (2 k for line k); the largest the controller can take.
        order=2 * K_MAX,
        symplectic=False,
        forms=("body", "euler"),
        control="tolerance",
        keeps=(),
        keeps_roundoff=("p_psi",),
        keeps_by_form=KEEPS_BY_FORM,
        compensated=False,
        description=(
            f"Gragg-Bulirsch-Stoer: modified midpoint with Gragg's smoothing, steps 2, 4, 6, ..., "
            f"Aitken-Neville in h^2, order {2 * K_MIN}-{2 * K_MAX} and step by work per unit "
            "time; steps end on the output times (no dense output)"
        ),
        source="Hairer, Norsett and Wanner, Solving ODEs I, 2nd ed., sec. II.9",
    )

    @property
    def settings_spec(self):
        return SETTINGS

    def start(self, form, params, t0, y0, settings) -> GBSStepper:
        s = self.settings(settings)
        return GBSStepper.begin(self, int(form), params, float(t0), y0, s)


class GBSStepper(ControlledStepper):
    """A run of gbs: y is the state at ctrl[CT_T], f = rhs(y)."""

    method: GraggBulirschStoer

    @classmethod
    def begin(cls, method: GraggBulirschStoer, form: int, params, t0: float, y0, s: dict):
        y0 = np.ascontiguousarray(y0, dtype=np.float64).copy()
        n = FORM_SIZE[form]
        if y0.shape != (n,):
            raise MethodRefused(f"{method.name}: state has shape {y0.shape}, the form needs {n}")
        params = np.ascontiguousarray(params, dtype=np.float64)
        st = cls(form=form, params=params, t=t0, y=y0.copy())
        st.method = method
        st.settings = s
        st.kernel = advance_kernel(form)
        st.tol = np.empty(N_TOL)
        st.tol[TL_RTOL] = s["rtol"]
        st.tol[TL_ATOL] = s["atol"]
        st.yi = y0
        st.f = np.empty(n)
        st.table = np.zeros(K_MAX * n)
        st.za = np.empty(n)
        st.zb = np.empty(n)
        st.ft = np.empty(n)
        st.hw = np.zeros(N_WORK)
        st.ctrl = np.zeros(N_CTRL)
        st.counters = np.zeros(N_COUNTERS, dtype=np.int64)
        first_derivative(form, params, st.yi, st.f, st.counters)
        k = start_line(s["rtol"])
        h0 = start_step(
            form, params, st.yi, st.f, st.za, st.ft, s["rtol"], s["atol"], 2 * k, st.counters
        )
        if not (np.isfinite(h0) and h0 > 0.0):
            raise MethodRefused(f"{method.name}: no finite step from the start state")
        st.ctrl[CT_T] = t0
        st.ctrl[CT_H] = h0
        st.ctrl[CT_K] = k
        st.ctrl[CT_REJECTED] = 0.0
        return st

    CT_T = CT_T
    ARRAYS = ("y", "yi", "f", "ctrl", "counters", "turns")

    def call_kernel(self, t_end: float, y_out: np.ndarray) -> int:
        return self.kernel(
            (
                self.params,
                self.tol,
                self.yi,
                self.f,
                self.table,
                self.za,
                self.zb,
                self.ft,
                self.hw,
                self.ctrl,
                self.counters,
                t_end,
                y_out,
                self.turns,
            )
        )

    @property
    def t_internal(self) -> float:
        """The time of the internal state: the last output time reached (steps end there)."""
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
            # f at a failed run's last state may be what stopped it.
            "f": (np.float64, (n,), FINITE_WHILE_OK),
            "ctrl": (np.float64, (N_CTRL,)),
            "turns": (np.int64, self.turns.shape),
        }

    def controller_sound(self, snap: dict) -> bool:
        # What advance_to relies on: the internal state at the output time (steps end on it),
        # a step to try, a line the table holds, and a rejection flag.
        ctrl, t = snap["ctrl"], snap["t"]
        k = ctrl[CT_K]
        return bool(
            ctrl[CT_T] == t
            and ctrl[CT_H] > 0.0
            and k == int(k)
            and K_MIN <= k <= K_MAX - 1
            and ctrl[CT_REJECTED] in (0.0, 1.0)
        )


# gbs-dense takes a horizon as rk45 and dop853 do: without one no step is ever clipped and the
# last output comes from the dense output too.
DENSE_SETTINGS = (*SETTINGS, Setting("horizon", required=False, positive=False))


class GraggBulirschStoerDense(Method):
    """gbs with the step numbers 2, 6, 10, ... and a dense output: steps never end on an output
    time (dense_kernel.py)."""

    info = MethodInfo(
        name="gbs-dense",
        family=FAMILY,
        order=2 * K_MAX,
        symplectic=False,
        forms=("body", "euler"),
        control="tolerance",
        keeps=(),
        keeps_roundoff=("p_psi",),
        keeps_by_form=KEEPS_BY_FORM,
        compensated=False,
        description=(
            f"Gragg-Bulirsch-Stoer with steps 2, 6, 10, ... (4 j - 2), Aitken-Neville in h^2, "
            f"order {2 * K_MIN}-{2 * K_MAX} and step by work per unit time; dense output of "
            "degree 2 k from the midpoint's extrapolated derivatives and both ends, so the steps "
            "do not depend on the output times"
        ),
        source=(
            "Hairer, Norsett and Wanner, Solving ODEs I, 2nd ed., sec. II.9 (dense output after "
            "Hairer and Ostermann 1990)"
        ),
    )

    @property
    def settings_spec(self):
        return DENSE_SETTINGS

    def start(self, form, params, t0, y0, settings) -> GBSDenseStepper:
        s = self.settings(settings)
        horizon = s["horizon"]
        if horizon is not None and not horizon > float(t0):
            raise MethodRefused(
                f"{self.name}: horizon {horizon!r} must be later than the start {float(t0)!r}"
            )
        return GBSDenseStepper.begin(self, int(form), params, float(t0), y0, s)


class GBSDenseStepper(ControlledStepper):
    """A run of gbs-dense: yi is the state at ctrl[CT_T] (at or past the last output time),
    f = rhs(yi); dense holds the polynomial of the last accepted step when it served an output."""

    method: GraggBulirschStoerDense
    horizon: float | None

    @classmethod
    def begin(cls, method, form: int, params, t0: float, y0, s: dict):
        y0 = np.ascontiguousarray(y0, dtype=np.float64).copy()
        n = FORM_SIZE[form]
        if y0.shape != (n,):
            raise MethodRefused(f"{method.name}: state has shape {y0.shape}, the form needs {n}")
        params = np.ascontiguousarray(params, dtype=np.float64)
        st = cls(form=form, params=params, t=t0, y=y0.copy())
        st.method = method
        st.settings = s
        st.horizon = s["horizon"]
        st.kernel = dk.advance_kernel(form)
        st.tol = np.empty(dk.N_TOL)
        st.tol[dk.TL_RTOL] = s["rtol"]
        st.tol[dk.TL_ATOL] = s["atol"]
        st.tol[dk.TL_HORIZON] = np.inf if st.horizon is None else st.horizon
        st.yi = y0
        st.f = np.empty(n)
        st.table = np.zeros(K_MAX * n)
        st.za = np.empty(n)
        st.zb = np.empty(n)
        st.ft = np.empty(n)
        st.fl = np.zeros((dk.N_MAX + 1) * n)
        st.zm = np.zeros(n)
        st.mid = np.zeros(K_MAX * (dk.M_MAX + 1) * n)
        st.dtab = np.zeros(K_MAX * n)
        st.dense = np.zeros(dk.N_COEF * n)
        st.hw = np.zeros(dk.N_WORK)
        st.ctrl = np.zeros(dk.N_CTRL)
        st.counters = np.zeros(N_COUNTERS, dtype=np.int64)
        first_derivative(form, params, st.yi, st.f, st.counters)
        k = start_line(s["rtol"])
        h0 = start_step(
            form, params, st.yi, st.f, st.za, st.ft, s["rtol"], s["atol"], 2 * k, st.counters
        )
        if st.horizon is not None:
            h0 = min(h0, st.horizon - t0)
        if not (np.isfinite(h0) and h0 > 0.0):
            raise MethodRefused(f"{method.name}: no finite step from the start state")
        st.ctrl[dk.CT_T] = t0
        st.ctrl[dk.CT_H] = h0
        st.ctrl[dk.CT_K] = k
        st.ctrl[dk.CT_T_OLD] = t0
        return st

    CT_T = dk.CT_T
    ARRAYS = ("y", "yi", "f", "dense", "ctrl", "counters", "turns")

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
                self.tol,
                self.yi,
                self.f,
                self.table,
                self.za,
                self.zb,
                self.ft,
                self.fl,
                self.zm,
                self.mid,
                self.dtab,
                self.dense,
                self.hw,
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
        return float(self.ctrl[dk.CT_T])

    @property
    def step_proposed(self) -> float:
        return float(self.ctrl[dk.CT_H])

    def snapshot_fields(self) -> dict:
        n = self.yi.shape[0]
        state = (np.float64, (n,))
        return {
            **stepper_fields(N_COUNTERS),
            "y": state,
            "yi": state,
            "f": (np.float64, (n,), FINITE_WHILE_OK),
            "dense": (np.float64, self.dense.shape),
            "ctrl": (np.float64, (dk.N_CTRL,)),
            "turns": (np.int64, self.turns.shape),
        }

    def controller_sound(self, snap: dict) -> bool:
        # The internal state at or past the output time, the last step reaching back to it
        # with its polynomial built (unless it ends there), a step and a line to try.
        ctrl, t = snap["ctrl"], snap["t"]
        k = ctrl[dk.CT_K]
        degree = ctrl[dk.CT_DEGREE]
        landed = ctrl[dk.CT_T] == t
        return bool(
            ctrl[dk.CT_T_OLD] <= t <= ctrl[dk.CT_T]
            and ctrl[dk.CT_H] > 0.0
            and k == int(k)
            and K_MIN <= k <= K_MAX - 1
            and ctrl[dk.CT_REJECTED] in (0.0, 1.0)
            and ctrl[dk.CT_DENSE_OK] in (0.0, 1.0)
            and (landed or (ctrl[dk.CT_DENSE_OK] == 1.0 and ctrl[dk.CT_H_PREV] > 0.0))
            and degree == int(degree)
            and 0 <= degree < dk.N_COEF
        )


GBS = GraggBulirschStoer()
GBS_DENSE = GraggBulirschStoerDense()
METHODS = [GBS, GBS_DENSE]
