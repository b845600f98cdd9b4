"""Variable-step splittings: the Euler-form leapfrog and two of its compositions (the order-4
Suzuki fractal and the order-6 Kahan-Li table, compositions.py) with a time-reversible step
control that shortens the step where the Euler angles turn fast, near the pole theta -> 0.

The step sequence (sundman_kernel.py): a step-density variable rho beside the state, the step
h = eps / rho, rho updated symmetrically from the monitor sigma = 1 / sqrt(1 + omega^2 / Omega^2)
(Hairer and Soderlind, SIAM J. Sci. Comput. 26 (2005) 1838). It is the explicit form of a
Sundman time transformation dt/dtau = 1 / rho (Hairer, Appl. Numer. Math. 25 (1997) 219):
tau advances by eps per step. The setting "step" is eps, the step where the motion is slow
(h = eps sigma, and sigma <= 1; about eps / sqrt(2) where omega is near Omega).

What this is and is not: the map (y_n, rho_n) -> (y_(n+1), rho_(n+1)) is symmetric, so the
method is time-reversible (run backwards from (y_N, rho_N) it retraces the steps to round-off)
and, on these reversible integrable motions, its energy error stays bounded; it is not
symplectic in (phi, theta, psi, p): the step varies with the state in a way no symplectic
map allows (that would need the extended-phase-space form, which is not implemented here).
p_phi and p_psi are never written: kept to the bit.

Output times: a sample at t between two step points t_n <= t < t_(n+1) is one step of the same
table of length t - t_n from y_n, never fed back: the step sequence, and so every sample, is the
same however often the run is sampled.

Euler form only: the pole the control watches is a singularity of the Euler angles; the body
form has none, and there the fixed-step splittings are the methods to use.

Omega^2 = ((p_psi - h3) / I3)^2 + (p_phi / I1)^2 + |M g l| / I1: the spin rate, the precession
rate of the vertical momentum and the pendulum rate, all from invariants of the Euler form (kept
to the bit), so that a run started anywhere on a motion, forwards or backwards, uses one scale.
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
from topdrift.integrators.splitting.sundman_kernel import (
    N_AUX,
    N_EULER,
    start_point,
    sundman_steps,
)
from topdrift.integrators.validation import (
    SnapshotRefused,
)
from topdrift.models.body import P_H3, P_INV1, P_INV3, P_MGZ
from topdrift.models.flows import FREE_EXACT, N_KICK_RATES
from topdrift.models.forms import FORM_EULER

# The tables that get a variable-step twin: the Strang step and one composition of order 4 and
# of order 6 (the same three as the -axes twins, methods.AXES_TABLES).
SUNDMAN_TABLES = ("", "s4", "kl6")
SOURCE = (
    "step control: Hairer and Soderlind, SIAM J. Sci. Comput. 26 (2005) 1838; Sundman "
    "transformation: Hairer, Appl. Numer. Math. 25 (1997) 219; monitor sigma = "
    "1/sqrt(1 + omega^2/Omega^2) on the Euler-angle rates, ours; composition: "
)


def rate_scale2(params: np.ndarray, y: np.ndarray) -> float:
    """Omega^2 of the monitor (module docstring), from the invariants of an Euler-form state."""
    spin = (y[5] - params[P_H3]) * params[P_INV3]
    precession = y[3] * params[P_INV1]
    return float(spin * spin + precession * precession + abs(params[P_MGZ]) * params[P_INV1])


@dataclass
class SundmanStepper(StepPointStepper):
    """A time-reversible variable-step run (step_point_stepper.py); its control constant is the
    monitor's rate scale Omega^2, and aux holds the kick's rates and the step density rho."""

    omega2: float = 1.0
    aux: np.ndarray = field(default_factory=lambda: np.zeros(N_AUX))
    backup: np.ndarray = field(default_factory=lambda: np.zeros(N_EULER + N_AUX))

    def take_steps(self, eps: float, t_end: float) -> tuple[int, bool]:
        m = self.method
        status, _, reached = sundman_steps(
            self.params, m.kick_table, m.drift_table, eps, self.omega2, t_end, CALL_STEPS,
            self.w, self.aux, self.clock, self.backup, self.counters, self.w_turns,
        )  # fmt: skip
        return status, reached

    def control_fields(self) -> dict:
        return {"omega2": (float, ())}

    def control_state(self) -> dict:
        return {"omega2": self.omega2}

    def check_control(self, snap: dict) -> None:
        if not (snap["aux"][N_KICK_RATES] > 0.0 and snap["omega2"] > 0.0):
            raise SnapshotRefused(
                f"{self.method.name}: snapshot's step density rho or rate scale is not > 0"
            )

    def restore_control(self, snap: dict) -> None:
        self.omega2 = float(snap["omega2"])


class SundmanMethod(Method):
    """The variable-step twin of a splitting table (a palindromic composition of the Strang
    step: its step is symmetric, which the reversibility needs)."""

    kicks_potential = True  # its B flow is the field's kick (base.Method says why)

    def __init__(self, table: SplittingTable) -> None:
        if table.kind != "composition":
            raise ValueError(f"{table.key}: only compositions of the Strang step here")
        self.table = table
        kick, drift = table.sequence()
        self.kick_table = np.ascontiguousarray(kick)
        self.drift_table = np.ascontiguousarray(drift)
        name = "leapfrog" + (f"-{table.key}" if table.key else "") + "-sundman"
        self.info = MethodInfo(
            name=name,
            family="splitting",
            order=table.order,
            symplectic=False,
            forms=("euler",),
            control="step",
            keeps=("p_phi", "p_psi", "norm"),
            keeps_roundoff=(),
            compensated=False,
            description=(
                f"{table.title}, variable steps; euler only: drift H_a / kick H_b with the step "
                "eps/rho, rho updated symmetrically from a monitor of the Euler-angle rates "
                "(short steps near the pole); time-reversible, not symplectic; "
                f"{table.stages} kicks per step and per sample (a sample is one step of the "
                "table from the last step point, never fed back)"
            ),
            source=SOURCE + table.source,
        )

    def check(self, body, form: str, settings: dict) -> None:
        self.settings(settings)  # bad settings first, as every family refuses them
        if form == "body":
            raise MethodRefused(
                f"{self.name}: euler form only: its step control watches the pole of the Euler "
                "angles, which the body form does not have; use a fixed-step leapfrog there"
            )
        super().check(body, form, settings)

    def start(
        self, form: int, params: np.ndarray, t0: float, y0: np.ndarray, settings: dict
    ) -> Stepper:
        checked = self.settings(settings)
        if int(form) != FORM_EULER:
            raise MethodRefused(
                f"{self.name}: euler form only: its step control watches the pole of the Euler "
                "angles, which the body form does not have"
            )
        form, y = checked_start(self, FREE_EXACT, form, params, y0)
        y = self.start_state(form, y)
        params = np.ascontiguousarray(params, dtype=np.float64)
        omega2 = rate_scale2(params, y)
        if not (omega2 > 0.0 and np.isfinite(omega2)):
            raise MethodRefused(
                f"{self.name}: no rate scale for the step control: the top has no spin, no "
                "vertical momentum and no weight"
            )
        stepper = SundmanStepper(
            form=form,
            params=params,
            t=float(t0),
            y=y.copy(),
            method=self,
            settings=checked,
            eps=checked["step"],
            omega2=omega2,
            w=y.copy(),
            clock=np.array([float(t0), 0.0]),
        )
        start_point(params, omega2, stepper.w, stepper.aux, stepper.counters)
        if not np.all(np.isfinite(stepper.aux)):
            raise MethodRefused(f"{self.name}: the step control is not finite at the start")
        return stepper


METHODS = [SundmanMethod(TABLE_BY_KEY[k]) for k in SUNDMAN_TABLES]
