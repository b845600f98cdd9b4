"""Case files: the TOML schema (a contract with users, see docs/case-files.md), read, checked and
turned into a `Case`. Every problem is one UserError line, `<file>: <key>: <what is wrong>`."""

from __future__ import annotations

import dataclasses
import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from topdrift.benchmarks.cases.units import UnitProblem, to_si
from topdrift.benchmarks.errors import UserError
from topdrift.models import (
    FORM_BODY,
    FORM_EULER,
    FORM_NAMES,
    STANDARD_GRAVITY,
    BodyError,
    RigidBody,
    SingularAttitude,
    body_state,
    euler_state,
)
from topdrift.models.field_spec import FIELD_KINDS, Field, FieldError, known_kinds
from topdrift.models.wheel import WheelSpec, demo_wheel

FORMAT_VERSION = 1
MAX_SAMPLES = 10_000_000  # a float64 sample array of this length is already 80 MB per variable
# Every number of a case (SI units) is 0 or of magnitude in [SMALLEST, LARGEST]. The physics
# multiplies up to about three of them (M g l, I w^2, m^2 / I): inside this range such products stay
# far from float64's overflow (1.8e308) and underflow (2.2e-308), so that a kernel never divides by
# an underflowed zero or runs on an overflowed infinity.
SMALLEST = 1e-100
LARGEST = 1e100

TOP_KEYS = ("format_version", "name", "description", "horizon", "samples")
TOP_TABLES = ("body", "wheel", "rotor", "field", "start", "run")
BODY_KEYS = ("mass", "inertia", "com", "gravity")
ROTOR_KEYS = ("momentum",)
FIELD_KEYS = ("kind", "orbit_rate")
START_ANGLES = ("theta", "phi", "psi")
START_RATES = ("theta_rate", "phi_rate", "psi_rate")
RUN_KEYS = ("method", "form", "step", "rtol", "atol")

_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]*$")


@dataclass(frozen=True)
class Start:
    """Euler angles (rad) and their time derivatives (rad/s) at t = 0, z-x-z convention."""

    theta: float
    phi: float
    psi: float
    theta_rate: float
    phi_rate: float
    psi_rate: float

    def as_dict(self) -> dict:
        return {k: getattr(self, k) for k in START_ANGLES + START_RATES}


@dataclass(frozen=True)
class Case:
    """A validated case: what to integrate, from where, for how long, sampled how often."""

    name: str
    description: str
    horizon: float
    samples: int
    body: RigidBody
    start: Start
    wheel: WheelSpec | None
    run: dict = field(default_factory=dict)
    toml_text: str = ""
    path: Path | None = None
    format_version: int = FORMAT_VERSION

    def times(self) -> np.ndarray:
        """The output times: `samples` points from 0 to `horizon`, both included."""
        t = np.linspace(0.0, self.horizon, self.samples)
        t[-1] = self.horizon
        return t

    def body_state(self) -> np.ndarray:
        s = self.start
        return body_state(self.body, s.phi, s.theta, s.psi, s.phi_rate, s.theta_rate, s.psi_rate)

    def euler_state(self) -> np.ndarray:
        if not self.body.lagrange_top:
            raise UserError(
                f"{self.name}: the euler form needs a symmetric body (I1 = I2) with its centre of "
                "mass and any rotor on axis 3; use the body form"
            )
        s = self.start
        try:
            return euler_state(
                self.body, s.phi, s.theta, s.psi, s.phi_rate, s.theta_rate, s.psi_rate
            )
        except SingularAttitude as exc:
            raise UserError(f"{self.name}: start.{exc}") from None

    def state(self, form: int | str) -> np.ndarray:
        """The start state in the given form (FORM_EULER / FORM_BODY or their names)."""
        code = FORM_NAMES.index(form) if isinstance(form, str) and form in FORM_NAMES else form
        if code == FORM_BODY:
            return self.body_state()
        if code == FORM_EULER:
            return self.euler_state()
        raise UserError(f"unknown state form {form!r}; expected one of {', '.join(FORM_NAMES)}")


# ----------------------------------------------------------------------------- reading


