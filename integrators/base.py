"""The contract every integrator meets.

A `Method` is metadata plus a way to start a `Stepper`. A `Stepper` is a run in progress: it owns
the current state, the controller's state (adaptive methods) and the counters the kernels keep,
and it advances to a requested time. Asking for an output time never changes the step sequence:
fixed-step methods need the output times to fall on the step grid (the runner arranges that),
adaptive methods reach them by dense output while the controller goes its own way.

Everything a stepper holds is a value: `snapshot()` returns plain numbers and arrays and
`restore()` takes them back, so a resumed run repeats the same bits.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass, field

import numpy as np

from topdrift.models import FORM_NAMES, FORM_SIZE, RigidBody
from topdrift.models.dynamics import singular

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
ST_FAILED = 5  # any other failure reported by a library (scipy references)
STATUS_NAMES = ("ok", "diverged", "singular", "step-underflow", "no-convergence", "failed")

FAMILIES = ("explicit-rk", "adaptive-rk", "splitting", "gauss-legendre", "reference", "external")
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


class MethodRefused(ValueError):
    """The method cannot run this case, form or setting; the message says why."""


@dataclass(frozen=True)
class MethodInfo:
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
    """A run in progress. Subclasses fill in `advance_to`, `snapshot` and `restore`."""

    form: int
    params: np.ndarray
    t: float
    y: np.ndarray
    counters: np.ndarray = field(default_factory=lambda: np.zeros(N_COUNTERS, dtype=np.int64))
    status: int = ST_OK
    # Time at which a failure was detected (the last good step's end), NaN while ok.
    t_fail: float = float("nan")

    @abstractmethod
    def advance_to(self, t_end: float) -> int:
        """Advance to t_end; afterwards self.t == t_end and self.y is the state there, or
        self.status is not ST_OK and self.t_fail says when. Returns self.status."""

    @abstractmethod
    def snapshot(self) -> dict:
        """Everything needed to continue bit for bit: names to floats, ints or arrays."""

    @abstractmethod
    def restore(self, snap: dict) -> None:
        """Take back a snapshot made by the same method and settings."""


class Method(ABC):
    info: MethodInfo

    @property
    def name(self) -> str:
        return self.info.name

    def default_form(self, body: RigidBody) -> str:
        """The first of the method's forms that can describe this body."""
        for f in self.info.forms:
            if f == "body" or body.lagrange_top:
                return f
        raise MethodRefused(
            f"{self.name}: works only in the Euler-angle form, which needs a symmetric body "
            f"(I1 = I2) with its centre of mass on axis 3; this body is not one"
        )

    def check(self, body: RigidBody, form: str, settings: dict) -> None:
        """Refuse up front, with the reason, what this method cannot run."""
        if form not in self.info.forms:
            raise MethodRefused(
                f"{self.name}: has no {form!r} form (it runs in {', '.join(self.info.forms)})"
            )
        if form == "euler" and not body.lagrange_top:
            raise MethodRefused(
                f"{self.name}: the Euler-angle form needs a symmetric body (I1 = I2) with its "
                f"centre of mass on axis 3; use the body form"
            )
        if self.info.control == "step":
            h = settings.get("step")
            if not isinstance(h, float) or not h > 0.0 or h == float("inf"):
                raise MethodRefused(f"{self.name}: needs a positive finite step, got {h!r}")
        else:
            for key in ("rtol", "atol"):
                v = settings.get(key)
                if not isinstance(v, float) or not v > 0.0 or v == float("inf"):
                    raise MethodRefused(f"{self.name}: needs a positive finite {key}, got {v!r}")

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

    @abstractmethod
    def start(
        self, form: int, params: np.ndarray, t0: float, y0: np.ndarray, settings: dict
    ) -> Stepper:
        """A stepper at (t0, y0). settings: {"step": h} or {"rtol": r, "atol": a}, plus any
        method-specific keys the method documents."""
