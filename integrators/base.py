"""The contract every integrator meets: `MethodInfo` (what a method is), `Method` (how to start
one), `Stepper` (a run in progress), the counters and status codes they share, and the one rule
for the step grid of fixed-step methods (`GRID_RTOL`, `whole_steps`, `grid_steps`).

A `Stepper` owns the current state, the controller's state (adaptive methods) and the counters
the kernels keep, and it advances to a requested time. Asking for an output time never changes
the step sequence: fixed-step methods need the output times to fall on the step grid (the runner
arranges that), adaptive methods reach them by dense output while the controller goes its own
way. Everything a stepper holds is a value: `snapshot()` returns plain numbers, strings and
arrays and `restore()` takes them back, so a resumed run repeats the same bits.

Settings and snapshots are checked by integrators/validation.py, the same way for every family.
A plug-in with a fixed step can leave the grid, the counters and the snapshots to
integrators/fixed_step.py and write one step.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from dataclasses import dataclass, field

import numpy as np

# MethodRefused is defined beside the checks that raise it and is part of this contract.
from topdrift.integrators.validation import (
    CONTROL_SETTINGS,
    MethodRefused,
    Setting,
    check_settings,
)
from topdrift.models import FORM_NAMES, FORM_SIZE, RigidBody
from topdrift.models.dynamics import singular
from topdrift.models.forms import FORM_EULER
from topdrift.models.turns import N_TURNS, TURN

# Counters, kept by the kernels themselves in one int64 array.
C_STEPS = 0  # accepted steps
C_REJECTED = 1  # rejected steps (adaptive methods)
C_EVALS = 2  # right-hand-side evaluations, or sub-flow evaluations for splittings
# Force (torque) evaluations: what molecular-dynamics and force-field codes count as cost. Every
# right-hand-side evaluation of a Runge-Kutta or Gauss-Legendre method evaluates the torque; of
# a splitting's sub-flows only the kicks do, not the free flows (C_EVALS - C_FORCE_EVALS).
C_FORCE_EVALS = 3
N_COUNTERS = 4

# Status codes returned by kernels and steppers.
ST_OK = 0
ST_DIVERGED = 1  # a non-finite state
ST_SINGULAR = 2  # the state left the domain of its form (Euler angles at the pole)
ST_STEP_UNDERFLOW = 3  # an adaptive step fell below round-off of t
ST_NO_CONVERGENCE = 4  # an implicit solve did not converge
ST_FAILED = 5  # any other failure: a library's (scipy references), a plug-in step's exception
STATUS_NAMES = ("ok", "diverged", "singular", "step-underflow", "no-convergence", "failed")

FAMILIES = (
    "explicit-rk",
    "adaptive-rk",
    "splitting",
    "gauss-legendre",
    "first-order-engine",
    "taylor",
    "lie-group-rk",
    "constrained",
    "generalized-alpha",
    "extrapolation",
    "reference",
    "external",
)
KEEPS = ("energy", "p_phi", "p_psi", "norm")

# What a method keeps, one rule for every family. A claim holds on every body for which the
# quantity is an invariant (p_psi: I1 = I2 with the centre of mass on axis 3; the others always),
# after any number of steps, at any step:
# - "to the bit" (`keeps`, `to_the_bit`): the computed value never changes, not by one ulp;
# - "to round-off" (`keeps_roundoff`, `to_roundoff`): the method keeps it in exact arithmetic,
#   and only rounding moves it, by a few units in the last place per step at most (the tests
#   bound the change by 4 eps per step, relative to |E0|, |L0| or 1).
# `keeps` and `keeps_roundoff` hold in every form a method runs in; `keeps_by_form` says it per
# form, where a method may keep more (Gauss-Legendre keeps the energy in the body form only).
# In the Euler form the norm of the quaternion is 1 by construction (there is no quaternion in
# the state), so every method keeps it there to the bit.


# The step grid. A fixed-step stepper asked for t_end takes k steps of h when (t_end - t) / h is
# within GRID_RTOL * max(1, |k|) of the whole number k. Output times computed as t0 + k dt round
# at about 1e-16 relative, and a long run's interval ratio at about 1e-16 times the number of
# intervals: 1e-9 leaves room for that and still refuses a grid that is off by any meaningful
# fraction of a step. One rule for every fixed-step family, the ensembles and the runner.
GRID_RTOL = 1e-9


def whole_steps(span: float, step: float) -> int | None:
    """The signed number of steps of `step` that make `span`, or None when span / step is not a
    whole number to GRID_RTOL * max(1, |k|) (or not finite)."""
    x = span / step
    if not math.isfinite(x):
        return None
    k = round(x)
    if abs(x - k) <= GRID_RTOL * max(1.0, abs(k)):
        return int(k)
    return None


def grid_steps(name: str, t: float, t_end: float, step: float) -> int:
    """whole_steps(t_end - t, step), or MethodRefused naming `name` when t_end is off the grid.
    The sign says the direction; a family that runs forward only refuses k < 0 itself."""
    span = float(t_end) - float(t)
    k = whole_steps(span, step)
    if k is None:
        raise MethodRefused(
            f"{name}: t = {t_end!r} is not on the step grid: the interval from t = {t!r} is "
            f"{span / step:.12g} steps of {step!r}, not a whole number of steps"
        )
    return k


@dataclass(frozen=True)
class MethodInfo:
    """What a method is, as `topdrift methods` lists it and the suite relies on it.

    Fields (all required but `source`):
      name         the short name commands take (`--method NAME`); unique in the registry.
      family       one of FAMILIES; plug-ins use "external" unless they join a family.
      order        the classical order of convergence, as the tests measure it.
      symplectic   True when the map is symplectic (or Poisson) in every form it runs in.
      forms        the state forms it integrates, among FORM_NAMES ("euler", "body"), in order
                   of preference: `default_form` takes the first that fits the body.
      control      "step" (fixed step, setting "step") or "tolerance" (settings "rtol",
                   "atol"); the runner builds the settings from it.
      keeps        invariants kept to round-off by construction in every form, among KEEPS;
                   every claim must hold, the tests check the built-in ones.
      compensated  True when the state increments are added with compensated summation.
      description  one line for `topdrift methods`.
      source       where the coefficients or the method come from (a paper, a library).
    Refuses (ValueError) an unknown control, form or invariant when it is made."""

    name: str
    family: str
    order: int
    symplectic: bool
    forms: tuple[str, ...]
    control: str  # "step" or "tolerance"
    keeps: tuple[str, ...]
    compensated: bool
    description: str
    source: str = ""  # where the coefficients come from
    keeps_roundoff: tuple[str, ...] = ()  # kept to a few ulps per step in every form (see KEEPS)
    # form -> (to the bit, to round-off); None: `keeps` and `keeps_roundoff` in every form
    keeps_by_form: dict | None = None

    def __post_init__(self) -> None:
        if self.control not in ("step", "tolerance"):
            raise ValueError(f"{self.name}: control must be 'step' or 'tolerance'")
        for f in self.forms:
            if f not in FORM_NAMES:
                raise ValueError(f"{self.name}: unknown form {f!r}")
        for field_name in ("keeps", "keeps_roundoff"):
            for k in getattr(self, field_name):
                if k not in KEEPS:
                    raise ValueError(f"{self.name}: unknown invariant {k!r} in {field_name}")
        if set(self.keeps) & set(self.keeps_roundoff):
            raise ValueError(f"{self.name}: an invariant is in both keeps and keeps_roundoff")
        given = self.keeps_by_form
        if given is None:
            given = {f: (self.keeps, self.keeps_roundoff) for f in self.forms}
        by_form = {}
        for f in self.forms:
            if f not in given:
                raise ValueError(f"{self.name}: keeps_by_form has no entry for form {f!r}")
            bits, rounded = (tuple(x) for x in given[f])
            for k in bits + rounded:
                if k not in KEEPS:
                    raise ValueError(f"{self.name}: unknown invariant {k!r} in keeps_by_form")
            # What every form keeps must be what `keeps` and `keeps_roundoff` say, no more and
            # no less: the contract is one set of claims seen two ways.
            by_form[f] = (bits, rounded)
        every_bit = set.intersection(*(set(b) for b, _ in by_form.values())) if by_form else set()
        every_kept = (
            set.intersection(*(set(b) | set(r) for b, r in by_form.values())) if by_form else set()
        )
        if set(self.keeps) != every_bit or set(self.keeps_roundoff) != every_kept - every_bit:
            raise ValueError(
                f"{self.name}: keeps {self.keeps} and keeps_roundoff {self.keeps_roundoff} must be "
                f"what every form keeps to the bit, and to round-off beyond that, in keeps_by_form"
            )
        object.__setattr__(self, "keeps_by_form", by_form)

    def kept_in(self, form: str) -> tuple[str, ...]:
        """What the method keeps by construction in this form, to the bit or to round-off."""
        bits, rounded = self.keeps_by_form.get(form, ((), ()))
        return bits + rounded

    def as_json(self) -> dict:
        """The entry of `topdrift methods --json` (every field but `source`)."""
        return {
            "name": self.name,
            "family": self.family,
            "order": self.order,
            "symplectic": self.symplectic,
            "forms": list(self.forms),
            "control": self.control,
            "keeps": list(self.keeps),
            "keeps_roundoff": list(self.keeps_roundoff),
            "keeps_by_form": {
                f: {"to_the_bit": list(b), "to_roundoff": list(r)}
                for f, (b, r) in self.keeps_by_form.items()
            },
            "compensated": self.compensated,
            "description": self.description,
        }


@dataclass
class Stepper(ABC):
    """A run in progress: the state `y` at time `t` in form `form` (a FORM_* code), the body's
    parameter array `params`, the counters (int64, indexed by C_STEPS, C_REJECTED, C_EVALS and
    C_FORCE_EVALS,
    counted by the method's own code, never estimated), and `status`: ST_OK while it runs, else
    the ST_* code of the failure, with `t_fail` the time of the last good state (NaN while ok).

    Subclasses fill in `advance_to`, `snapshot` and `restore`; a fixed-step method can inherit
    all three from integrators/fixed_step.FixedStepStepper instead."""

    form: int
    params: np.ndarray
    t: float
    y: np.ndarray
    counters: np.ndarray = field(default_factory=lambda: np.zeros(N_COUNTERS, dtype=np.int64))
    status: int = ST_OK
    # Time at which a failure was detected (the last good step's end), NaN while ok.
    t_fail: float = float("nan")
    # Whole turns of fl(2 pi) taken off phi and psi (models/turns.py), int64: a family whose
    # kernels fold the Euler form's cyclic angles counts them here, and the angles are
    # y[phi] + TURN turns[0], y[psi] + TURN turns[1]. A family that does not fold leaves them 0
    # (its angles grow unfolded); an empty array asks a folding family not to fold.
    turns: np.ndarray = field(default_factory=lambda: np.zeros(N_TURNS, dtype=np.int64))

    def unfolded_y(self) -> np.ndarray:
        """A copy of y with the counted turns put back into phi and psi (rounded once): the
        state as an unfolding run would hold it, for comparing with such a state."""
        y = np.array(self.y, dtype=np.float64)
        if self.form == FORM_EULER and self.turns.shape[0] == N_TURNS:
            y[0] += TURN * float(self.turns[0])
            y[2] += TURN * float(self.turns[1])
        return y

    def keep_angles_unfolded(self) -> None:
        """The unfolded variant: phi and psi grow without bound in the state and round to
        ulp(psi) per step, as before folding existed. Call before the first advance_to; for
        measuring what folding buys (benchmarks/timing/folded_angles.py), never the default."""
        if np.any(self.turns != 0):
            raise MethodRefused("the angles are folded already; start a new stepper")
        self.turns = np.zeros(0, dtype=np.int64)

    @abstractmethod
    def advance_to(self, t_end: float) -> int:
        """Advance to t_end; afterwards self.t == t_end and self.y is the state there, or
        self.status is not ST_OK, self.t == self.t_fail and self.y is the last good state.
        Returns self.status; once failed, stays failed and does nothing. Refuses
        (MethodRefused) a time it cannot reach: off the step grid, or in a direction the method
        does not go. The step sequence never depends on the times asked for, except in a
        method whose description says that its steps end on the output times (gbs: no dense
        output)."""

    @abstractmethod
    def snapshot(self) -> dict:
        """Everything needed to continue bit for bit, as names to floats, ints, strings or
        numeric arrays (no objects: a checkpoint stores it in HDF5), including the identity
        from validation.snapshot_identity (method, form, settings)."""

    @abstractmethod
    def restore(self, snap: dict) -> None:
        """Take back a snapshot made by the same method, form and settings, after which the
        stepper continues to the same bits as the one that made it. Refuses (SnapshotRefused,
        a MethodRefused) any other snapshot, with validation.check_snapshot, before changing
        anything."""


class Method(ABC):
    """A method: its `info` (a MethodInfo, set by the subclass) and `start`, which makes a
    Stepper. Register an instance with registry.register or publish it under the entry-point
    group ENTRY_POINT_GROUP. A method holds no run state: one instance starts any number of
    steppers. Its settings are declared in `settings_spec` and checked by `settings`."""

    # Whether the method's kernels carry a gyrostat's rotor momentum h (omega = I^-1 (m - h)).
    # A plug-in that does not say so is trusted to use models.dynamics, which carries it.
    carries_rotors: bool = True
    # Whether its kernels evaluate the field through models (dynamics.rhs, flows, fields): a
    # kernel that writes the uniform-gravity torque M g Gamma x chi itself cannot run another.
    carries_fields: bool = True
    # Whether its step applies the field's torque as the kick m += h tau(q) with q held, the
    # exact flow of a potential of the attitude: a splitting. It then cannot run a field whose
    # torque is no gradient (a plug-in's damping or control law, models/field_plugins.py), whose
    # kick would be no exact flow of anything; the others integrate such a torque as it is.
    kicks_potential: bool = False

    info: MethodInfo

    @property
    def name(self) -> str:
        """info.name."""
        return self.info.name

    @property
    def settings_spec(self) -> tuple[Setting, ...]:
        """The settings `start` takes (validation.Setting). Default: what info.control implies,
        {"step"} or {"rtol", "atol"}, each a positive finite float; override to add keys."""
        return CONTROL_SETTINGS[self.info.control]

    def settings(self, settings) -> dict:
        """settings checked against settings_spec and completed with defaults; refuses
        (MethodRefused, one line naming the key) anything else."""
        return check_settings(self.name, settings, self.settings_spec)

    def default_form(self, body: RigidBody) -> str:
        """The first of the method's forms that can describe this body."""
        for f in self.info.forms:
            if f == "body" or body.lagrange_top:
                return f
        if not body.uniform_gravity:
            raise MethodRefused(
                f"{self.name}: works only in the Euler-angle form, which needs uniform gravity "
                f"(phi cyclic); this case is in the {body.field.kind} field"
            )
        raise MethodRefused(
            f"{self.name}: works only in the Euler-angle form, which needs a symmetric body "
            f"(I1 = I2) with its centre of mass and any rotor on axis 3; this body is not one"
        )

    def check(self, body: RigidBody, form: str, settings: dict) -> None:
        """Refuse up front, with the reason, what this method cannot run: a form it lacks, the
        Euler form for a body it cannot describe, settings that `settings` refuses."""
        if form not in self.info.forms:
            raise MethodRefused(
                f"{self.name}: has no {form!r} form (it runs in {', '.join(self.info.forms)})"
            )
        if form == "euler" and not body.uniform_gravity:
            raise MethodRefused(
                f"{self.name}: the Euler-angle form needs uniform gravity (phi cyclic); this case "
                f"is in the {body.field.kind} field, whose frame turns about e_y: use the body form"
            )
        if form == "euler" and not body.lagrange_top:
            raise MethodRefused(
                f"{self.name}: the Euler-angle form needs a symmetric body (I1 = I2) with its "
                f"centre of mass and any rotor on axis 3; use the body form"
            )
        if body.has_rotor and not self.carries_rotors:
            raise MethodRefused(
                f"{self.name}: its kernel has no rotor term (omega = I^-1 m, not I^-1 (m - h)); "
                f"this case carries a rotor"
            )
        if not body.uniform_gravity and not self.carries_fields:
            raise MethodRefused(
                f"{self.name}: its kernel writes the uniform-gravity torque itself; this case is "
                f"in the {body.field.kind} field"
            )
        if self.kicks_potential and not body.field.conservative:
            raise MethodRefused(
                f"{self.name}: a splitting kicks m += h tau(q), the exact flow of a potential; "
                f"the {body.field.kind} field's torque is no gradient (it depends on more than "
                f"the attitude): use a Runge-Kutta, Gauss, extrapolation or Lie-group method"
            )
        self.settings(settings)

    def start_state(self, form: int, y0) -> np.ndarray:
        """y0 as a fresh float64 state of the given form, refused (MethodRefused) when it has the
        wrong length, is not finite, or is singular in that form."""
        y = np.array(y0, dtype=np.float64).reshape(-1)
        if y.shape[0] != FORM_SIZE[form]:
            raise MethodRefused(
                f"{self.name}: a {FORM_NAMES[form]} state has {FORM_SIZE[form]} components, "
                f"got {y.shape[0]}"
            )
        if not np.all(np.isfinite(y)):
            raise MethodRefused(f"{self.name}: the start state is not finite")
        if singular(form, y):
            raise MethodRefused(
                f"{self.name}: the start state is singular in the {FORM_NAMES[form]} form"
            )
        return y

    def resume_refusal(self) -> str:
        """Why a snapshot of this method cannot be taken back in this installation ("" when it
        can): `run --resume` then runs an interrupted run again from its start, saying so. For a
        state that cannot be handed back safely (a library's compiled internals that index its
        own arrays) or completely (a library that holds state the method does not store)."""
        return ""

    @abstractmethod
    def start(
        self, form: int, params: np.ndarray, t0: float, y0: np.ndarray, settings: dict
    ) -> Stepper:
        """A stepper at (t0, y0): form is a FORM_* code, params the body's parameter array
        (RigidBody.params()), settings as settings_spec declares ({"step": h} or
        {"rtol": r, "atol": a}, plus any keys the method documents). Refuses (MethodRefused)
        what it cannot run; never changes params or y0."""
