"""First-order engine schemes at a fixed step, body form: the steps real-time and robotics
engines take, here so that their energy drift and phase error can be seen beside the rest.

  engine-euler          explicit Euler on (q, m), the quaternion renormalised every step.
  engine-semi-implicit  semi-implicit Euler: kick the momentum with the torque, then turn the
                        body by the exact exponential of the new angular velocity, the angular
                        momentum held fixed in space meanwhile.
  engine-implicit-gyro  semi-implicit Euler with the gyroscopic term implicit in the body-frame
                        rate (one Newton iteration per step), then the same exact exponential.

Common practice, no single source (kernel.py has the equations). All are of order 1 and none is
symplectic: the exponential of a frozen angular velocity is not the flow of the kinetic energy
unless the body is a sphere, and the map of the semi-implicit scheme on the sphere |m| = const of
a free body changes area by a relative O(h^2) per step (measured, tests/test_engine.py), so
none of them is a Poisson map.

What each keeps (the rule of integrators/base.py; checked in tests/test_keeps.py):
  engine-euler          |q| (renormalised: 1 up to the rounding of one division), and p_psi on a
                        Lagrange top (m3's rate m1 w2 - m2 w1 vanishes in exact arithmetic).
  engine-semi-implicit  |q| (a product of unit quaternions), and p_phi = m.Gamma: the kick is
                        perpendicular to Gamma, and the turn carries m and Gamma alike. Not
                        p_psi: a finite turn about w = I^-1 m moves m3 by O(h^2) per step.
  engine-implicit-gyro  |q| (a product of unit quaternions), and p_psi on a Lagrange top (the
                        third Newton equation decouples there and its residual vanishes).
All to round-off, none to the bit; none keeps the energy.
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
from topdrift.integrators.engine.kernel import (
    FORM,
    SCHEME_EXPLICIT,
    SCHEME_IMPLICIT_GYRO,
    SCHEME_SEMI_IMPLICIT,
    engine_steps,
)
from topdrift.integrators.validation import check_snapshot, snapshot_identity, stepper_fields

FAMILY = "first-order-engine"
SOURCE = "common practice of real-time and robotics engines (no single source)"


class EngineStepper(Stepper):
    """A run of an engine scheme: steps of h on the grid t0 + n h, forward only (the schemes
    are not symmetric, a step back is no inverse of a step forward)."""

    def __init__(self, method, params, t0, y0, settings):
        super().__init__(form=FORM, params=params, t=t0, y=y0)
        self.method_name = method.name
        self.scheme = method.scheme
        self.settings = settings
        self.h = settings["step"]
        self.t0 = float(t0)
        self.steps_done = 0

    def advance_to(self, t_end: float) -> int:
        if self.status != ST_OK:
            return self.status
        t_end = float(t_end)
        k = grid_steps(self.method_name, self.t, t_end, self.h)
        if k < 0:
            raise MethodRefused(
                f"{self.method_name}: asked for t = {t_end!r}, before the current time {self.t!r}"
            )
        if k == 0:
            return ST_OK
        status, done = engine_steps(self.scheme, self.y, self.params, self.h, int(k), self.counters)
        self.steps_done += int(done)
        if status != ST_OK:
            self.status = int(status)
            self.t_fail = self.t0 + self.steps_done * self.h
            self.t = self.t_fail
            return self.status
        self.t = t_end
        return ST_OK

    def _fields(self) -> dict:
        return {
            **stepper_fields(N_COUNTERS),
            "y": (np.float64, self.y.shape),
            "t0": (float, ()),
            "steps_done": (int, ()),
        }

    def snapshot(self) -> dict:
        snap = snapshot_identity(self.method_name, self.form, self.settings)
        snap.update(
            t=self.t,
            y=self.y.copy(),
            counters=self.counters.copy(),
            t0=self.t0,
            steps_done=self.steps_done,
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
        self.y = np.array(snap["y"], dtype=np.float64)  # states already handed out stay
        self.counters[:] = snap["counters"]
        self.t = float(snap["t"])
        self.t0 = float(snap["t0"])
        self.steps_done = int(snap["steps_done"])
        self.status = int(snap["status"])
        self.t_fail = float(snap["t_fail"])


class EngineMethod(Method):
    """One of the schemes of kernel.py at a fixed step, body form."""

    def __init__(self, name: str, scheme: int, keeps_roundoff: tuple, description: str):
        self.scheme = scheme
        self.info = MethodInfo(
            name=name,
            family=FAMILY,
            order=1,
            symplectic=False,
            forms=("body",),
            control="step",
            keeps=(),
            keeps_roundoff=keeps_roundoff,
            compensated=False,
            description=description,
            source=SOURCE,
        )

    def start(self, form, params, t0, y0, settings) -> Stepper:
        if int(form) != FORM:
            raise MethodRefused(f"{self.name}: runs in the body form only (form code {form!r})")
        checked = self.settings(settings)
        y = self.start_state(FORM, y0)
        p = np.ascontiguousarray(params, dtype=np.float64)
        return EngineStepper(self, p, float(t0), y, checked)


METHODS = [
    EngineMethod(
        "engine-euler",
        SCHEME_EXPLICIT,
        ("norm", "p_psi"),
        "explicit Euler on (q, m), the quaternion renormalised every step; order 1, energy "
        "grows without bound",
    ),
    EngineMethod(
        "engine-semi-implicit",
        SCHEME_SEMI_IMPLICIT,
        ("norm", "p_phi"),
        "semi-implicit Euler: momentum kicked by the torque, body turned by the exact "
        "exponential of the new angular velocity; order 1, not symplectic",
    ),
    EngineMethod(
        "engine-implicit-gyro",
        SCHEME_IMPLICIT_GYRO,
        ("norm", "p_psi"),
        "semi-implicit Euler with the gyroscopic term implicit (one Newton iteration per step), "
        "then the exact exponential; order 1, damps the energy",
    ),
]