def read_case(path: str | Path, label: str | None = None) -> Case:
    """Read and validate a case file. label names the file in messages (default: the path)."""
    path = Path(path)
    label = label or str(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise UserError(f"{label}: no such file") from None
    except IsADirectoryError:
        raise UserError(f"{label}: is a directory, not a case file") from None
    except OSError as exc:
        raise UserError(f"{label}: cannot read: {exc.strerror or exc}") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise UserError(
            f"{label}: not UTF-8 text (byte 0x{raw[exc.start]:02x} at offset {exc.start})"
        ) from None
    return parse_case(text, label, path)


def parse_case(text: str, label: str = "case.toml", path: Path | None = None) -> Case:
    """Validate the text of a case file; see the module docstring for the error format."""
    if text.startswith("\ufeff"):  # a byte-order mark some editors write; harmless
        text = text[1:]
    if not text.strip():
        raise UserError(
            f"{label}: empty file; a case needs name, description, horizon, samples, "
            "[body] or [wheel], and [start]"
        )
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise UserError(f"{label}: not valid TOML: {_one_line(str(exc))}") from None
    return _Reader(label).case(data, text, path)


def _one_line(msg: str) -> str:
    return " ".join(msg.split())


class _Reader:
    def __init__(self, label: str):
        self.label = label

    def fail(self, key: str, what: str):
        raise UserError(f"{self.label}: {key}: {_one_line(what)}")

    # -- generic checks

    def keys(self, table: dict, allowed: tuple, required: tuple, prefix: str) -> None:
        for k in table:
            if k not in allowed:
                where = prefix + k if prefix else k
                self.fail(where, f"unknown key; expected one of {', '.join(allowed)}")
        for k in required:
            if k not in table:
                self.fail(prefix + k, "missing")

    def table(self, data: dict, key: str) -> dict:
        value = data[key]
        if not isinstance(value, dict):
            self.fail(key, f"expected a table [{key}], got {_type(value)}")
        return value

    def number(self, value, key: str) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.fail(key, f"expected a number, got {_type(value)}")
        value = float(value)
        if not math.isfinite(value):
            self.fail(key, f"must be finite, got {value}")
        return self.in_range(value, key)

    def in_range(self, value: float, key: str) -> float:
        if value != 0.0 and not SMALLEST <= abs(value) <= LARGEST:
            self.fail(
                key,
                f"{value:g} is outside the range topdrift computes with (0, or magnitudes from "
                f"{SMALLEST:g} to {LARGEST:g} in SI units)",
            )
        return value

    def positive(self, value, key: str) -> float:
        value = self.number(value, key)
        if value <= 0.0:
            self.fail(key, f"must be positive, got {value}")
        return value

    def text(self, value, key: str) -> str:
        if not isinstance(value, str):
            self.fail(key, f"expected a string, got {_type(value)}")
        if not value.strip():
            self.fail(key, "must not be empty")
        return value

    def triple(self, value, key: str) -> tuple[float, float, float]:
        if not isinstance(value, list) or len(value) != 3:
            self.fail(key, f"expected an array of 3 numbers, got {_describe(value)}")
        return tuple(self.number(v, f"{key}[{i}]") for i, v in enumerate(value))

    # -- the parts of a case

    def case(self, data: dict, text: str, path: Path | None) -> Case:
        allowed = TOP_KEYS + TOP_TABLES
        for k in data:
            if k not in allowed:
                self.fail(k, f"unknown key; expected one of {', '.join(allowed)}")
        version = data.get("format_version", FORMAT_VERSION)
        if isinstance(version, bool) or not isinstance(version, int):
            self.fail("format_version", f"expected an integer, got {_type(version)}")
        if version != FORMAT_VERSION:
            self.fail(
                "format_version",
                f"this topdrift reads case format {FORMAT_VERSION}, the file says {version}",
            )
        for k in ("name", "description", "horizon", "samples", "start"):
            if k not in data:
                self.fail(k, "missing")
        name = self.text(data["name"], "name")
        if not _NAME.match(name):
            self.fail(
                "name", f"{name!r}: use letters, digits, '-', '_' and '.', starting with a letter"
            )
        description = self.text(data["description"], "description").strip()
        horizon = self.positive(data["horizon"], "horizon")
        samples = data["samples"]
        if isinstance(samples, bool) or not isinstance(samples, int):
            self.fail("samples", f"expected an integer, got {samples!r}")
        if not 2 <= samples <= MAX_SAMPLES:
            self.fail("samples", f"must be between 2 and {MAX_SAMPLES}, got {samples}")

        has_body, has_wheel = "body" in data, "wheel" in data
        if has_body == has_wheel:
            self.fail(
                "body",
                "give exactly one of [body] and [wheel]"
                + ("" if has_body else ", the file has neither"),
            )
        wheel = None
        if has_body:
            body = self.body(self.table(data, "body"))
        else:
            wheel, body = self.wheel(self.table(data, "wheel"))
        if "rotor" in data:
            body = self.rotor(self.table(data, "rotor"), body)
        if "field" in data:
            body = self.field(self.table(data, "field"), body)
        start = self.start(self.table(data, "start"))
        run = self.run(self.table(data, "run")) if "run" in data else {}
        return Case(
            name=name,
            description=description,
            horizon=horizon,
            samples=samples,
            body=body,
            start=start,
            wheel=wheel,
            run=run,
            toml_text=text,
            path=path,
            format_version=version,
        )

    def body(self, t: dict) -> RigidBody:
        self.keys(t, BODY_KEYS, ("mass", "inertia", "com"), "body.")
        mass = self.positive(t["mass"], "body.mass")
        inertia = self.triple(t["inertia"], "body.inertia")
        com = self.triple(t["com"], "body.com")
        gravity = self.gravity(t, "body.gravity")
        try:
            return RigidBody(mass=mass, inertia=inertia, com=com, gravity=gravity)
        except BodyError as exc:
            key, _, what = str(exc).partition(": ")
            self.fail(f"body.{key}", what)

    def rotor(self, t: dict, body: RigidBody) -> RigidBody:
        """[rotor] momentum = [h1, h2, h3]: the rotors' constant momentum relative to the body,
        body axes, kg m^2/s (a plain number each: no unit strings)."""
        self.keys(t, ROTOR_KEYS, ROTOR_KEYS, "rotor.")
        h = self.triple(t["momentum"], "rotor.momentum")
        try:
            return dataclasses.replace(body, rotor=h)
        except BodyError as exc:
            _, _, what = str(exc).partition(": ")
            self.fail("rotor.momentum", what)

    def field(self, t: dict, body: RigidBody) -> RigidBody:
        """[field] kind = "uniform-gravity" (the default) or "gravity-gradient", with orbit_rate
        (the orbit's mean motion, a rate: "0.0011 rad/s" or a number in rad/s) for the latter,
        or the name of a plug-in field (entry-point group topdrift.fields) with its own keys."""
        kind = self.text(t.get("kind", "uniform-gravity"), "field.kind")
        if kind not in known_kinds():
            self.fail(
                "field.kind",
                f"{kind!r}: no such field is built in or installed; expected one of "
                f"{', '.join(known_kinds())}",
            )
        if kind not in FIELD_KINDS:
            return self.plugin_field(kind, t, body)
        self.keys(t, FIELD_KEYS, (), "field.")
        if kind == "uniform-gravity":
            if "orbit_rate" in t:
                self.fail("field.orbit_rate", "uniform gravity has no orbit; leave it out")
            return body
        if "orbit_rate" not in t:
            self.fail(
                "field.orbit_rate", f"missing: the {kind} field needs the orbit's mean motion"
            )
        try:
            n = to_si(t["orbit_rate"], "rate")
        except UnitProblem as exc:
            self.fail("field.orbit_rate", str(exc))
        self.in_range(n, "field.orbit_rate")
        if n <= 0.0:
            self.fail(
                "field.orbit_rate", f"the orbit's mean motion must be positive, got {n:g} rad/s"
            )
        try:
            field = Field(kind, n)
        except FieldError as exc:
            key, _, what = str(exc).partition(": ")
            self.fail(f"field.{key}", what)
        try:
            return dataclasses.replace(body, field=field)
        except BodyError as exc:
            key, _, what = str(exc).partition(": ")
            self.fail(f"body.{key}", what)

    def plugin_field(self, kind: str, t: dict, body: RigidBody) -> RigidBody:
        """A plug-in field's [field] table: every value a plain number (SI units, as the field's
        keys say) or an array of them, range-checked here; what they mean the field's own
        params() checks, its message naming the key."""
        table = []
        for key, value in t.items():
            if key == "kind":
                continue
            where = f"field.{key}"
            if isinstance(value, list):
                value = tuple(self.number(v, f"{where}[{i}]") for i, v in enumerate(value))
            else:
                value = self.number(value, where)
            table.append((key, value))
        try:
            field = Field(kind, 0.0, tuple(table))
        except FieldError as exc:
            key, _, what = str(exc).partition(": ")
            self.fail(f"field.{key}", what)
        for i, c in enumerate(field.constants):
            self.in_range(c, f"field.{kind} constant {i}")
        try:
            return dataclasses.replace(body, field=field)
        except BodyError as exc:
            key, _, what = str(exc).partition(": ")
            self.fail(f"body.{key}", what)

    def gravity(self, t: dict, key: str) -> float:
        if "gravity" not in t:
            return STANDARD_GRAVITY
        g = self.number(t["gravity"], key)
        if g < 0.0:
            self.fail(key, f"must not be negative, got {g}")
        return g

    def wheel(self, t: dict) -> tuple[WheelSpec, RigidBody]:
        names = WheelSpec.field_names()
        allowed = ("demo", "gravity", *names)
        demo = t.get("demo", False)
        if not isinstance(demo, bool):
            self.fail("wheel.demo", f"expected true or false, got {_type(demo)}")
        # demo = true: every field not given takes the demo wheel's value; otherwise all are due.
        self.keys(t, allowed, () if demo else names, "wheel.")
        values = demo_wheel().as_dict() if demo else {}
        for k in names:
            if k in t:
                v = t[k]
                if k == "spoke_count":
                    if isinstance(v, bool) or not isinstance(v, int):
                        self.fail(f"wheel.{k}", f"expected an integer, got {_type(v)}")
                else:
                    v = self.number(v, f"wheel.{k}")
                values[k] = v
        gravity = self.gravity(t, "wheel.gravity")
        try:
            spec = WheelSpec(**values)
            return spec, spec.body(gravity)
        except BodyError as exc:
            key, _, what = str(exc).partition(": ")
            self.fail(f"wheel.{key}", what)

    def start(self, t: dict) -> Start:
        keys = START_ANGLES + START_RATES
        self.keys(t, keys, keys, "start.")
        values = {}
        for k in keys:
            try:
                values[k] = to_si(t[k], "angle" if k in START_ANGLES else "rate")
            except UnitProblem as exc:
                self.fail(f"start.{k}", str(exc))
            self.in_range(values[k], f"start.{k}")
        theta = values["theta"]
        # Rounding in a unit conversion ("180 deg") may land a hair outside [0, pi].
        if -1e-12 <= theta < 0.0:
            theta = 0.0
        elif math.pi < theta <= math.pi * (1 + 1e-12):
            theta = math.pi
        if not 0.0 <= theta <= math.pi:
            self.fail(
                "start.theta", f"must be between 0 and pi (0 and 180 deg), got {theta:.6g} rad"
            )
        values["theta"] = theta
        return Start(**values)

    def run(self, t: dict) -> dict:
        self.keys(t, RUN_KEYS, (), "run.")
        out = {}
        if "method" in t:
            out["method"] = self.text(t["method"], "run.method")
        if "form" in t:
            form = self.text(t["form"], "run.form")
            if form not in FORM_NAMES:
                self.fail("run.form", f"{form!r}: expected one of {', '.join(FORM_NAMES)}")
            out["form"] = form
        for k in ("step", "atol"):
            if k in t:
                out[k] = self.positive(t[k], f"run.{k}")
        if "rtol" in t:
            rtol = self.positive(t["rtol"], "run.rtol")
            if rtol >= 1.0:
                self.fail("run.rtol", f"must be below 1, got {rtol}")
            out["rtol"] = rtol
        return out


def _type(value) -> str:
    return {
        bool: "a boolean",
        int: "an integer",
        float: "a number",
        str: "a string",
        list: "an array",
        dict: "a table",
    }.get(type(value), type(value).__name__)


def _describe(value) -> str:
    if isinstance(value, list):
        return f"an array of {len(value)}"
    return _type(value)
