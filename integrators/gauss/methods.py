"""Gauss-Legendre collocation, 1, 2 and 3 stages (orders 2, 4 and 6; one stage is the implicit
midpoint rule), fixed step, in both state forms,
with plain or compensated (Kahan) summation of the update.

Which invariants a run keeps. Gauss collocation keeps every quadratic first integral of the ODE
exactly, up to the round-off of the stage solve (G. J. Cooper, "Stability of Runge-Kutta methods
for trajectory problems", IMA J. Numer. Anal. 7 (1987) 1-13, from memory), and like every
Runge-Kutta method every linear one. Worked out per form:

  body form  |q|^2 is quadratic and d|q|^2/dt = 0 for any w: kept.
             H = m.I^-1 m / 2 + M g chi.Gamma(q) with Gamma(q) = R(q)^T e_z quadratic in q, and H
             is a first integral of the equations as written, for any |q|: kept, for every body.
             p_phi = m.Gamma(q) is cubic: not kept (drifts at the truncation error).
             p_psi = m3 is linear and a first integral when I1 = I2 and chi is on axis 3: kept.
  euler form p_phi and p_psi have identically zero derivative: kept bit for bit.
             H is not polynomial in theta: not kept (bounded error, as for any symplectic method).
             norm is 1 by definition.

By the rule of integrators/base.py: to the bit in the Euler form p_phi, p_psi (and the norm,
trivially); to round-off in the body form energy, norm and p_psi (m3's rate m1 w2 - m2 w1 rounds
to a few ulps rather than 0, and the stage solve stops at round-off). So `keeps` is empty (no
quantity is kept to the bit in both forms) and `keeps_roundoff` is p_psi and norm; the tests
check every statement per form.
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
from topdrift.integrators.gauss.kernel import N_ITERS, N_MEMO, gauss_steps, work_size
from topdrift.integrators.gauss.tableau import GAUSS1, GAUSS2, GAUSS3, Tableau
from topdrift.integrators.validation import (
    ANY,
    COUNT,
    STEP,
    Setting,
    check_snapshot,
    snapshot_identity,
    stepper_fields,
)
from topdrift.models import FORM_NAMES

# Sweeps of the fixed-point iteration allowed per step, unless settings say otherwise. At the
# steps these methods are meant for, the iteration contracts by a factor h L |A| < 0.3 per sweep
# and needs 4 to 15 sweeps; 60 leaves room for a slowly contracting step before giving up.
DEFAULT_MAX_ITERATIONS = 60

SOURCE = (
    "Butcher 1964, Math. Comp. 18; Hairer and Wanner, Solving ODEs II, sec. IV.5 [from memory]; "
    "Hairer, Lubich and Wanner, Geometric Numerical Integration, sec. II.1.3 [from memory]"
)

SETTINGS = (
    STEP,
    Setting(
        "max_iterations",
        kind=COUNT,
        required=False,
        default=DEFAULT_MAX_ITERATIONS,
        minimum=2,
        why="a stall is seen only after two sweeps",
    ),
)

KEEPS_BY_FORM = {
    "euler": (("p_phi", "p_psi", "norm"), ()),
    "body": ((), ("energy", "norm", "p_psi")),
}


class GaussStepper(Stepper):
    """A run of a Gauss-Legendre method; advance_to goes forward or back on the grid t0 + k h,
    the step's sign following the direction (the methods are symmetric)."""

    def __init__(self, method, form, params, t0, y0, settings):
        super().__init__(form=form, params=params, t=t0, y=y0)
        tab = method.tableau
        n = y0.shape[0]
        s = tab.stages
        self.method_name = method.name
        self.settings = settings
        self.h = settings["step"]
        self.max_iter = settings["max_iterations"]
        self.compensated = method.info.compensated
        self.tab = tab
        self.comp = np.zeros(n)
        self.fprev = np.zeros(s * n)
        self.memo = np.full(N_MEMO, np.nan)
        self.iters = np.zeros(N_ITERS, dtype=np.int64)
        self.work = np.zeros(work_size(s, n))

    def advance_to(self, t_end: float) -> int:
        if self.status != ST_OK:
            return self.status
        whole = grid_steps(self.method_name, self.t, t_end, self.h)
        if whole == 0:
            return ST_OK
        h = self.h if whole > 0 else -self.h
        status, done = gauss_steps(
            self.form,
            self.y,
            self.params,
            h,
            abs(whole),
            self.tab.a,
            self.tab.b,
            self.tab.c,
            self.tab.e,
            self.tab.mu,
            self.tab.b_hi,
            self.tab.b_lo,
            self.compensated,
            self.max_iter,
            self.comp,
            self.fprev,
            self.memo,
            self.work,
            self.counters,
            self.iters,
            self.turns,
        )
        if status == ST_OK:
            self.t = float(t_end)
        else:
            self.t = self.t + done * h
            self.status = int(status)
            self.t_fail = self.t
        return self.status

    @property
    def sweeps(self) -> int:
        """Fixed-point sweeps so far (each costs one rhs evaluation per stage)."""
        return int(self.iters[0])

    def _fields(self) -> dict:
        state = (np.float64, self.y.shape)
        return {
            **stepper_fields(N_COUNTERS),
            "y": state,
            "comp": state,
            "fprev": (np.float64, self.fprev.shape),
            "memo": (np.float64, self.memo.shape, ANY),  # NaN: no stages kept yet
            "iters": (np.int64, self.iters.shape),
            "turns": (np.int64, self.turns.shape),
        }

    def snapshot(self) -> dict:
        snap = snapshot_identity(self.method_name, self.form, self.settings)
        snap.update(
            t=self.t,
            y=self.y.copy(),
            comp=self.comp.copy(),
            fprev=self.fprev.copy(),
            memo=self.memo.copy(),
            counters=self.counters.copy(),
            iters=self.iters.copy(),
            turns=self.turns.copy(),
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
        for key, dest in (
            ("y", self.y),
            ("comp", self.comp),
            ("fprev", self.fprev),
            ("memo", self.memo),
            ("counters", self.counters),
            ("iters", self.iters),
            ("turns", self.turns),
        ):
            dest[:] = snap[key]
        self.t = float(snap["t"])
        self.status = int(snap["status"])
        self.t_fail = float(snap["t_fail"])


class GaussMethod(Method):
    """A Gauss-Legendre collocation method from its tableau, plain or compensated."""

    def __init__(self, name: str, table: dict, compensated: bool, title: str = "") -> None:
        self.tableau = Tableau(table)
        s = self.tableau.stages
        summation = (
            "the stages in ratio form with each weight as two doubles (summing to 1 within "
            "1e-32, still exactly symplectic), the update added with Kahan's compensated "
            "summation"
            if compensated
            else "plain summation of the update"
        )
        self.info = MethodInfo(
            name=name,
            family="gauss-legendre",
            order=self.tableau.order,
            symplectic=True,
            forms=("euler", "body"),
            control="step",
            keeps=(),
            keeps_roundoff=("p_psi", "norm"),
            keeps_by_form=KEEPS_BY_FORM,
            compensated=compensated,
            description=(
                f"{title}Gauss-Legendre collocation, {s} stage{'s' if s > 1 else ''}, order "
                f"{self.tableau.order}; stage "
                f"equations solved by fixed-point iteration to round-off; {summation}. Also "
                f"keeps energy in the body form and p_phi in the Euler form"
            ),
            source=(
                "implicit midpoint rule: Hairer, Lubich and Wanner, Geometric Numerical "
                "Integration, 2006, sec. II.1 [from memory]; " + SOURCE
                if s == 1
                else SOURCE
            ),
        )

    @property
    def settings_spec(self):
        return SETTINGS

    def start(self, form, params, t0, y0, settings) -> Stepper:
        form = int(form)
        if form < 0 or form >= len(FORM_NAMES) or FORM_NAMES[form] not in self.info.forms:
            raise MethodRefused(f"{self.name}: unknown state form code {form!r}")
        checked = self.settings(settings)
        y = self.start_state(form, y0)
        p = np.ascontiguousarray(params, dtype=np.float64)
        return GaussStepper(self, form, p, float(t0), y, checked)


MIDPOINT = "implicit midpoint rule: "
METHODS = [
    GaussMethod("midpoint", GAUSS1, compensated=False, title=MIDPOINT),
    GaussMethod("midpoint-kahan", GAUSS1, compensated=True, title=MIDPOINT),
    GaussMethod("gauss4", GAUSS2, compensated=False),
    GaussMethod("gauss6", GAUSS3, compensated=False),
    GaussMethod("gauss4-kahan", GAUSS2, compensated=True),
    GaussMethod("gauss6-kahan", GAUSS3, compensated=True),
]
