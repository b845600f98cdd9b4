"""Symplectic variable-step splittings: the Euler-form Stormer-Verlet step on the time-transformed
Hamiltonian K = g(theta) (H + e) in extended phase space, and two palindromic compositions of it
(the order-4 Suzuki fractal and the order-6 Kahan-Li table, compositions.py). The equations, the
monitor g and the solves are in sundman_sym_kernel.py.

What it is: a fixed step eps in the fictive time s, a step of about eps g(theta) in t (g <= 1,
so eps is the step where the motion is slow). The map of one step on (t, theta, phi, psi; e,
p_theta, p_phi, p_psi) is symplectic and symmetric (Hairer, Appl. Numer. Math. 25 (1997) 219):
time-reversible, and, as a symplectic map of a time-independent Hamiltonian, K stays near 0 and
H near H_0 without drift over long runs (backward error analysis). Its twin in sundman.py
(Hairer and Soderlind's explicit step density) is time-reversible but not symplectic.

Output times: the step points t_n are where the clock of K lands, not chosen. A step that would
pass the requested t is computed, found to pass, and undone (one wasted step per output
interval, counted); the sample at t is then one fixed step of the same table of length t - t_n
from the step point (sundman_kernel.sundman_sample), never fed back. The step sequence, and so
its symplecticity and reversibility, is untouched by the sampling; each sample itself is a
non-symplectic side map of the step point (a step of t - t_n, which depends on the state), whose
error is local: it does not accumulate.

Euler form only, for symmetric bodies (the Euler form describes no other): the pole the monitor
watches is a singularity of the Euler angles; the body form has none.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from topdrift.integrators.base import (
    Method,
    MethodInfo,
    MethodRefused,
    Stepper,
)
from topdrift.integrators.splitting.compositions import TABLE_BY_KEY, SplittingTable
from topdrift.integrators.splitting.methods import checked_start
from topdrift.integrators.splitting.step_point_stepper import CALL_STEPS, StepPointStepper
from topdrift.integrators.splitting.sundman import rate_scale2
from topdrift.integrators.splitting.sundman_sym_kernel import (
    F_E,
    F_INV_OMEGA2,
    F_PPHI0,
    F_PPSI0,
    N_AUX,
    N_EULER,
    N_FROZEN,
    Q_V,
    sym_start,
    sym_steps,
)
from topdrift.integrators.validation import (
    SnapshotRefused,
)
from topdrift.models.body import P_H3, P_INV1, P_INV3
from topdrift.models.flows import FREE_EXACT
from topdrift.models.forms import FORM_EULER

SYM_TABLES = ("", "s4", "kl6")
SOURCE = (
    "time transformation in extended phase space, K = g (H - H0) with the generalized "
    "Stormer-Verlet step: Hairer, Appl. Numer. Math. 25 (1997) 219; monitor g(theta) = "
    "1/sqrt(1 + omega^2/Omega^2) on the kick's Euler-angle rates, ours; composition: "
)


def frozen_constants(params: np.ndarray, y: np.ndarray) -> np.ndarray:
    """p_phi0, p_psi0, 1 / Omega^2 (sundman.rate_scale2); e is set by minus_energy."""
    out = np.zeros(N_FROZEN)
    out[F_PPHI0] = y[3]
    out[F_PPSI0] = y[5]
    out[F_INV_OMEGA2] = 1.0 / rate_scale2(params, y)
    return out


def minus_energy(params: np.ndarray, y: np.ndarray, aux: np.ndarray) -> float:
    """e = -H(y) = -(T + C + V), V from aux at y's theta, as the kernel sums H."""
    spin = y[5] - params[P_H3]
    return -(0.5 * y[4] * y[4] * params[P_INV1] + 0.5 * spin * spin * params[P_INV3] + aux[Q_V])


