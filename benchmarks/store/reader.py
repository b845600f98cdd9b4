"""Read-only access to a runs file: validation, run records and one run's sample series.

Only reads (mode "r", without taking HDF5's file lock), so that a file another process is still
writing can be looked at and nothing in it can be changed. Every attribute is read defensively:
a run group that its writer has only just created may lack attributes or datasets; such a run
comes back with the status `incomplete` (records) or as a UserError naming what is missing
(series), never as a traceback.
"""

from __future__ import annotations

import contextlib
import json
import os

import numpy as np

from topdrift.benchmarks.errors import UserError

FORMAT_NAME = "topdrift-runs"
FORMAT_VERSION = 1  # the newest layout this reader understands

STATUS_OK = "ok"
STATUS_INCOMPLETE = "incomplete"  # not a writer's status: the group lacks what a run must have


def _text(value) -> str:
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.ndarray) and value.shape == ():
        return _text(value[()])
    return str(value)


def _plain(value):
    return value.item() if isinstance(value, np.generic) else value


def _json(value, what: str, run_id: str):
    if value is None:
        return None
    try:
        return json.loads(_text(value))
    except ValueError as exc:
        raise UserError(f"run {run_id}: attribute '{what}' is not valid JSON ({exc})") from None


@contextlib.contextmanager
def open_runs(path: str):
    """The runs file opened read-only, after checking that it is a topdrift runs file this
    reader understands. Every failure is a one-line UserError."""
    import h5py

    path = os.fspath(path)
    if not os.path.exists(path):
        raise UserError(f"runs file '{path}' does not exist")
    if os.path.isdir(path):
        raise UserError(f"runs file '{path}' is a directory, not an HDF5 file")
    try:
        is_hdf5 = h5py.is_hdf5(path)
    except OSError as exc:
        raise UserError(f"runs file '{path}' cannot be read ({exc.strerror or exc})") from None
    if not is_hdf5:
        raise UserError(f"'{path}' is not an HDF5 file")
    try:
        # Read mode without HDF5's file lock: the writer holds that lock for as long as it runs,
        # and flushes after every batch, so the file is readable up to its last flush.
        f = h5py.File(path, "r", locking=False)
    except OSError as exc:
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise UserError(f"runs file '{path}' cannot be opened ({first})") from None
    try:
        fmt = f.attrs.get("format")
        if fmt is None or _text(fmt) != FORMAT_NAME:
            shown = "none" if fmt is None else repr(_text(fmt))
            raise UserError(
                f"'{path}' is not a topdrift runs file (format attribute {shown}, "
                f"expected '{FORMAT_NAME}')"
            )
        version = f.attrs.get("format_version")
        try:
            version = int(version)
        except (TypeError, ValueError):
            raise UserError(f"'{path}' has no valid format_version attribute") from None
        if version > FORMAT_VERSION:
            raise UserError(
                f"'{path}' has format_version {version}; this topdrift reads up to "
                f"{FORMAT_VERSION}: upgrade topdrift"
            )
        if version < 1:
            raise UserError(f"'{path}' has format_version {version}, which never existed")
        yield f
    except (OSError, RuntimeError, KeyError) as exc:
        # HDF5 finds damage (a cut file, overwritten bytes) only where it reads: any read of the
        # open file may fail (h5py raises KeyError for an object header it cannot read), and
        # every such failure is the same one-line error.
        raise UserError(f"runs file '{path}' is damaged: {_first_line(exc)}") from None
    finally:
        f.close()


def _first_line(exc: Exception) -> str:
    return str(exc).splitlines()[0] if str(exc) else type(exc).__name__


def _record(run_id: str, g) -> dict:
    a = g.attrs
    rec = {
        "run_id": run_id,
        "case": _text(a["case"]) if "case" in a else None,
        "method": _text(a["method"]) if "method" in a else None,
        "settings": _json(a.get("settings"), "settings", run_id) or {},
        "status": _text(a["status"]) if "status" in a else STATUS_INCOMPLETE,
        "created": _text(a["created"]) if "created" in a else None,
        "metrics": _json(a.get("metrics"), "metrics", run_id) or {},
    }
    # The form and the horizon name a series as much as the settings do; the writer keeps them
    # as attributes of their own. Samples are left out: they do not change the numerics.
    for key in ("form", "horizon"):
        if key in a and key not in rec["settings"]:
            v = a[key]
            rec["settings"][key] = _text(v) if isinstance(v, (str, bytes)) else _plain(v)
    if rec["case"] is None or rec["method"] is None:
        rec["status"] = STATUS_INCOMPLETE
    rec["has_exact"] = "exact" in g and "euler" in g["exact"]
    return rec


def load_records(path: str) -> list[dict]:
    """Every run in the file as a record: run_id, case, method, settings (dict), status,
    created, metrics (dict), has_exact. Runs of any status are returned; callers skip or mark."""
    with open_runs(path) as f:
        runs = f.get("runs")
        if runs is None:
            return []
        return [_record(run_id, runs[run_id]) for run_id in sorted(runs.keys())]


def case_toml(path: str, run_id: str) -> str | None:
    with open_runs(path) as f:
        g = _run_group(f, run_id, path)
        v = g.attrs.get("case_toml")
        return None if v is None else _text(v)


def _run_group(f, run_id: str, path: str):
    runs = f.get("runs")
    if runs is None or run_id not in runs:
        raise UserError(f"no run '{run_id}' in '{path}'")
    return runs[run_id]


def _read(g, name: str, run_id: str, path: str) -> np.ndarray:
    """A dataset's values; a damaged file (a chunk cut off or overwritten) is a one-line error."""
    try:
        return np.asarray(g[name][...], dtype=np.float64)
    except (OSError, RuntimeError) as exc:
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise UserError(
            f"run {run_id} in '{path}': dataset '{name}' cannot be read ({first})"
        ) from None


SERIES_DATASETS = {
    "t": "t",
    "euler": "euler",
    "quaternion": "quaternion",
    "momentum": "momentum",
    "energy": "invariants/energy",
    "p_phi": "invariants/p_phi",
    "p_psi": "invariants/p_psi",
}


def load_series(path: str, run_id: str) -> dict:
    """One run's samples as numpy arrays (keys of SERIES_DATASETS, plus exact_euler, which is
    None where the case has no exact solution), with its record under 'record'.

    A run that is still being written may have datasets of different lengths; all are cut to the
    shortest, so that every row is one sample."""
    with open_runs(path) as f:
        g = _run_group(f, run_id, path)
        out = {"record": _record(run_id, g)}
        for key, name in SERIES_DATASETS.items():
            if name not in g:
                raise UserError(f"run {run_id} in '{path}' has no dataset '{name}'")
            out[key] = _read(g, name, run_id, path)
        out["exact_euler"] = _read(g, "exact/euler", run_id, path) if "exact/euler" in g else None
        # Present only for a Kovalevskaya top, where it is an invariant.
        kov = "invariants/kovalevskaya"
        out["kovalevskaya"] = _read(g, kov, run_id, path) if kov in g else None
    n = min(len(v) for k, v in out.items() if k != "record" and v is not None)
    for k, v in out.items():
        if k != "record" and v is not None:
            out[k] = v[:n]
    return out
