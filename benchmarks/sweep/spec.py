"""Sweep files (TOML): a grid of cases x methods x settings. Schema, in the README section
"Sweeps":

    name = "quick"
    description = "what the sweep is for"
    cases = ["demo-wheel", "my-case.toml"]   # library names, or paths relative to this file
    methods = ["dop853", "leapfrog"]
    forms = ["body"]            # optional: forms to run each method in (default: its first fit)
    horizon = 5.0               # optional: overrides every case's horizon (s)
    samples = 101               # optional: overrides every case's sample count
    steps = "auto"              # fixed-step methods: a list of steps (s) or "auto"
    rtols = "auto"              # adaptive methods: a list of rtol or "auto"
    atol_ratio = 1e-3           # optional: atol = rtol * atol_ratio (default: the runner's)
    rungs = 4                   # rungs of an "auto" ladder
    max_steps = 2e7             # "auto" rungs needing more steps over the horizon are dropped

    [method.leapfrog]           # optional per-method overrides of steps / rtols / forms
    steps = [1e-3, 1e-4]
"""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from topdrift.benchmarks.errors import UserError

TOP_KEYS = (
    "name",
    "description",
    "cases",
    "methods",
    "forms",
    "horizon",
    "samples",
    "steps",
    "rtols",
    "atol_ratio",
    "rungs",
    "max_steps",
    "method",
)
PER_METHOD_KEYS = ("steps", "rtols", "forms")
FORMS = ("euler", "body")
_NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9._-]*\Z")  # as a case's name


@dataclass
class SweepSpec:
    name: str
    description: str
    cases: list[str]  # resolved: a path (str) or a library name
    methods: list[str]
    forms: list[str] | None
    horizon: float | None
    samples: int | None
    steps: list[float] | str
    rtols: list[float] | str
    atol_ratio: float | None
    rungs: int
    max_steps: float
    per_method: dict[str, dict] = field(default_factory=dict)
    path: Path | None = None


def _fail(label: str, key: str, what: str):
    raise UserError(f"{label}: {key}: {what}")


def _number(label, key, v, *, positive=True) -> float:
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        _fail(label, key, f"expected a number, got {type(v).__name__}")
    v = float(v)
    if not math.isfinite(v) or (positive and v <= 0.0):
        _fail(label, key, f"must be a positive finite number, got {v!r}")
    return v


def _ladder(label, key, v) -> list[float] | str:
    if v == "auto":
        return "auto"
    if not isinstance(v, list) or not v:
        _fail(label, key, 'expected "auto" or a non-empty list of numbers')
    return [_number(label, f"{key}[{i}]", x) for i, x in enumerate(v)]


def _names(label, key, v) -> list[str]:
    if not isinstance(v, list) or not v or not all(isinstance(x, str) and x for x in v):
        _fail(label, key, "expected a non-empty list of names")
    return list(v)


def _forms(label, key, v) -> list[str]:
    forms = _names(label, key, v)
    for f in forms:
        if f not in FORMS:
            _fail(label, key, f"unknown form {f!r}; expected euler or body")
    return forms


def parse_sweep(text: str, label: str, base: Path | None = None) -> SweepSpec:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise UserError(f"{label}: not valid TOML: {exc}") from None
    for k in data:
        if k not in TOP_KEYS:
            _fail(label, k, f"unknown key; expected one of {', '.join(TOP_KEYS)}")
    for k in ("name", "cases", "methods"):
        if k not in data:
            _fail(label, k, "missing")
    name = data["name"]
    if not isinstance(name, str) or not name:
        _fail(label, "name", "expected a non-empty string")
    if not _NAME.match(name):  # it names the default results file
        _fail(label, "name", f"{name!r}: use letters, digits, '-', '_' and '.'")
    desc = data.get("description", "")
    if not isinstance(desc, str):
        _fail(label, "description", "expected a string")
    cases = _names(label, "cases", data["cases"])
    if base is not None:
        cases = [str(base / c) if (base / c).is_file() else c for c in cases]
    methods = _names(label, "methods", data["methods"])
    forms = _forms(label, "forms", data["forms"]) if "forms" in data else None
    horizon = _number(label, "horizon", data["horizon"]) if "horizon" in data else None
    samples = None
    if "samples" in data:
        s = data["samples"]
        if isinstance(s, bool) or not isinstance(s, int) or s < 2:
            _fail(label, "samples", f"expected a whole number of at least 2, got {s!r}")
        samples = s
    rungs = data.get("rungs", 4)
    if isinstance(rungs, bool) or not isinstance(rungs, int) or not 1 <= rungs <= 50:
        _fail(label, "rungs", f"expected a whole number from 1 to 50, got {rungs!r}")
    per_method = {}
    table = data.get("method", {})
    if not isinstance(table, dict):
        _fail(label, "method", "expected a table of per-method tables")
    for m, t in table.items():
        if m not in methods:
            _fail(label, f"method.{m}", "not one of this sweep's methods")
        if not isinstance(t, dict):
            _fail(label, f"method.{m}", "expected a table")
        entry = {}
        for k, v in t.items():
            key = f"method.{m}.{k}"
            if k not in PER_METHOD_KEYS:
                _fail(label, key, f"unknown key; expected one of {', '.join(PER_METHOD_KEYS)}")
            entry[k] = _forms(label, key, v) if k == "forms" else _ladder(label, key, v)
        per_method[m] = entry
    return SweepSpec(
        name=name,
        description=desc,
        cases=cases,
        methods=methods,
        forms=forms,
        horizon=horizon,
        samples=samples,
        steps=_ladder(label, "steps", data.get("steps", "auto")),
        rtols=_ladder(label, "rtols", data.get("rtols", "auto")),
        atol_ratio=_number(label, "atol_ratio", data["atol_ratio"])
        if "atol_ratio" in data
        else None,
        rungs=rungs,
        max_steps=_number(label, "max_steps", data.get("max_steps", 2e7)),
        per_method=per_method,
        path=base,
    )


def read_sweep(spec: str) -> SweepSpec:
    """A sweep file by path, or a shipped sweep by name (benchmarks/sweep/shipped/NAME.toml)."""
    from importlib import resources

    path = Path(spec)
    if not path.is_file():
        shipped = (
            Path(str(resources.files("topdrift.benchmarks.sweep") / "shipped")) / f"{spec}.toml"
        )
        if not shipped.is_file():
            raise UserError(f"{spec}: no such sweep file and no shipped sweep of that name")
        path = shipped
    raw = path.read_bytes()
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise UserError(f"{spec}: not UTF-8 text (offset {exc.start})") from None
    return parse_sweep(text, spec, path.parent)