@dataclass
class SymSundmanStepper(StepPointStepper):
    """A symplectic variable-step run (step_point_stepper.py); its control constants are the
    frozen p_phi0, p_psi0, 1 / Omega^2 and e = -H(y0), and aux holds the kick's values at the
    point's theta."""

    frozen: np.ndarray = field(default_factory=lambda: np.zeros(N_FROZEN))
    aux: np.ndarray = field(default_factory=lambda: np.zeros(N_AUX))
    backup: np.ndarray = field(default_factory=lambda: np.zeros(N_EULER + N_AUX + 2))

    def take_steps(self, eps: float, t_end: float) -> tuple[int, bool]:
        status, _, reached = sym_steps(
            self.params, self.frozen, self.method.gammas, eps, t_end, CALL_STEPS, self.w,
            self.aux, self.clock, self.backup, self.counters, self.w_turns,
        )  # fmt: skip
        return status, reached

    def control_fields(self) -> dict:
        return {"frozen": (np.float64, (N_FROZEN,))}

    def control_state(self) -> dict:
        return {"frozen": self.frozen.copy()}

    def check_control(self, snap: dict) -> None:
        if not (snap["frozen"][F_INV_OMEGA2] > 0.0 and np.all(np.isfinite(snap["frozen"]))):
            raise SnapshotRefused(
                f"{self.method.name}: snapshot's monitor constants are not finite, "
                "or 1/Omega^2 is not > 0"
            )

    def restore_control(self, snap: dict) -> None:
        self.frozen[:] = snap["frozen"]


class SymSundmanMethod(Method):
    """The symplectic variable-step twin of a palindromic composition of the Strang step."""

    def __init__(self, table: SplittingTable) -> None:
        if table.kind != "composition":
            raise ValueError(f"{table.key}: only compositions of the Strang step here")
        self.table = table
        self.gammas = np.ascontiguousarray(np.array(table.coefficients, dtype=np.float64))
        kick, drift = table.sequence()  # the side step to the output times
        self.kick_table = np.ascontiguousarray(kick)
        self.drift_table = np.ascontiguousarray(drift)
        name = "leapfrog" + (f"-{table.key}" if table.key else "") + "-sundman-sym"
        self.info = MethodInfo(
            name=name,
            family="splitting",
            order=table.order,
            symplectic=True,
            forms=("euler",),
            control="step",
            keeps=("p_phi", "p_psi", "norm"),
            keeps_roundoff=(),
            compensated=False,
            description=(
                f"{table.title} of the generalized Stormer-Verlet step on K = g(theta) (H - H0) "
                "in extended phase space, a fixed step eps in fictive time, about eps g in t; "
                "euler only; symplectic in (t, angles; -H, momenta) and time-reversible; "
                "implicit kick (closed form) and drift (Newton on theta); samples are one "
                "fixed step of the table from the last step point, never fed back"
            ),
            source=SOURCE + table.source,
        )

    def check(self, body, form: str, settings: dict) -> None:
        self.settings(settings)
        if form == "body":
            raise MethodRefused(
                f"{self.name}: euler form only: its monitor watches the pole of the Euler "
                "angles, which the body form does not have; use a fixed-step leapfrog there"
            )
        super().check(body, form, settings)

    def start(
        self, form: int, params: np.ndarray, t0: float, y0: np.ndarray, settings: dict
    ) -> Stepper:
        checked = self.settings(settings)
        if int(form) != FORM_EULER:
            raise MethodRefused(
                f"{self.name}: euler form only: its monitor watches the pole of the Euler "
                "angles, which the body form does not have"
            )
        form, y = checked_start(self, FREE_EXACT, form, params, y0)
        y = self.start_state(form, y)
        params = np.ascontiguousarray(params, dtype=np.float64)
        if not (rate_scale2(params, y) > 0.0):
            raise MethodRefused(
                f"{self.name}: no rate scale for the monitor: the top has no spin, no "
                "vertical momentum and no weight"
            )
        frozen = frozen_constants(params, y)
        if not np.all(np.isfinite(frozen)):
            raise MethodRefused(f"{self.name}: the monitor's constants are not finite")
        stepper = SymSundmanStepper(
            form=form,
            params=params,
            t=float(t0),
            y=y.copy(),
            method=self,
            settings=checked,
            eps=checked["step"],
            frozen=frozen,
            w=y.copy(),
            clock=np.array([float(t0), 0.0]),
        )
        sym_start(params, frozen, stepper.w, stepper.aux, stepper.counters)
        stepper.frozen[F_E] = minus_energy(params, y, stepper.aux)
        if not np.all(np.isfinite(stepper.aux)):
            raise MethodRefused(f"{self.name}: the monitor is not finite at the start")
        return stepper


METHODS = [SymSundmanMethod(TABLE_BY_KEY[k]) for k in SYM_TABLES]
