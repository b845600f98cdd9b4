"""The regression baseline file (results/baseline.json): a JSON contract, format version 2.

Documented in docs/gate.md. The reader is strict: a missing or
unknown key, a wrong type, a value out of its range or another format version is a one-line
UserError naming the key, so that the gate never compares against something it misread. In
particular no number may be NaN (a NaN compares false with everything: a baseline holding one
is blind to that metric), no number may overflow a double (JSON allows 1e400; Python reads it as
infinity), and a timing must be a positive finite number (it divides). The one non-finite value
a baseline holds is an error maximum of "inf" (a run whose error grew without bound), written as
that string since JSON has no infinity.

Version 2 (from 1): the sweep is named relative to the baseline file; the machine's fingerprint
and the plug-ins' versions are recorded; the calibration loop is replaced by the reference
workload, and a timing holds its ratio to it round by round.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

from topdrift.benchmarks.errors import UserError

FORMAT = "topdrift-baseline"
FORMAT_VERSION = 2
DEFAULT_FILE = Path("results") / "baseline.json"

# The metrics each run of a baseline holds (formats 1 and 2). The invariant and trajectory
# errors, all "smaller is better", are spelled out rather than taken from
# run/metrics.py's MAX_NAMES: a new metric there must not change this format.
ERROR_METRICS = (
    "energy_rel_max",
    "p_phi_rel_max",
    "p_psi_rel_max",
    "norm_abs_max",
    "axis_angle_max",
    "theta_abs_max",
    "phi_abs_max",
    "psi_abs_max",
)
COUNT_METRICS = ("steps", "rhs_evals", "rejected")
INFO_METRICS = ("energy_drift_exponent", "t_fail", "wall_s", "ns_per_step")
# Optional keys of a run (added within format 2: a baseline without them is read as before, and
# they are compared only where the baseline has them; compare.py reports one the rerun measures
# and the baseline lacks as new): Kovalevskaya's integral, measured in every run of a Kovalevskaya
# top, the whole attitude's angle from the exact solution, and the force (torque) evaluations.
OPTIONAL_ERROR_METRICS = ("kovalevskaya_rel_max", "attitude_angle_max")
OPTIONAL_COUNT_METRICS = ("force_evals",)
OPTIONAL_METRICS = OPTIONAL_ERROR_METRICS + OPTIONAL_COUNT_METRICS

INT64_MAX = 2**63 - 1
# The machine fingerprint's keys (benchmarks/gate/machine.py reads them off the machine).
MACHINE_KEYS = (
    "cpu",
    "vendor",
    "family",
    "model",
    "stepping",
    "flags",
    "cores",
    "llvm_cpu",
    "numba",
    "llvmlite",
    "llvm",
)


class _Bad(ValueError):
    """What a value should have been, for the one-line message."""


def _number(v) -> float:
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise _Bad("expected a number")
    if isinstance(v, int) and abs(v) > 1e308:
        raise _Bad("out of the range of a double")
    v = float(v)
    if math.isnan(v):
        raise _Bad("NaN is no value")
    return v


def _finite(v) -> float:
    v = _number(v)
    if not math.isfinite(v):
        raise _Bad("expected a finite number")
    return v


def _positive(v) -> float:
    v = _finite(v)
    if v <= 0.0:
        raise _Bad("expected a positive number")
    return v


def _nonneg(v) -> float:
    v = _finite(v)
    if v < 0.0:
        raise _Bad("expected a number >= 0")
    return v


def _error(v) -> float:
    """An error maximum: >= 0, finite or "inf" (an error that grew without bound)."""
    if v == "inf":
        return math.inf
    v = _number(v)
    if v < 0.0:
        raise _Bad('expected a number >= 0 or "inf"')
    return v


def _count(v) -> int:
    if isinstance(v, bool) or not isinstance(v, int) or not 0 <= v <= INT64_MAX:
        raise _Bad("expected a whole number >= 0")
    return v


def _text(v) -> str:
    if not isinstance(v, str):
        raise _Bad("expected a string")
    return v


def _name(v) -> str:
    if not isinstance(v, str) or not v:
        raise _Bad("expected a non-empty string")
    return v


def _opt(check):
    def read(v):
        return None if v is None else check(v)

    return read


def _setting(v) -> dict:
    if not isinstance(v, dict):
        raise _Bad("expected an object")
    if set(v) == {"step"}:
        return {"step": _positive(v["step"])}
    if set(v) == {"rtol", "atol"}:
        return {"rtol": _positive(v["rtol"]), "atol": _opt(_positive)(v["atol"])}
    raise _Bad('expected {"step": H} or {"rtol": R, "atol": A or null}')


def _ratios(v) -> list:
    if not isinstance(v, list):
        raise _Bad("expected a list of positive numbers")
    return [_positive(x) for x in v]


def _kind(v) -> str:
    if v not in ("scalar", "stages", "mix"):
        raise _Bad('expected "scalar", "stages" or "mix"')
    return v


def _sweep_kind(v) -> str:
    if v not in ("shipped", "file"):
        raise _Bad('expected "shipped" or "file"')
    return v


def _sha(v) -> str:
    if not isinstance(v, str) or len(v) != 64 or any(c not in "0123456789abcdef" for c in v):
        raise _Bad("expected 64 hexadecimal digits")
    return v


def _plugin(v) -> dict:
    if not isinstance(v, dict) or set(v) != {"package", "version"}:
        raise _Bad('expected {"package": ..., "version": ...}')
    return {"package": _opt(_text)(v["package"]), "version": _opt(_text)(v["version"])}


RUN_KEYS = {
    "run_id": _text,
    "case": _name,
    "method": _name,
    "form": _name,
    "setting": _setting,
    "status": _name,
    "detail": _opt(_text),
    **{k: _opt(_count) for k in COUNT_METRICS},
    **{k: _opt(_error) for k in ERROR_METRICS},
    "energy_drift_exponent": _opt(_finite),
    "t_fail": _opt(_nonneg),
    "wall_s": _opt(_nonneg),
    "ns_per_step": _opt(_nonneg),
    "ns_per_step_norm": _opt(_nonneg),
}
# Keys a run record may have (absent in baselines recorded before them).
OPTIONAL_RUN_KEYS = {
    **{k: _opt(_error) for k in OPTIONAL_ERROR_METRICS},
    **{k: _opt(_count) for k in OPTIONAL_COUNT_METRICS},
}
TIMING_KEYS = {
    "run": _name,
    "horizon": _positive,
    "status": _name,
    "detail": _opt(_text),
    "steps": _opt(_count),
    "reference": _kind,
    "rounds": _count,
    "per_round": _ratios,
    "ns_per_step_norm": _opt(_positive),
    "ns_per_step": _opt(_positive),
    "seconds": _opt(_nonneg),
    "spread": _opt(_nonneg),
}
REFERENCE_KEYS = {
    "kernel": _name,
    "version": _count,
    "clock": _name,
    "scalar_steps": _count,
    "stages_steps": _count,
    "scalar_ns": _positive,
    "stages_ns": _positive,
    "passes": _count,
}
SWEEP_KEYS = {"kind": _sweep_kind, "source": _name, "name": _name, "sha256": _sha}
VERSION_KEYS = ("topdrift", "python", "numpy", "scipy", "numba", "h5py", "cpu")
MACHINE_CHECKS = {k: _opt(_count) if k == "cores" else _opt(_text) for k in MACHINE_KEYS}
TOP_KEYS = (
    "format",
    "format_version",
    "created",
    "sweep",
    "versions",
    "machine",
    "plugins",
    "reference",
    "runs",
    "timings",
    "skipped",
)


def encode_nonfinite(v):
    """Infinities and NaN as the strings JSON can hold (for writing, and the gate's --json)."""
    if isinstance(v, float) and not math.isfinite(v):
        return "nan" if math.isnan(v) else ("inf" if v > 0 else "-inf")
    if isinstance(v, dict):
        return {k: encode_nonfinite(x) for k, x in v.items()}
    if isinstance(v, list):
        return [encode_nonfinite(x) for x in v]
    return v


def _table(label: str, table, keys: dict, optional: dict | None = None) -> dict:
    """The table with every value read by its check; raises UserError on the first bad one.
    Keys in `optional` may be absent; when present they are read like the others."""
    optional = optional or {}
    if not isinstance(table, dict):
        raise UserError(f"{label}: expected an object")
    for k in table:
        if k not in keys and k not in optional:
            raise UserError(f"{label}: unknown key {k!r}")
    out = {}
    for k, read in keys.items():
        if k not in table:
            raise UserError(f"{label}: {k}: missing")
        try:
            out[k] = read(table[k])
        except _Bad as exc:
            raise UserError(f"{label}: {k}: unexpected value {_show(table[k])} ({exc})") from None
    for k, read in optional.items():
        if k not in table:
            continue
        try:
            out[k] = read(table[k])
        except _Bad as exc:
            raise UserError(f"{label}: {k}: unexpected value {_show(table[k])} ({exc})") from None
    return out


def _show(v) -> str:
    text = repr(v)
    return text if len(text) <= 60 else text[:57] + "..."


def validate(data, label: str) -> dict:
    """The baseline as read, checked against format version 2 (raises UserError). Returns the
    same object, its values read in place ("inf" error maxima as floats)."""
    if not isinstance(data, dict):
        raise UserError(f"{label}: not a baseline file (expected a JSON object)")
    if data.get("format") != FORMAT:
        raise UserError(f"{label}: format: expected {FORMAT!r}, got {data.get('format')!r}")
    if data.get("format_version") != FORMAT_VERSION:
        hint = "; record it again with 'topdrift baseline --force'" if _older(data) else ""
        raise UserError(
            f"{label}: format_version: this topdrift reads version {FORMAT_VERSION}, "
            f"got {data.get('format_version')!r}{hint}"
        )
    for k in data:
        if k not in TOP_KEYS:
            raise UserError(f"{label}: unknown key {k!r}")
    for k in TOP_KEYS:
        if k not in data:
            raise UserError(f"{label}: {k}: missing")
    if not isinstance(data["created"], str):
        raise UserError(f"{label}: created: expected a string")
    data["sweep"] = _table(f"{label}: sweep", data["sweep"], SWEEP_KEYS)
    data["versions"] = _table(
        f"{label}: versions", data["versions"], {k: _opt(_text) for k in VERSION_KEYS}
    )
    data["machine"] = _table(f"{label}: machine", data["machine"], MACHINE_CHECKS)
    plugins = data["plugins"]
    if not isinstance(plugins, dict):
        raise UserError(f"{label}: plugins: expected an object keyed by method")
    for name, rec in plugins.items():
        try:
            plugins[name] = _plugin(rec)
        except _Bad as exc:
            raise UserError(
                f"{label}: plugins[{name!r}]: unexpected value {_show(rec)} ({exc})"
            ) from None
    data["reference"] = _table(f"{label}: reference", data["reference"], REFERENCE_KEYS)
    for section, keys, optional in (
        ("runs", RUN_KEYS, OPTIONAL_RUN_KEYS),
        ("timings", TIMING_KEYS, None),
    ):
        table = data[section]
        if not isinstance(table, dict):
            raise UserError(f"{label}: {section}: expected an object keyed by run")
        for key, rec in table.items():
            table[key] = _table(f"{label}: {section}[{key!r}]", rec, keys, optional)
    for key, rec in data["timings"].items():
        if rec["run"] not in data["runs"]:
            raise UserError(f"{label}: timings[{key!r}]: run {rec['run']!r} is not in runs")
        if rec["rounds"] != len(rec["per_round"]):
            raise UserError(
                f"{label}: timings[{key!r}]: rounds: {rec['rounds']} but per_round holds "
                f"{len(rec['per_round'])}"
            )
        if rec["status"] == "ok" and rec["ns_per_step_norm"] is None:
            raise UserError(f"{label}: timings[{key!r}]: ns_per_step_norm: null for an ok timing")
    skipped = data["skipped"]
    if not isinstance(skipped, list) or not all(isinstance(s, str) for s in skipped):
        raise UserError(f"{label}: skipped: expected a list of strings")
    return data


def _older(data: dict) -> bool:
    v = data.get("format_version")
    return isinstance(v, int) and not isinstance(v, bool) and v < FORMAT_VERSION


def _refuse_constant(label: str):
    def parse(name: str):
        raise UserError(
            f"{label}: {name} is not a JSON number (a non-finite error maximum is written "
            'as the string "inf")'
        )

    return parse


def _float_in_range(label: str):
    def parse(text: str) -> float:
        v = float(text)
        if not math.isfinite(v):
            raise UserError(f"{label}: the number {text} is out of the range of a double")
        return v

    return parse


def read_baseline(path: Path) -> dict:
    label = str(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise UserError(
            f"{label}: no baseline file; record one with 'topdrift baseline --out {label}'"
        ) from None
    except IsADirectoryError:
        raise UserError(f"{label}: is a folder, not a baseline file") from None
    except OSError as exc:
        raise UserError(f"{label}: cannot read: {exc.strerror or exc}") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise UserError(f"{label}: not UTF-8 text (offset {exc.start})") from None
    try:
        data = json.loads(
            text, parse_constant=_refuse_constant(label), parse_float=_float_in_range(label)
        )
    except json.JSONDecodeError as exc:
        raise UserError(f"{label}: not valid JSON: {exc.msg} (line {exc.lineno})") from None
    except RecursionError:
        raise UserError(f"{label}: not a baseline file (nested too deeply)") from None
    return validate(data, label)


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
