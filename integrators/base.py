"""The contract every integrator meets.

A `Method` is metadata plus a way to start a `Stepper`. A `Stepper` is a run in progress: it owns
the current state, the controller's state (adaptive methods) and the counters the kernels keep,
and it advances to a requested time. Asking for an output time never changes the step sequence:
fixed-step methods need the output times to fall on the step grid (the runner arranges that),
adaptive methods reach them by dense output while the controller goes its own way.

Everything a stepper holds is a value: `snapshot()` returns plain numbers and arrays and
`restore()` takes them back, so a resumed run repeats the same bits. A snapshot may come back from
a file someone else wrote, so `restore()` trusts nothing in it: `check_snapshot()` refuses one
whose names, kinds, dtypes or shapes are not those this stepper writes, or whose numbers are not
finite, before anything is taken back.
"""

from __future__ import annotations

import hashlib
from abc import ABC, abstractmethod
from dataclasses import dataclass, field
from typing import ClassVar

import numpy as np

from topdrift.models import FORM_NAMES, FORM_SIZE, RigidBody
from topdrift.models.dynamics import singular

# Counters, kept by the kernels themselves in one int64 array.
C_STEPS = 0  # accepted steps
C_REJECTED = 1  # rejected steps (adaptive methods)
C_EVALS = 2  # right-hand-side evaluations, or sub-flow evaluations for splittings
N_COUNTERS = 3

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


class MethodRefused(ValueError):
    """The method cannot run this case, form or setting; the message says why."""


def name_key(name: str) -> int:
    """A method's name as one int64 (the first 8 bytes of its SHA-256), for snapshots, which hold
    numbers only: restore() compares it to refuse a snapshot of another method."""
    return int.from_bytes(hashlib.sha256(name.encode()).digest()[:8], "little", signed=True)


def _kind(value) -> str:
    """'float', 'int', 'float64[...]', 'int64[...]', or '' for anything a snapshot may not hold."""
    if isinstance(value, np.ndarray):
        if value.dtype == np.float64 or value.dtype == np.int64:
            return f"{value.dtype}{list(value.shape)}"
        return ""
    if isinstance(value, (bool, np.bool_)):
        return ""
    if isinstance(value, (float, np.floating)):
        return "float" if np.dtype(type(value)) == np.float64 else ""
    if isinstance(value, (int, np.integer)):
        if isinstance(value, np.integer) and np.dtype(type(value)) != np.int64:
            return ""
        return "int" if -(2**63) <= int(value) < 2**63 else ""
    return ""


def snapshot_kinds(snap: dict) -> dict[str, str]:
    """Each entry's kind (see _kind); raises TypeError naming an entry a snapshot may not hold (a
    string, a bool, an object, an array of another dtype): snapshots are numbers only."""
    out = {}
    for key, value in snap.items():
        kind = _kind(value)
        if not isinstance(key, str) or not kind:
            raise TypeError(
                f"snapshot entry {key!r} is a {type(value).__name__}"
                f"{' of ' + str(value.dtype) if isinstance(value, np.ndarray) else ''}; a "
                "snapshot holds float64 and int64 numbers and arrays only"
            )
        out[key] = kind
    return out


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

    def __post_init__(self) -> None:
        if self.control not in ("step", "tolerance"):
            raise ValueError(f"{self.name}: control must be 'step' or 'tolerance'")
        for f in self.forms:
            if f not in FORM_NAMES:
                raise ValueError(f"{self.name}: unknown form {f!r}")
        for k in self.keeps:
            if k not in KEEPS:
                raise ValueError(f"{self.name}: unknown invariant {k!r} in keeps")

    def as_json(self) -> dict:
        return {
            "name": self.name,
            "family": self.family,
            "order": self.order,
            "symplectic": self.symplectic,
            "forms": list(self.forms),
            "control": self.control,
            "keeps": list(self.keeps),
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
        """Everything needed to continue bit for bit: names to float64 and int64 numbers and
        arrays, of the same kinds and shapes fresh as after any number of steps."""

    @abstractmethod
    def restore(self, snap: dict) -> None:
        """Take back a snapshot made by the same method and settings (after check_snapshot)."""

    # Snapshot entries that may hold NaN or inf (t_fail is NaN while a run is ok).
    nonfinite_fields: ClassVar[tuple[str, ...]] = ("t_fail",)

    def check_snapshot(self, snap: dict) -> None:
        """Refuse (MethodRefused, naming the entry) a snapshot that this stepper could not have
        written: other names, kinds, dtypes or shapes than its own snapshot() has, or a float
        that is not finite outside nonfinite_fields. Values are checked against nothing else:
        restore() checks that the settings are this stepper's."""
        if not isinstance(snap, dict):
            raise MethodRefused(f"snapshot is a {type(snap).__name__}, not a dict of entries")
        own = snapshot_kinds(self.snapshot())
        missing = [k for k in own if k not in snap]
        if missing:
            raise MethodRefused(f"snapshot lacks the entry {missing[0]!r}")
        extra = [k for k in snap if k not in own]
        if extra:
            raise MethodRefused(f"snapshot holds {extra[0]!r}, which this method does not write")
        for key, want in own.items():
            value = snap[key]
            got = _kind(value)
            if got != want:
                shown = got or type(value).__name__
                if isinstance(value, np.ndarray) and not got:
                    shown = f"{value.dtype}{list(value.shape)}"
                raise MethodRefused(f"snapshot entry {key!r} is {shown}, expected {want}")
            if key in self.nonfinite_fields:
                continue
            if (got == "float" or got.startswith("float64")) and not np.all(np.isfinite(value)):
                raise MethodRefused(f"snapshot entry {key!r} is not finite")
        if own.get("status") == "int" and not 0 <= snap["status"] < len(STATUS_NAMES):
            raise MethodRefused(f"snapshot entry 'status' is {snap['status']}, not a status code")


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

    def resume_refusal(self) -> str:
        """Why a snapshot of this method cannot be taken back in this installation ("" when it
        can): the runner then runs an interrupted run again from its start, saying so."""
        return ""

    @abstractmethod
    def start(
        self, form: int, params: np.ndarray, t0: float, y0: np.ndarray, settings: dict
    ) -> Stepper:
        """A stepper at (t0, y0). settings: {"step": h} or {"rtol": r, "atol": a}, plus any
        method-specific keys the method documents."""
