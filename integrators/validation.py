"""The checks every method family shares: settings and snapshots.

Settings. A method declares its settings as a tuple of `Setting`s (key, kind, range, default);
`check_settings` refuses a missing, unknown, mistyped, non-finite or out-of-range value with one
line naming the method, the key and the value, and returns the settings completed with their
defaults. One typing rule for all: a real setting (a step, a tolerance) is a float (Python float
or a numpy floating scalar); an int or a bool is refused, because `{"step": 1}` is as often a
slip for a count as a step of one second, and a count setting (iterations) is an int, never a
float or a bool.

Snapshots. A snapshot names the method, the state form and the settings that made it
(`snapshot_identity`), beside plain numbers, strings and arrays; `check_snapshot` refuses one
made by another method, form or settings, or one whose fields are missing, unknown, of another
dtype or shape, or not finite, before the stepper takes anything from it, so a refused restore
leaves the stepper as it was.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

EPS = float(np.finfo(float).eps)


class MethodRefused(ValueError):
    """A method cannot run this case, form, setting or snapshot; the message (one line) says
    which method refuses and why. Raised before anything is changed, so nothing is lost."""


class SnapshotRefused(MethodRefused):
    """A snapshot that this stepper cannot take back: made by another method, form or settings,
    or damaged (a field missing, unknown, of another dtype or shape, or not finite)."""


# --- settings -------------------------------------------------------------------------------

REAL = "real"
COUNT = "count"


@dataclass(frozen=True)
class Setting:
    """One setting a method takes.

    kind: REAL (a finite float) or COUNT (an int). positive: a REAL must be > 0. minimum: the
    smallest value allowed (inclusive); floor names it in words ("100 machine epsilons") and
    `why` says in a few words why. required: refused when missing; otherwise `default` is filled
    in (None: the method decides later)."""

    key: str
    kind: str = REAL
    required: bool = True
    default: object = None
    positive: bool = True
    minimum: float | None = None
    floor: str = ""
    why: str = ""

    def __post_init__(self) -> None:
        if self.kind not in (REAL, COUNT):
            raise ValueError(f"setting {self.key!r}: kind must be {REAL!r} or {COUNT!r}")


# The settings of the contract's two controls (MethodInfo.control).
STEP = Setting("step")
RTOL = Setting("rtol")
ATOL = Setting("atol")
CONTROL_SETTINGS = {"step": (STEP,), "tolerance": (RTOL, ATOL)}


def _real(name: str, s: Setting, v) -> float:
    if isinstance(v, (bool, np.bool_)) or not isinstance(v, (float, np.floating)):
        whole = isinstance(v, (int, np.integer)) and not isinstance(v, (bool, np.bool_))
        hint = f" (write {v}.0 for a float)" if whole else ""
        raise MethodRefused(
            f"{name}: setting {s.key!r} must be a float, got {type(v).__name__} {v!r}{hint}"
        )
    v = float(v)
    if not math.isfinite(v):
        raise MethodRefused(f"{name}: setting {s.key!r} must be finite, got {v!r}")
    if s.positive and not v > 0.0:
        raise MethodRefused(f"{name}: setting {s.key!r} must be positive, got {v!r}")
    if s.minimum is not None and v < s.minimum:
        floor = f"{s.floor} ({s.minimum:.3g})" if s.floor else f"{s.minimum:.3g}"
        raise MethodRefused(
            f"{name}: setting {s.key!r} = {v!r} is below {floor}" + (f", {s.why}" if s.why else "")
        )
    return v


def _count(name: str, s: Setting, v) -> int:
    if isinstance(v, (bool, np.bool_)) or not isinstance(v, (int, np.integer)):
        raise MethodRefused(
            f"{name}: setting {s.key!r} must be an integer, got {type(v).__name__} {v!r}"
        )
    v = int(v)
    if s.minimum is not None and v < s.minimum:
        raise MethodRefused(
            f"{name}: setting {s.key!r} must be at least {int(s.minimum)}, got {v}"
            + (f": {s.why}" if s.why else "")
        )
    return v


def check_settings(name: str, settings, spec: tuple[Setting, ...]) -> dict:
    """The settings checked against spec and completed with the defaults, as a new dict of
    plain floats and ints (None for an optional setting left out). Refuses (MethodRefused, one
    line naming `name`) anything but a mapping with string keys, an unknown key, a missing
    required key, and a value of the wrong type, sign or range."""
    if not isinstance(settings, Mapping):
        raise MethodRefused(f"{name}: settings must be a mapping, got {type(settings).__name__}")
    known = {s.key: s for s in spec}
    for key in settings:
        if key not in known:
            listed = ", ".join(known) or "none"
            raise MethodRefused(f"{name}: unknown setting {key!r} (known: {listed})")
    out: dict = {}
    for s in spec:
        v = settings.get(s.key)
        if v is None:
            if s.required:
                raise MethodRefused(f"{name}: needs the setting {s.key!r}")
            out[s.key] = s.default
        else:
            out[s.key] = _real(name, s, v) if s.kind == REAL else _count(name, s, v)
    return out


def settings_text(settings: Mapping) -> str:
    """Checked settings as one canonical string (JSON, keys sorted; floats by repr, so they come
    back bit for bit): what a snapshot stores to say which settings made it."""
    return json.dumps(dict(settings), sort_keys=True)


# --- snapshots ------------------------------------------------------------------------------

# Finiteness rules of a snapshot field.
FINITE = "finite"  # every value finite, always
FINITE_WHILE_OK = "finite-while-ok"  # finite when the stepper's status is ok (scratch of a
#                                      failed attempt may hold the non-finite values it met)
ANY = "any"  # NaN or inf allowed (t_fail is NaN while ok; "not yet" markers)

# How many status codes a stepper has (base.STATUS_NAMES; a test keeps the two equal).
STATUS_CODES = 6

# The identity every snapshot carries, and the fields every Stepper has.
IDENTITY_FIELDS = {"method": (str, ()), "form": (int, ()), "settings": (str, ())}


def stepper_fields(n_counters: int) -> dict:
    """Fields of the contract's Stepper itself: t, status, t_fail and the counters."""
    return {
        "t": (float, ()),
        "status": (int, ()),
        "t_fail": (float, (), ANY),
        "counters": (np.int64, (n_counters,)),
    }


