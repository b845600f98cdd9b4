"""The regression baseline file (results/baseline.json): a JSON contract, format version 1.

Documented in the README section "Regression gate in CI". The reader is strict: a missing or
unknown key, a wrong type or another format version is a one-line UserError naming the key, so
that the gate never compares against something it misread. Non-finite numbers, which JSON
cannot hold, are written as the strings "inf", "-inf" and "nan" and read back as floats.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.gate.measure import (
    COUNT_METRICS,
    ERROR_METRICS,
    INFO_METRICS,
    OPTIONAL_COUNT_METRICS,
    OPTIONAL_ERROR_METRICS,
)

FORMAT = "topdrift-baseline"
FORMAT_VERSION = 1
DEFAULT_FILE = Path("results") / "baseline.json"

_NONFINITE = {"inf": math.inf, "-inf": -math.inf, "nan": math.nan}


def _is_num(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


_num = _is_num


def _num_or_none(v) -> bool:
    return v is None or _is_num(v)


def _int(v) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


def _int_or_none(v) -> bool:
    return v is None or _int(v)


def _str(v) -> bool:
    return isinstance(v, str)


def _str_or_none(v) -> bool:
    return v is None or isinstance(v, str)


def _setting(v) -> bool:
    if not isinstance(v, dict):
        return False
    if set(v) == {"step"}:
        return _is_num(v["step"])
    return set(v) == {"rtol", "atol"} and _is_num(v["rtol"]) and _num_or_none(v["atol"])


RUN_KEYS = {
    "run_id": _str,
    "case": _str,
    "method": _str,
    "form": _str,
    "setting": _setting,
    "status": _str,
    "detail": _str_or_none,
    **{k: _int_or_none for k in COUNT_METRICS},
    **{k: _num_or_none for k in ERROR_METRICS},
    **{k: _num_or_none for k in INFO_METRICS},
    "ns_per_step_norm": _num_or_none,
}
# Keys a run record may have (added within format 1; absent in baselines recorded before).
OPTIONAL_RUN_KEYS = {
    **{k: _num_or_none for k in OPTIONAL_ERROR_METRICS},
    **{k: _int_or_none for k in OPTIONAL_COUNT_METRICS},
}
TIMING_KEYS = {
    "run": _str,
    "horizon": _num,
    "status": _str,
    "detail": _str_or_none,
    "steps": _int_or_none,
    "repeats": _int,
    "seconds": _num_or_none,
    "ns_per_step": _num_or_none,
    "ns_per_step_norm": _num_or_none,
    "spread": _num_or_none,
}
CALIBRATION_KEYS = {
    "kernel": _str,
    "clock": _str,
    "iterations": _int,
    "repeats": _int,
    "ns_per_iteration": _num,
    "spread": _num,
}
SWEEP_KEYS = {"source": _str, "name": _str, "sha256": _str}
VERSION_KEYS = ("topdrift", "python", "numpy", "scipy", "numba", "h5py", "cpu")
TOP_KEYS = (
    "format",
    "format_version",
    "created",
    "sweep",
    "versions",
    "calibration",
    "runs",
    "timings",
    "skipped",
)


def encode_nonfinite(v):
    if isinstance(v, float) and not math.isfinite(v):
        return "nan" if math.isnan(v) else ("inf" if v > 0 else "-inf")
    if isinstance(v, dict):
        return {k: encode_nonfinite(x) for k, x in v.items()}
    if isinstance(v, list):
        return [encode_nonfinite(x) for x in v]
    return v


def decode_nonfinite(v):
    if isinstance(v, str) and v in _NONFINITE:
        return _NONFINITE[v]
    if isinstance(v, dict):
        return {k: decode_nonfinite(x) for k, x in v.items()}
    if isinstance(v, list):
        return [decode_nonfinite(x) for x in v]
    return v


def _check_table(label: str, table, keys: dict, optional: dict | None = None) -> None:
    optional = optional or {}
    if not isinstance(table, dict):
        raise UserError(f"{label}: expected an object")
    for k in table:
        if k not in keys and k not in optional:
            raise UserError(f"{label}: unknown key {k!r}")
    for k, ok in keys.items():
        if k not in table:
            raise UserError(f"{label}: {k}: missing")
        if not ok(table[k]):
            raise UserError(f"{label}: {k}: unexpected value {table[k]!r}")
    for k, ok in optional.items():
        if k in table and not ok(table[k]):
            raise UserError(f"{label}: {k}: unexpected value {table[k]!r}")


def validate(data, label: str) -> dict:
    """The baseline as read, checked against format version 1 (raises UserError)."""
    if not isinstance(data, dict):
        raise UserError(f"{label}: not a baseline file (expected a JSON object)")
    if data.get("format") != FORMAT:
        raise UserError(f"{label}: format: expected {FORMAT!r}, got {data.get('format')!r}")
    if data.get("format_version") != FORMAT_VERSION:
        raise UserError(
            f"{label}: format_version: this topdrift reads version {FORMAT_VERSION}, "
            f"got {data.get('format_version')!r}"
        )
    for k in data:
        if k not in TOP_KEYS:
            raise UserError(f"{label}: unknown key {k!r}")
    for k in TOP_KEYS:
        if k not in data:
            raise UserError(f"{label}: {k}: missing")
    if not isinstance(data["created"], str):
        raise UserError(f"{label}: created: expected a string")
    _check_table(f"{label}: sweep", data["sweep"], SWEEP_KEYS)
    _check_table(f"{label}: versions", data["versions"], {k: _str_or_none for k in VERSION_KEYS})
    _check_table(f"{label}: calibration", data["calibration"], CALIBRATION_KEYS)
    for section, keys, optional in (
        ("runs", RUN_KEYS, OPTIONAL_RUN_KEYS),
        ("timings", TIMING_KEYS, None),
    ):
        table = data[section]
        if not isinstance(table, dict):
            raise UserError(f"{label}: {section}: expected an object keyed by run")
        for key, rec in table.items():
            _check_table(f"{label}: {section}[{key!r}]", rec, keys, optional)
    for key, rec in data["timings"].items():
        if rec["run"] not in data["runs"]:
            raise UserError(f"{label}: timings[{key!r}]: run {rec['run']!r} is not in runs")
    skipped = data["skipped"]
    if not isinstance(skipped, list) or not all(isinstance(s, str) for s in skipped):
        raise UserError(f"{label}: skipped: expected a list of strings")
    return data


def read_baseline(path: Path) -> dict:
    label = str(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise UserError(
            f"{label}: no baseline file; record one with 'topdrift baseline --out {label}'"
        ) from None
    except OSError as exc:
        raise UserError(f"{label}: cannot read: {exc.strerror or exc}") from None
    try:
        data = json.loads(raw.decode("utf-8"))
    except UnicodeDecodeError as exc:
        raise UserError(f"{label}: not UTF-8 text (offset {exc.start})") from None
    except json.JSONDecodeError as exc:
        raise UserError(f"{label}: not valid JSON: {exc.msg} (line {exc.lineno})") from None
    return validate(decode_nonfinite(data), label)


def write_baseline(data: dict, path: Path, *, force: bool = False) -> None:
    """Write atomically (a temporary file renamed over the target), and never over an existing
    baseline unless asked: a baseline is a result, and the committed one is a contract."""
    validate(data, str(path))
    if path.exists() and not force:
        raise UserError(f"{path}: exists; pass --force to record a new baseline over it")
    path.parent.mkdir(parents=True, exist_ok=True)
    text = json.dumps(encode_nonfinite(data), indent=1, allow_nan=False) + "\n"
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
