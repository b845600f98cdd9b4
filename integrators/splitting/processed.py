"""Processed splittings: a cheap symmetric kernel K of order 2 run for every step, and a
processor P applied only where a state is handed out, so that the output y_n = P K^n P^-1 y_0
has the table's effective order (4 or 6) at the kernel's cost per step (Blanes, Casas and Ros,
SIAM J. Sci. Comput. 21 (1999) 711; coefficients derived here, processed_tables.py).

What the stepper holds and hands out:
- the kernel state w, started from P^-1 y_0 (applied once when the run starts, or again when
  the first request goes backwards: P depends on the sign of the step), and stepped exactly as
  the splitting methods step theirs (kernels.py, the same grid and merged kicks);
- y, the processed output P(closed kernel state), made afresh at every output time and never
  fed back into the kernel: sampling often or rarely gives the same bits.
At t0 the output is y_0 itself. A snapshot holds the kernel state (w, e, fresh, n) and the
processed y; a resumed run continues the kernel and so repeats the same bits. The processor's
sub-flows are counted with the steps' (C_EVALS, C_FORCE_EVALS): they are work the run did.

Every piece is an exact flow of a Hamiltonian piece, as for the splittings, so y_0 -> y_n is a
symplectic (body form: Poisson) map and keeps what the splittings keep.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from topdrift.integrators.base import Method, MethodInfo, Stepper
from topdrift.integrators.splitting.methods import KEEPS_BY_FORM, SplittingStepper, checked_start
from topdrift.integrators.splitting.processed_tables import TABLES, ProcessedTable
from topdrift.integrators.splitting.processor_kernel import apply_sequence
from topdrift.models.flows import FREE_EXACT


@dataclass
class ProcessedStepper(SplittingStepper):
    """A SplittingStepper on the kernel whose handed-out y is the processed state."""

    post_kick: np.ndarray = field(default_factory=lambda: np.zeros(0))
    post_drift: np.ndarray = field(default_factory=lambda: np.zeros(0))

    def _face(self, direction: int) -> None:
        if direction == self.direction:
            return
        super()._face(direction)
        signed = self.step if direction > 0 else -self.step
        kick, drift = self.method.table.post()
        self.post_kick = np.ascontiguousarray(kick * signed)
        self.post_drift = np.ascontiguousarray(drift * signed)
        if self.n == 0 and self.fresh[0] != 0:
            # no step taken yet: start the kernel again from y_0 with this direction's P^-1
            self.w[:] = self.method.preprocess(self.form, self.params, self.y, signed, self)

    def _close(self) -> None:
        super()._close()
        if self.fresh[0] != 0:
            return  # no step taken: the output is y_0 itself, not P(P^-1 y_0)
        apply_sequence(
            self.form,
            self.free,
            self.params,
            self.post_kick,
            self.post_drift,
            self.y,
            self.counters,
        )


class ProcessedMethod(Method):
    """A processed splitting from a ProcessedTable, in both forms."""

    kicks_potential = True  # its B flow is the field's kick (base.Method says why)

    def __init__(self, table: ProcessedTable) -> None:
        self.table = table
        self.compensated = False
        self.free = FREE_EXACT
        self.kick_table, self.drift_table = table.kernel()
        pk, pd = table.post()
        self.info = MethodInfo(
            name=f"leapfrog-{table.key}",
            family="splitting",
            order=table.order,
            symplectic=True,
            forms=("euler", "body"),
            control="step",
            keeps=("p_psi",),
            keeps_roundoff=("p_phi", "norm"),
            keeps_by_form=KEEPS_BY_FORM,
            compensated=False,
            description=(
                f"{table.title}; euler: drift H_a / kick H_b, body: exact free flow / gravity "
                f"kick; {2 * table.stages} sub-flows per step, {len(pk) + len(pd)} more per "
                "output time (the processor; the samples are processed states)"
            ),
            source=(
                "processing: Blanes, Casas and Ros, SIAM J. Sci. Comput. 21 (1999) 711; "
                "kernel and processor coefficients derived here (processed_tables.py)"
            ),
        )

    def preprocess(
        self, form: int, params: np.ndarray, y0: np.ndarray, signed: float, stepper: Stepper
    ) -> np.ndarray:
        """P^-1 y_0 for a step of `signed` (its sign is the direction)."""
        kick, drift = self.table.pre()
        w = np.array(y0, dtype=np.float64)
        apply_sequence(
            form,
            self.free,
            params,
            np.ascontiguousarray(kick * signed),
            np.ascontiguousarray(drift * signed),
            w,
            stepper.counters,
        )
        return w

    def start(
        self, form: int, params: np.ndarray, t0: float, y0: np.ndarray, settings: dict
    ) -> Stepper:
        checked = self.settings(settings)
        h = checked["step"]
        # the splittings' own start checks, the off-axis rotor's refusal included (the kernel's
        # free flow is the exact one)
        form, y = checked_start(self, self.free, form, params, y0)
        n = y.shape[0]
        params = np.ascontiguousarray(params, dtype=np.float64)
        pk, pd = self.table.post()
        stepper = ProcessedStepper(
            form=form,
            params=params,
            t=float(t0),
            y=y.copy(),
            method=self,
            settings=checked,
            step=h,
            kick=np.ascontiguousarray(self.kick_table * h),
            drift=np.ascontiguousarray(self.drift_table * h),
            compensated=False,
            free=self.free,
            t0=float(t0),
            n=0,
            w=y.copy(),
            e=np.zeros(n),
            fresh=np.ones(1, dtype=np.int64),
            scratch=np.zeros(n),
            post_kick=np.ascontiguousarray(pk * h),
            post_drift=np.ascontiguousarray(pd * h),
        )
        stepper.w[:] = self.preprocess(form, params, y, h, stepper)
        return stepper


METHODS = [ProcessedMethod(t) for t in TABLES]