def snapshot_identity(method: str, form: int, settings: Mapping) -> dict:
    """The entries that say who made a snapshot: the method's name, the state form (its code)
    and the checked settings (settings_text). Put them into every snapshot."""
    return {"method": str(method), "form": int(form), "settings": settings_text(settings)}


def _kind_of(dtype) -> str:
    if dtype is str:
        return "str"
    dt = np.dtype(dtype)
    if dt.kind == "f":
        return "float"
    if dt.kind in "iu":
        return "int"
    raise ValueError(f"unsupported snapshot dtype {dtype!r}")


def _scalar_ok(kind: str, v) -> bool:
    if kind == "str":
        return isinstance(v, str)
    if isinstance(v, (bool, np.bool_)):
        return False
    if kind == "int":
        return isinstance(v, (int, np.integer))
    return isinstance(v, (float, np.floating))


def _field(name: str, key: str, v, spec, status_ok: bool) -> None:
    dtype, shape = spec[0], tuple(spec[1])
    finite = spec[2] if len(spec) > 2 else FINITE
    kind = _kind_of(dtype)
    if shape == ():
        if not _scalar_ok(kind, v):
            article = "an" if kind == "int" else "a"
            raise SnapshotRefused(
                f"{name}: snapshot field {key!r} must be {article} {kind}, got {type(v).__name__}"
            )
        values = np.array([v], dtype=np.float64) if kind == "float" else None
    else:
        if not isinstance(v, np.ndarray):
            raise SnapshotRefused(
                f"{name}: snapshot field {key!r} must be an array, got {type(v).__name__}"
            )
        if v.dtype != np.dtype(dtype):
            raise SnapshotRefused(
                f"{name}: snapshot field {key!r} has dtype {v.dtype}, expected {np.dtype(dtype)}"
            )
        if v.shape != shape:
            raise SnapshotRefused(
                f"{name}: snapshot field {key!r} has shape {v.shape}, expected {shape}"
            )
        values = v if kind == "float" else None
    if values is None or finite == ANY or (finite == FINITE_WHILE_OK and not status_ok):
        return
    if not np.all(np.isfinite(values)):
        raise SnapshotRefused(f"{name}: snapshot field {key!r} is not finite")


