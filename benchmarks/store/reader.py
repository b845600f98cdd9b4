"""The one reader of run files: the only way any command opens a run file to read it.

`open_reader` looks at the path (a regular file, with an HDF5 signature), opens it read-only
without taking HDF5's file lock (a writer holds that lock for as long as it runs and flushes
after every batch, so a file being written is readable up to its last flush), and runs every
check of validate.py before handing the file over: links first, then the layout. Inside it, any
failed HDF5 read is the one damaged-file line. Everything else here reads through it:

- list_runs: every run's known attributes (summary, sweep, demo);
- load_records / load_series: the records and sample series that plot and report use;
- existing_status / stored_result / complete_ids: what `run` and `sweep` find in their file.

A run group that its writer has only just created may lack attributes or datasets; such a run
comes back with the status `incomplete` (records) or as a UserError naming what is missing
(series), never as a traceback.
"""

from __future__ import annotations

import os
import stat
from pathlib import Path

import h5py
import numpy as np

from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.store.failures import damage_is_an_error
from topdrift.benchmarks.store.format import (
    EXACT_TURNS_DATASET,
    FINAL_STATUSES,
    KOVALEVSKAYA_DATASET,
    RUNS,
    STATUS_INCOMPLETE,
    STATUS_OK,  # noqa: F401  (the records' status for a complete run, for readers of records)
    TURNS_DATASET,
    cannot_open,
    damaged,
    first_line,
    is_a_directory,
    no_such_file,
    not_a_regular_file,
    not_hdf5,
)
from topdrift.benchmarks.store.validate import check_file, check_resumable, read_attrs, run_name


def check_path(path) -> None:
    """Refuse a path that is not a regular HDF5 file, without opening it as one (a FIFO would
    block a read, a directory or a foreign file would give HDF5's own words)."""
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise no_such_file(path) from None
    except OSError as exc:
        raise cannot_open(path, exc.strerror or first_line(exc)) from None
    if stat.S_ISDIR(st.st_mode):
        raise is_a_directory(path)
    if not stat.S_ISREG(st.st_mode):
        raise not_a_regular_file(path)
    if st.st_size == 0:
        raise not_hdf5(path, "empty file")
    try:
        signed = h5py.is_hdf5(path)
    except OSError as exc:
        raise cannot_open(path, exc.strerror or first_line(exc)) from None
    if not signed:
        raise not_hdf5(path)


# Files this process checked and found good, by path -> the (device, inode, size, mtime) they had
# then. A command opens its file several times (to decide, to check a resume, to write); a file
# whose signature is unchanged is the file already checked, and is not checked again. Any write
# changes the modification time, so a file this process or another changed is checked anew.
_CHECKED: dict[str, tuple] = {}
_CHECKED_MAX = 16


def _signature(path: str) -> tuple:
    st = os.stat(path)
    return (st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns)


def check_open_file(f: h5py.File, path) -> None:
    """validate.check_file on an open file, unless this process checked the same path with the
    same signature before; failed HDF5 reads are the damaged-file line."""
    key = os.path.abspath(os.fspath(path))
    sig = _signature(key)
    if _CHECKED.get(key) == sig:
        return
    with damage_is_an_error(path):
        check_file(f, path)
    if len(_CHECKED) >= _CHECKED_MAX:
        _CHECKED.clear()
    _CHECKED[key] = sig


class open_reader:
    """The run file opened read-only and checked (see the module docstring), for a with-block:
    `with open_reader(path) as f:`. The checks run when it is called, so that a refused file is
    refused there; a failed HDF5 read inside the with-block is the damaged-file line too, and
    the file is closed at its end."""

    def __init__(self, path):
        self.path = os.fspath(path)
        check_path(self.path)
        try:
            self.f = h5py.File(self.path, "r", locking=False)
        except OSError as exc:
            raise cannot_open(self.path, first_line(exc)) from None
        try:
            check_open_file(self.f, self.path)
        except BaseException:
            self.f.close()
            raise

    def __enter__(self) -> h5py.File:
        return self.f

    def __exit__(self, kind, exc, tb):
        try:
            return damage_is_an_error(self.path).__exit__(kind, exc, tb)
        finally:
            self.f.close()


def run_record(g: h5py.Group, run_id: str, path) -> dict:
    """A run's known attributes, decoded, with `run_id`, `samples_stored` and `has_exact`; the
    status is `incomplete` where the group lacks its case, method or status."""
    row = {"run_id": run_id, **read_attrs(g, run_id, path)}
    if any(k not in row for k in ("case", "method", "status")):
        row["status"] = STATUS_INCOMPLETE
    row["samples_stored"] = int(g["t"].shape[0]) if "t" in g else 0
    row["has_exact"] = "exact" in g and "euler" in g["exact"]
    return row


def _runs(f: h5py.File, path):
    runs = f.get("runs")
    if runs is None:
        return
    for raw in list(runs.id):
        run_id = run_name(raw, path)
        yield run_id, runs[run_id]


def list_runs(f: h5py.File) -> list[dict]:
    """Every run's record (see run_record), in creation order."""
    path = f.filename
    out = [run_record(g, run_id, path) for run_id, g in _runs(f, path)]
    for row in out:
        del row["has_exact"]  # the analysis records' key, not an attribute
    out.sort(key=lambda r: (str(r.get("created", "")), r["run_id"]))
    return out


