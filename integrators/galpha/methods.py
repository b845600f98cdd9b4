"""Lie-group generalized-alpha at a fixed step, body form (Bruls, Cardona and Arnold, Mech.
Mach. Theory 48 (2012) 121), with rho_inf, the spectral radius at infinite step, as its setting
(1: no numerical damping; below 1, modes with h w >> 1 are damped by rho_inf per step):

  lie-galpha            rho_inf = 0.9 unless set (`rho_inf` in [0, 1])
  lie-galpha-undamped   rho_inf = 1.0 unless set

kernel.py has the equations and the coefficients (Chung and Hulbert, J. Appl. Mech. 60 (1993)
371). Order 2 (gamma = 1/2 + a_f - a_m); not symplectic (common practice: generalized-alpha is
not, and for rho_inf < 1 it removes energy by design). Besides (q, m) the stepper carries m' and
the pseudo-acceleration, snapshotted with the state. What it keeps (checked in
tests/test_keeps.py): |q| to round-off (products of unit quaternions, nothing renormalised),
and p_psi to the bit on a Lagrange top (m3's residual, m1 m2 (1/I1 - 1/I2) plus a torque
with no third component, is exactly zero there, and so are the third row's off-diagonal
entries of the iteration matrix, so md3 and A3 stay 0 and m3 never changes). Not the energy,
not p_phi.
"""

from __future__ import annotations

import numpy as np

from topdrift.integrators.base import ST_OK, MethodRefused, grid_steps
from topdrift.integrators.galpha.kernel import N_AUX, coefficients, galpha_steps, initial_aux
from topdrift.integrators.scheme_stepper import SchemeMethod, SchemeStepper
from topdrift.integrators.validation import STEP, Setting
from topdrift.models.forms import FORM_BODY

FAMILY = "generalized-alpha"
SOURCE = (
    "Bruls, Cardona and Arnold, Mech. Mach. Theory 48 (2012) 121; coefficients of Chung and "
    "Hulbert, J. Appl. Mech. 60 (1993) 371"
)


class GenAlphaStepper(SchemeStepper):
    """SchemeStepper with the scheme's own two vectors (m' and A) beside the state."""

    def __init__(self, method, form, params, t0, y0, settings):
        super().__init__(method, form, params, t0, y0, settings, galpha_steps)
        self.coef = np.array(coefficients(settings["rho_inf"]), dtype=np.float64)
        self.aux = np.zeros(N_AUX, dtype=np.float64)
        initial_aux(self.y, self.params, self.aux)

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
        status, done = galpha_steps(
            self.coef, self.y, self.aux, self.params, self.h, int(k), self.counters
        )
        self.steps_done += int(done)
        if status != ST_OK:
            self.status = int(status)
            self.t_fail = self.t0 + self.steps_done * self.h
            self.t = self.t_fail
            return self.status
        self.t = t_end
        return ST_OK

    def _fields(self) -> dict:
        return {**super()._fields(), "aux": (np.float64, (N_AUX,))}

    def snapshot(self) -> dict:
        snap = super().snapshot()
        snap["aux"] = self.aux.copy()
        return snap

    def restore(self, snap: dict) -> None:
        super().restore(snap)
        self.aux = np.array(snap["aux"], dtype=np.float64)


class GenAlphaMethod(SchemeMethod):
    """Lie-group generalized-alpha with a default rho_inf."""

    # its kernel writes omega = I^-1 m: a gyrostat's rotor is refused, not ignored
    carries_rotors = False
    carries_fields = False  # its kernel writes M g Gamma x chi (uniform gravity) itself

    family = FAMILY

    def __init__(self, name, rho_default, description):
        super().__init__(name, 0, 2, ("norm",), description, SOURCE, keeps=("p_psi",))
        self.rho_default = rho_default

    @property
    def settings_spec(self):
        rho = Setting(
            "rho_inf",
            required=False,
            default=self.rho_default,
            positive=False,
            minimum=0.0,
            why="the spectral radius at infinity is in [0, 1]",
        )
        return (STEP, rho)

    def settings(self, settings) -> dict:
        checked = super().settings(settings)
        if checked["rho_inf"] > 1.0:
            raise MethodRefused(
                f"{self.name}: setting 'rho_inf' = {checked['rho_inf']!r} is above 1: the "
                f"spectral radius at infinity is in [0, 1] (1: no numerical damping)"
            )
        return checked

    def start(self, form, params, t0, y0, settings):
        if int(form) != FORM_BODY:
            raise MethodRefused(f"{self.name}: runs in the body form only (form code {form!r})")
        checked = self.settings(settings)
        y = self.start_state(FORM_BODY, y0)
        p = np.ascontiguousarray(params, dtype=np.float64)
        return GenAlphaStepper(self, FORM_BODY, p, float(t0), y, checked)


METHODS = [
    GenAlphaMethod(
        "lie-galpha",
        0.9,
        "Lie-group generalized-alpha, rho_inf = 0.9 unless set (setting rho_inf in [0, 1]); "
        "implicit, Newton to rounding level; order 2, damps fast modes",
    ),
    GenAlphaMethod(
        "lie-galpha-undamped",
        1.0,
        "Lie-group generalized-alpha at rho_inf = 1 (no numerical damping) unless set; "
        "implicit, Newton to rounding level; order 2, energy bounded",
    ),
]