def _differs(name: str, snap: Mapping, method: str, form: int, settings: Mapping) -> None:
    if snap["method"] != method:
        raise SnapshotRefused(
            f"{name}: snapshot is of method {snap['method']!r}, not of this stepper ({method!r})"
        )
    if int(snap["form"]) != int(form):
        raise SnapshotRefused(
            f"{name}: snapshot is of state form {snap['form']}, not of this stepper's {form}"
        )
    try:
        theirs = json.loads(snap["settings"])
    except ValueError:
        raise SnapshotRefused(f"{name}: snapshot field 'settings' is not readable") from None
    ours = json.loads(settings_text(settings))  # the same canonical round trip as theirs
    if not isinstance(theirs, dict):
        raise SnapshotRefused(f"{name}: snapshot field 'settings' is not a table of settings")
    for key in sorted(set(theirs) | set(ours)):
        if key not in theirs or key not in ours or theirs[key] != ours[key]:
            what = "tolerances" if key in ("rtol", "atol") else "settings"
            raise SnapshotRefused(
                f"{name}: snapshot was made with other {what}: {key} = {theirs.get(key)!r} "
                f"there, {ours.get(key)!r} in this stepper"
            )


def check_snapshot(
    snap, *, method: str, form: int, settings: Mapping, fields: Mapping[str, tuple]
) -> None:
    """Refuse (SnapshotRefused, one line) a snapshot this stepper cannot take back.

    method, form, settings: this stepper's (the checked settings, as given to
    snapshot_identity). fields: every other entry the snapshot must hold, name -> (dtype,
    shape) or (dtype, shape, finiteness): dtype float, int or str for a scalar with shape (),
    a numpy dtype (np.float64, np.int64) for an array of exactly that shape; finiteness FINITE
    (the default for floats), FINITE_WHILE_OK or ANY. A snapshot with an entry not named here
    or in IDENTITY_FIELDS is refused too: it is not one of ours. A field named 'status' (int)
    decides FINITE_WHILE_OK (0 is ok)."""
    if not isinstance(snap, Mapping):
        raise SnapshotRefused(f"{method}: a snapshot is a mapping, got {type(snap).__name__}")
    spec = {**IDENTITY_FIELDS, **fields}
    for key in spec:
        if key not in snap:
            raise SnapshotRefused(f"{method}: snapshot has no field {key!r}")
    for key in snap:
        if key not in spec:
            raise SnapshotRefused(f"{method}: snapshot has a field {key!r} this stepper lacks")
    for key in IDENTITY_FIELDS:
        _field(method, key, snap[key], spec[key], True)
    _differs(method, snap, method, form, settings)
    status = snap.get("status", 0)
    status_ok = _scalar_ok("int", status) and int(status) == 0
    for key, fspec in fields.items():
        _field(method, key, snap[key], fspec, status_ok)
    if "status" in fields and not 0 <= int(snap["status"]) < STATUS_CODES:
        # Steppers hand their status on as a code the runner names (base.STATUS_NAMES).
        raise SnapshotRefused(f"{method}: snapshot field 'status' is {snap['status']}, no status")
