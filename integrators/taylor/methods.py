"""`taylor-adaptive`: a Taylor-series method of adaptive order and step in the body form.

The series and the Jorba-Zou order and step rule are in kernel.py. Settings (checked by
validation.py): "rtol" and "atol" (required, positive). rtol may go down to one machine
epsilon: the step rule reads the truncation of the series itself, not a difference of two
solutions that round-off would swamp, so nothing breaks there (the accuracy then stops at
round-off, as for any method in doubles).

advance_to(t_out) takes whole steps while the current step ends before t_out, then evaluates
the step's series at t_out: the step sequence does not depend on the output times. The
controller (the series' centre, its step and order) and the series itself are part of the
snapshot, so a restored stepper continues to the same bits.

Counters: steps = steps taken; rejected = 0 (the step is chosen before it is taken); evals =
series expansions (one per step plus one at the start), each also counted as a force
evaluation. One expansion of order p costs about p^2 / 2 products per quadratic term, so
evals alone understate the cost against a Runge-Kutta method: compare times, not evals.
"""

from __future__ import annotations

import numpy as np

from topdrift.integrators.base import (
    N_COUNTERS,
    ST_OK,
    Method,
    MethodInfo,
    MethodRefused,
)
from topdrift.integrators.controlled_stepper import ControlledStepper
from topdrift.integrators.taylor.kernel import (
    CT_H,
    CT_ORDER,
    CT_T,
    CT_T_LO,
    N_COEF,
    N_CTRL,
    N_TOL,
    N_WORK,
    P_MAX,
    P_MIN,
    STRIDE,
    TL_ATOL,
    TL_RTOL,
    advance,
    expand,
)
from topdrift.integrators.validation import (
    EPS,
    Setting,
    stepper_fields,
)
from topdrift.models.forms import FORM_BODY, N_BODY

SETTINGS = (
    Setting("rtol", minimum=EPS, floor="one machine epsilon", why="the precision of a double"),
    Setting("atol"),
)

# What it keeps (the rule: integrators/base.py). For a body with I1 = I2 (in doubles) and the
# centre of mass on axis 3 the coefficient of m3's rate, 1/I2 - 1/I1, is exactly 0.0, and so is
# (Gamma x M g chi)_3 = Gamma_1 * 0 - Gamma_2 * 0: every Taylor coefficient of m3 is 0.0 and
# Horner's rule returns m3 unchanged, to the bit (tests/test_keeps.py). Energy and |q| are not
# invariants a truncated series keeps: not kept.
KEEPS_BY_FORM = {"body": (("p_psi",), ())}


class TaylorAdaptive(Method):
    # its series recurrences are those of the uniform-gravity torque (kernel.series)
    carries_fields = False
    """Taylor series of adaptive order (P_MIN..P_MAX) and step, body form, tolerance control."""

    info = MethodInfo(
        name="taylor-adaptive",
        family="taylor",
        # The order varies with the tolerance (p = ceil(-ln(eps) / 2) + 1); the runner reports
        # the largest order the method can take.
        order=P_MAX,
        symplectic=False,
        forms=("body",),
        control="tolerance",
        keeps=("p_psi",),
        keeps_roundoff=(),
        keeps_by_form=KEEPS_BY_FORM,
        compensated=False,
        description=(
            f"Taylor series by Cauchy products, order {P_MIN}-{P_MAX} and step from the "
            "coefficients' decay (Jorba-Zou rule), dense output from the series"
        ),
        source="A. Jorba and M. Zou, Exp. Math. 14 (2005) 99-117 (order and step rule)",
    )

    @property
    def settings_spec(self):
        return SETTINGS

    def start(self, form, params, t0, y0, settings) -> TaylorStepper:
        s = self.settings(settings)
        if int(form) != FORM_BODY:
            raise MethodRefused(f"{self.name}: runs in the body form only")
        return TaylorStepper.begin(self, params, float(t0), y0, s)


class TaylorStepper(ControlledStepper):
    """A run of taylor-adaptive: yi is the state at ctrl[CT_T], coef its series."""

    method: TaylorAdaptive

    @classmethod
    def begin(cls, method: TaylorAdaptive, params, t0: float, y0, s: dict) -> TaylorStepper:
        y0 = np.ascontiguousarray(y0, dtype=np.float64).copy()
        if y0.shape != (N_BODY,):
            raise MethodRefused(f"{method.name}: state has shape {y0.shape}, the form needs 7")
        params = np.ascontiguousarray(params, dtype=np.float64)
        st = cls(form=FORM_BODY, params=params, t=t0, y=y0.copy())
        st.method = method
        st.settings = s
        st.tol = np.empty(N_TOL)
        st.tol[TL_RTOL] = s["rtol"]
        st.tol[TL_ATOL] = s["atol"]
        st.yi = y0
        st.coef = np.zeros(N_COEF)
        st.work = np.zeros(N_WORK)
        st.ctrl = np.zeros(N_CTRL)
        st.ctrl[CT_T] = t0
        st.counters = np.zeros(N_COUNTERS, dtype=np.int64)
        if expand(params, st.tol, st.yi, st.coef, st.work, st.ctrl, st.counters) != ST_OK:
            raise MethodRefused(f"{method.name}: no finite step from the start state")
        return st

    CT_T = CT_T
    ARRAYS = ("y", "yi", "coef", "ctrl", "counters", "turns")

    def call_kernel(self, t_end: float, y_out: np.ndarray) -> int:
        return advance(
            self.params, self.tol, self.yi, self.coef, self.work, self.ctrl, self.counters,
            t_end, y_out,
        )  # fmt: skip

    @property
    def t_internal(self) -> float:
        """The centre of the current series (at or before self.t), rounded to a double."""
        return float(self.ctrl[CT_T] + self.ctrl[CT_T_LO])

    def snapshot_fields(self) -> dict:
        state = (np.float64, (N_BODY,))
        return {
            **stepper_fields(N_COUNTERS),
            "y": state,
            "yi": state,
            "coef": (np.float64, (N_COEF,)),
            "ctrl": (np.float64, (N_CTRL,)),
            "turns": (np.int64, self.turns.shape),
        }

    def controller_sound(self, snap: dict) -> bool:
        # What advance_to relies on: an output time inside the current step, an order the
        # coefficient array holds, and a series centred on the internal state.
        ctrl, t, coef, yi = snap["ctrl"], snap["t"], snap["coef"], snap["yi"]
        p = ctrl[CT_ORDER]
        return bool(
            ctrl[CT_H] > 0.0
            and -4.0 * EPS * max(1.0, abs(t)) <= (t - ctrl[CT_T]) - ctrl[CT_T_LO] <= ctrl[CT_H]
            and abs(ctrl[CT_T_LO]) <= EPS * max(1.0, abs(ctrl[CT_T]))
            and p == int(p)
            and P_MIN <= p <= P_MAX
            and all(coef[i * STRIDE] == yi[i] for i in range(N_BODY))
        )


TAYLOR_ADAPTIVE = TaylorAdaptive()
METHODS = [TAYLOR_ADAPTIVE]
