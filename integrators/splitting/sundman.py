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
    N_COUNTERS,
    ST_OK,
    Method,
    MethodInfo,
    MethodRefused,
    Stepper,
)
from topdrift.integrators.splitting.compositions import TABLE_BY_KEY, SplittingTable
from topdrift.integrators.splitting.methods import checked_start
from topdrift.integrators.splitting.sundman_kernel import (
    N_AUX,
    N_EULER,
    start_point,
    sundman_sample,
    sundman_steps,
)
from topdrift.integrators.validation import (
    SnapshotRefused,
    check_snapshot,
    snapshot_identity,
    stepper_fields,
)
from topdrift.models.body import P_H3, P_INV1, P_INV3, P_MGZ
from topdrift.models.flows import FREE_EXACT, N_KICK_RATES
from topdrift.models.forms import FORM_EULER

# The tables that get a variable-step twin: the Strang step and one composition of order 4 and
# of order 6 (the same three as the -axes twins, methods.AXES_TABLES).
SUNDMAN_TABLES = ("", "s4", "kl6")
# Steps per kernel call: a long interval is advanced in pieces so that no call runs unbounded.
CALL_STEPS = 1 << 20
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
class SundmanStepper(Stepper):
    """A variable-step run: the step point (t_n as clock hi + lo, y_n in w, aux at y_n, its
    turns) and the handed-out sample y at t (one step of t - t_n from the point)."""

    method: Method | None = None
    settings: dict = field(default_factory=dict)
    eps: float = 0.0  # > 0; its sign per call is the direction
    omega2: float = 1.0
    w: np.ndarray = field(default_factory=lambda: np.zeros(N_EULER))
    aux: np.ndarray = field(default_factory=lambda: np.zeros(N_AUX))
    clock: np.ndarray = field(default_factory=lambda: np.zeros(2))
    w_turns: np.ndarray = field(default_factory=lambda: np.zeros(2, dtype=np.int64))
    backup: np.ndarray = field(default_factory=lambda: np.zeros(N_EULER + N_AUX))
    rates: np.ndarray = field(default_factory=lambda: np.zeros(N_KICK_RATES))

    @property
    def t_point(self) -> float:
        """t_n, the time of the last step point, rounded once."""
        return float(self.clock[0] + self.clock[1])

    def _sample(self, t_end: float) -> int:
        m = self.method
        dt = (t_end - self.clock[0]) - self.clock[1]
        out = np.empty(N_EULER)
        turns = self.w_turns.copy()
        st = sundman_sample(
            self.params, m.kick_table, m.drift_table, dt, self.w, self.aux, out, self.rates,
            self.counters, turns,
        )  # fmt: skip
        if st != ST_OK:
            return int(st)
        self.y = out
        self.turns[:] = turns
        return ST_OK

    def advance_to(self, t_end: float) -> int:
        if self.status != ST_OK:
            return self.status
        t_end = float(t_end)
        if not np.isfinite(t_end):
            raise MethodRefused(f"{self.method.name}: t = {t_end!r} is not a finite time")
        if t_end == self.t:
            return ST_OK
        if self.turns.shape[0] == 0 and self.w_turns.shape[0] != 0:
            # keep_angles_unfolded() was called: the step points do not fold either
            self.w_turns = np.zeros(0, dtype=np.int64)
        # The direction of the steps is that of t_end from the step point; turning back is
        # allowed (the state is a closed point with its rho): it retraces the steps taken.
        ahead = (t_end - self.clock[0]) - self.clock[1]
        eps = self.eps if ahead >= 0.0 else -self.eps
        m = self.method
        while True:
            status, _, reached = sundman_steps(
                self.params, m.kick_table, m.drift_table, eps, self.omega2, t_end, CALL_STEPS,
                self.w, self.aux, self.clock, self.backup, self.counters, self.w_turns,
            )  # fmt: skip
            if status != ST_OK or reached:
                break
        if status == ST_OK:
            status = self._sample(t_end)
            if status == ST_OK:
                self.t = t_end
                return ST_OK
        # the last good state is the step point
        self.t = self.t_point
        self.t_fail = self.t
        self.y = self.w.copy()
        self.turns[:] = self.w_turns
        self.status = int(status)
        return self.status

    def _fields(self) -> dict:
        return {
            **stepper_fields(N_COUNTERS),
            "y": (np.float64, (N_EULER,)),
            "turns": (np.int64, self.turns.shape),
            "w": (np.float64, (N_EULER,)),
            "aux": (np.float64, (N_AUX,)),
            "clock": (np.float64, (2,)),
            "w_turns": (np.int64, self.w_turns.shape),
            "omega2": (float, ()),
        }

    def snapshot(self) -> dict:
        snap = snapshot_identity(self.method.name, self.form, self.settings)
        snap.update(
            t=self.t,
            status=self.status,
            t_fail=self.t_fail,
            counters=self.counters.copy(),
            y=self.y.copy(),
            turns=self.turns.copy(),
            w=self.w.copy(),
            aux=self.aux.copy(),
            clock=self.clock.copy(),
            w_turns=self.w_turns.copy(),
            omega2=self.omega2,
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
        if not (snap["aux"][N_KICK_RATES] > 0.0 and snap["omega2"] > 0.0):
            raise SnapshotRefused(
                f"{self.method.name}: snapshot's step density rho or rate scale is not > 0"
            )
        self.t = float(snap["t"])
        self.status = int(snap["status"])
        self.t_fail = float(snap["t_fail"])
        self.counters[:] = snap["counters"]
        self.y = np.array(snap["y"], dtype=np.float64)
        self.turns[:] = snap["turns"]
        self.w[:] = snap["w"]
        self.aux[:] = snap["aux"]
        self.clock[:] = snap["clock"]
        self.w_turns[:] = snap["w_turns"]
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