def analysis_record(row: dict) -> dict:
    """A run_record as analysis, plot and report take it: run_id, case, method, settings (dict;
    with the form and the horizon, which name a series as much as the settings do), status,
    created, metrics (dict), has_exact, and the case text and sample count (what a reference
    of the case needs)."""
    settings = dict(row.get("settings") or {})
    for key in ("form", "horizon"):
        if key in row and key not in settings:
            settings[key] = row[key]
    return {
        "run_id": row["run_id"],
        "case": row.get("case"),
        "method": row.get("method"),
        "settings": settings,
        "status": row["status"],
        "created": row.get("created"),
        "metrics": row.get("metrics") or {},
        "has_exact": row["has_exact"],
        "case_toml": row.get("case_toml"),
        "samples": row.get("samples"),
    }


def load_records(path) -> list[dict]:
    """Every run in the file as an analysis_record, runs of any status, ordered by run id."""
    with open_reader(path) as f:
        rows = [run_record(g, run_id, path) for run_id, g in _runs(f, path)]
    return [analysis_record(row) for row in sorted(rows, key=lambda r: r["run_id"])]


def _run_group(f, run_id: str, path):
    runs = f.get("runs")
    if runs is None or run_id not in runs:
        raise UserError(f"{path}: no run '{run_id}'")
    return runs[run_id]


SERIES_DATASETS = {
    "t": "t",
    "euler": "euler",
    "quaternion": "quaternion",
    "momentum": "momentum",
    "energy": "invariants/energy",
    "p_phi": "invariants/p_phi",
    "p_psi": "invariants/p_psi",
}


def _read(g, name: str, run_id: str, path, dtype=np.float64) -> np.ndarray:
    """A dataset's values; a chunk that cannot be read is the damaged-file line."""
    try:
        return np.asarray(g[name][...], dtype=dtype)
    except (OSError, RuntimeError) as exc:
        raise damaged(path, f"run {run_id}: '{name}' cannot be read ({first_line(exc)})") from None


def read_series(f: h5py.File, run_id: str) -> dict:
    """One run's samples from an open, checked file, as numpy arrays (keys of SERIES_DATASETS,
    plus exact_euler, which is None where the case has no exact solution), with its
    analysis_record under 'record'. euler_turns and exact_turns: the whole turns of phi and psi
    (int64, n x 2) of the samples and of the exact solution, None where the file holds none (a
    version-1 file, a body-form run; unfolded angle = folded + 2 pi turns).

    A run that is still being written may have datasets of different lengths; all are cut to the
    shortest, so that every row is one sample."""
    path = f.filename
    g = _run_group(f, run_id, path)
    out = {"record": analysis_record(run_record(g, run_id, path))}
    for key, name in SERIES_DATASETS.items():
        if name not in g:
            raise UserError(f"{path}: run {run_id} has no dataset '{name}'")
        out[key] = _read(g, name, run_id, path)
    out["exact_euler"] = _read(g, "exact/euler", run_id, path) if "exact/euler" in g else None
    # Present only for a Kovalevskaya top, where it is an invariant.
    kov = KOVALEVSKAYA_DATASET
    out["kovalevskaya"] = _read(g, kov, run_id, path) if kov in g else None
    for key, name in (("euler_turns", TURNS_DATASET), ("exact_turns", EXACT_TURNS_DATASET)):
        out[key] = _read(g, name, run_id, path, np.int64) if name in g else None
    n = min(len(v) for k, v in out.items() if k != "record" and v is not None)
    for k, v in out.items():
        if k != "record" and v is not None:
            out[k] = v[:n]
    return out


def load_series(path, run_id: str) -> dict:
    """read_series of one run, the file opened (and checked) for it."""
    with open_reader(path) as f:
        return read_series(f, run_id)


def existing_status(path, run_id: str, parent: str = RUNS) -> tuple[str | None, int]:
    """(status, samples stored) of a run in a file (under /runs, or under `parent`), (None, 0)
    when the file or run is absent (status None too where the run's group has no status yet).
    Checks the whole file as every reader does; never writes."""
    path = Path(path)
    if not path.exists() and not path.is_symlink():
        return None, 0
    with open_reader(path) as f:
        runs = f.get(parent)
        if runs is None or run_id not in runs:
            return None, 0
        row = run_record(runs[run_id], run_id, path)
        return read_attrs(runs[run_id], run_id, path).get("status"), row["samples_stored"]


def stored_result(path, run_id: str) -> tuple[str, dict, str]:
    """(status, metrics, detail) of a stored run, as `run` reports a run it reuses."""
    with open_reader(path) as f:
        row = run_record(_run_group(f, run_id, path), run_id, path)
    return row["status"], row.get("metrics") or {}, row.get("detail", "") or ""


def complete_ids(f: h5py.File) -> set[str]:
    """Run ids with a final status in an open, checked file (the writer's or a reader's)."""
    return {
        run_id
        for run_id, g in _runs(f, f.filename)
        if read_attrs(g, run_id, f.filename).get("status") in FINAL_STATUSES
    }


def check_run_samples(f: h5py.File, run_id: str, parent: str = RUNS) -> None:
    """A run's checkpoint kinds and its stored samples read through (validate.check_resumable):
    the resume path calls this before it writes anything, so that a damaged chunk refuses the
    resume and leaves the file as it was."""
    path = f.filename
    with damage_is_an_error(path):
        check_resumable(f[parent][run_id], run_id, path)
