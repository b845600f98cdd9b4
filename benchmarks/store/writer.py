"""The HDF5 run store, format "topdrift-runs" version 1 (the layout is documented in README.md,
section "Run store (HDF5)", and is a contract: change it only with a version bump).

One process writes a file (HDF5's own file lock refuses a second writer). A run's samples are
appended in batches; between batches the file is not touched, and every batch ends with the
checkpoint and a flush, so a run killed at any moment leaves a readable file holding every sample
up to its last checkpoint, and the checkpoint to go on from.
"""

from __future__ import annotations

import json
from datetime import UTC, datetime
from pathlib import Path

import h5py
import numpy as np

from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.store.checkpoint import read_checkpoint, write_checkpoint

FORMAT = "topdrift-runs"
FORMAT_VERSION = 1
DEFAULT_FILE = Path("results") / "runs.h5"

STATUSES = ("running", "ok", "diverged", "singular", "interrupted", "failed")
FINAL_STATUSES = ("ok", "diverged", "singular", "failed")

# Sample datasets: path inside the run group -> number of columns (0: one value per sample).
SAMPLE_DATASETS = {
    "t": 0,
    "euler": 3,
    "quaternion": 4,
    "momentum": 3,
    "invariants/energy": 0,
    "invariants/p_phi": 0,
    "invariants/p_psi": 0,
    "invariants/norm": 0,
}
EXACT_DATASETS = {"exact/euler": 3, "exact/axis": 3}
CHUNK_ROWS = 4096
# gzip is in every HDF5 build (lzf is h5py's own); level 1 with shuffle costs little time.
_COMPRESSION = {"compression": "gzip", "compression_opts": 1, "shuffle": True}


def _open(path: Path, mode: str) -> h5py.File:
    try:
        return h5py.File(path, mode)
    except BlockingIOError:
        raise UserError(f"{path}: another process is writing this file") from None
    except OSError as exc:
        if "lock" in str(exc).lower():
            raise UserError(f"{path}: another process is writing this file") from None
        raise UserError(f"{path}: not a readable HDF5 file ({exc})") from None


def _check_format(f: h5py.File, path: Path) -> None:
    fmt = f.attrs.get("format")
    if isinstance(fmt, bytes):
        fmt = fmt.decode()
    if fmt != FORMAT:
        raise UserError(f"{path}: not a topdrift run store (format attribute is {fmt!r})")
    ver = int(f.attrs.get("format_version", -1))
    if ver != FORMAT_VERSION:
        raise UserError(
            f"{path}: run store format_version {ver}; this topdrift reads version {FORMAT_VERSION}"
        )


class damage_is_an_error:
    """Context manager: an HDF5 read or write that fails inside it (the file is cut short or has
    overwritten bytes; HDF5 notices only where it reads) becomes one UserError line naming the
    file. h5py reports such failures as OSError, some as RuntimeError or KeyError."""

    def __init__(self, path):
        self.path = path

    def __enter__(self):
        return self

    def __exit__(self, kind, exc, _tb):
        # h5py raises KeyError for an object whose header it cannot read ("bad object header").
        if kind is not None and issubclass(kind, (OSError, RuntimeError, KeyError)):
            text = str(exc).splitlines()[0] if str(exc) else kind.__name__
            raise UserError(f"{self.path}: damaged or unreadable HDF5 file ({text})") from None
        return False


def is_write_failure(exc: BaseException) -> bool:
    """An OSError, or h5py's RuntimeError for a failed write during a flush or close ('file write
    failed ... errno = 27')."""
    if isinstance(exc, OSError):
        return True
    text = str(exc)
    return isinstance(exc, RuntimeError) and ("write failed" in text or "errno =" in text)


def write_reason(exc: BaseException) -> str:
    """The words of the errno behind a failed write where there is one, else its first line."""
    import errno
    import os

    for code in (errno.ENOSPC, errno.EFBIG, errno.EDQUOT, errno.EROFS, errno.EIO):
        if getattr(exc, "errno", None) == code or os.strerror(code) in str(exc):
            return os.strerror(code)
    text = getattr(exc, "strerror", None) or str(exc) or type(exc).__name__
    return text.splitlines()[0]


def close_after_failure(f: h5py.File) -> None:
    """Close a file whose writes fail. HDF5's close flushes again and fails for the same reason,
    and h5py reports that, and every later release of an object of that file (the frames of the
    failed write hold some), from destructors as 'Exception ignored' noise on stderr. The
    one-line error the caller raises is the one that counts, and the process is about to end
    with it, so such destructor reports stay silenced from here on."""
    import gc
    import sys

    sys.unraisablehook = lambda _info: None
    try:
        f.close()
    except (OSError, RuntimeError):
        pass
    gc.collect()


# Room kept free beyond the next write's own bytes, for HDF5's bookkeeping (B-tree nodes, object
# headers, the free-space list) written at the same flush. Measured: a flush of one batch adds a
# few kB of metadata; 256 kB leaves a wide margin.
ROOM_MARGIN = 256 * 1024


class NoRoom(UserError):
    """The disk (or the process's file-size limit) has no room for the next write. Raised
    before writing, because HDF5 does not survive a failed write: it reports some failures only
    from object destructors, keeps going on a half-written file and can crash the process."""


def room_left(f: h5py.File) -> float:
    """Bytes the open file may still grow by: the free space of its file system for this user
    and the room under RLIMIT_FSIZE (emulated full disks, batch systems), whichever is smaller.
    Infinite for an in-memory file."""
    import os
    import resource

    if f.driver != "sec2" and f.driver != "stdio":
        return float("inf")
    path = f.filename
    st = os.statvfs(os.path.dirname(os.path.abspath(path)) or ".")
    left = float(st.f_bavail) * st.f_frsize
    soft, _ = resource.getrlimit(resource.RLIMIT_FSIZE)
    if soft != resource.RLIM_INFINITY:
        left = min(left, float(soft) - f.id.get_filesize())
    return left


def ensure_room(f: h5py.File, nbytes: float, what: str) -> None:
    """Raise NoRoom unless the file can grow by nbytes plus ROOM_MARGIN."""
    left = room_left(f)
    need = float(nbytes) + ROOM_MARGIN
    if left < need:
        raise NoRoom(
            f"{f.filename}: not enough room for {what}: {max(left, 0.0) / 1e6:.3g} MB left on the "
            f"disk or under the file-size limit, {need / 1e6:.3g} MB needed"
        )


def _attr_str(g, name: str, default=None):
    v = g.attrs.get(name, default)
    return v.decode() if isinstance(v, bytes) else v


def open_reader(path: Path) -> h5py.File:
    """Open a run store read-only, checking its format. Does not take the writer's lock, so that
    a file being written can be read up to its last flush."""
    path = Path(path)
    if not path.is_file():
        raise UserError(f"{path}: no such file")
    try:
        f = h5py.File(path, "r", locking=False)
    except OSError as exc:
        raise UserError(f"{path}: not a readable HDF5 file ({exc})") from None
    try:
        with damage_is_an_error(path):
            _check_format(f, path)
    except UserError:
        f.close()
        raise
    return f


def check_headers(f: h5py.File) -> None:
    """Read every group's and dataset's header and attributes (not the samples), so that a file
    HDF5 cannot fully read is refused before anything is written into it. Raises what h5py
    raises; callers wrap this in damage_is_an_error. Milliseconds for a file of many runs."""

    def visit(_name, obj):
        for key in obj.attrs:
            obj.attrs[key]
        if isinstance(obj, h5py.Dataset):
            _ = obj.shape

    for key in f.attrs:
        f.attrs[key]
    f.visititems(visit)


def existing_status(path: Path, run_id: str) -> tuple[str | None, int]:
    """(status, samples stored) of a run in a file, (None, 0) when the file or run is absent.
    Raises UserError when the file exists but is not a run store; never writes."""
    path = Path(path)
    if path.is_dir():
        raise UserError(f"{path}: is a directory, not a results file")
    if not path.exists():
        return None, 0
    with open_reader(path) as f, damage_is_an_error(path):
        check_headers(f)
        g = f.get(f"runs/{run_id}")
        if g is None:
            return None, 0
        return _attr_str(g, "status"), int(g["t"].shape[0])


def open_writer(path: Path) -> h5py.File:
    """Open (or create) a run store for writing; results/ and the like are created as needed."""
    path = Path(path)
    if path.exists():
        # HDF5 opens an empty or foreign file in r+ mode and writes a superblock into it: look
        # before opening, so that such a file is refused as it is.
        if path.is_file() and path.stat().st_size == 0:
            raise UserError(f"{path}: empty file, not a topdrift run store; remove it or use --out")
        if path.is_file() and not h5py.is_hdf5(path):
            raise UserError(f"{path}: not a readable HDF5 file (no HDF5 signature)")
        f = _open(path, "r+")
        try:
            with damage_is_an_error(path):
                _check_format(f, path)
                check_headers(f)
        except UserError:
            f.close()
            raise
        return f
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        f = h5py.File(path, "w-")
    except OSError as exc:
        raise UserError(f"{path}: cannot create the results file ({exc})") from None
    f.attrs["format"] = FORMAT
    f.attrs["format_version"] = FORMAT_VERSION
    f.create_group("runs")
    f.flush()
    return f


def utc_now() -> str:
    return datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


class RunGroup:
    """One run's group in an open, writable store."""

    def __init__(self, f: h5py.File, run_id: str):
        self.f = f
        self.run_id = run_id
        self.g = f["runs"][run_id]

    @classmethod
    def create(
        cls,
        f: h5py.File,
        run_id: str,
        attrs: dict,
        state_width: int,
        has_exact: bool,
        samples: int,
    ) -> RunGroup:
        ensure_room(f, 64 * 1024, f"run {run_id}")
        runs = f["runs"]
        if run_id in runs:
            del runs[run_id]
        g = runs.create_group(run_id)
        for k, v in attrs.items():
            g.attrs[k] = v
        g.attrs["status"] = "running"
        g.attrs["metrics"] = "{}"
        cols = dict(SAMPLE_DATASETS)
        cols["state"] = state_width
        if has_exact:
            cols.update(EXACT_DATASETS)
        rows = max(1, min(CHUNK_ROWS, int(samples)))  # a short run needs no 4096-row chunk
        for name, k in cols.items():
            shape = (0,) if k == 0 else (0, k)
            maxshape = (None,) if k == 0 else (None, k)
            chunks = (rows,) if k == 0 else (rows, k)
            g.create_dataset(
                name, shape=shape, maxshape=maxshape, chunks=chunks, dtype="f8", **_COMPRESSION
            )
        f.flush()
        return cls(f, run_id)

    @property
    def status(self) -> str:
        return _attr_str(self.g, "status")

    @property
    def n_stored(self) -> int:
        return int(self.g["t"].shape[0])

    @property
    def has_exact(self) -> bool:
        return "exact" in self.g

    def append(self, batch: dict[str, np.ndarray]) -> None:
        """Append rows to every sample dataset; batch holds one array per dataset name."""
        n0 = self.n_stored
        m = None
        for name, rows in batch.items():
            ds = self.g[name]
            m = rows.shape[0]
            ds.resize(n0 + m, axis=0)
            ds[n0 : n0 + m] = rows
        if m is None:
            return

    def datasets(self) -> dict:
        """The run's sample datasets present in its group, by name."""
        names = list(SAMPLE_DATASETS) + ["state"] + list(EXACT_DATASETS)
        return {name: self.g[name] for name in names if name in self.g}

    def truncate(self, n: int) -> None:
        """Drop samples beyond n (written after the last checkpoint, if any)."""
        for name in list(SAMPLE_DATASETS) + ["state"] + list(EXACT_DATASETS):
            if name in self.g and self.g[name].shape[0] > n:
                self.g[name].resize(n, axis=0)

    def write_checkpoint(self, parts: dict[str, dict]) -> None:
        """Replace the checkpoint: parts maps a subgroup name to its entries (numbers and
        float64/int64 arrays only, see store/checkpoint.py)."""
        write_checkpoint(self.g, parts)

    def read_checkpoint(self, template: dict[str, dict]) -> dict[str, dict] | None:
        """The checkpoint, read as template says it must be (store/checkpoint.py); None when
        there is none. Raises CheckpointRefused (one line naming the run and the entry)."""
        return read_checkpoint(self.g, template, self.run_id)

    def set(self, **attrs) -> None:
        for k, v in attrs.items():
            self.g.attrs[k] = v

    def set_metrics(self, metrics: dict) -> None:
        self.g.attrs["metrics"] = json.dumps(metrics)

    def attr(self, name: str, default=None):
        return _attr_str(self.g, name, default)

    def flush(self) -> None:
        self.f.flush()


def list_runs(f: h5py.File) -> list[dict]:
    """Every run's attributes (JSON ones decoded) and sample count, in creation order."""
    out = []
    runs = f.get("runs")
    if runs is None:
        return out
    for run_id, g in runs.items():
        if g is None:  # h5py gives None for a link whose object header cannot be read
            raise OSError(f"the group of run {run_id} cannot be opened")
        row = {"run_id": run_id}
        for k in g.attrs:
            v = _attr_str(g, k)
            if k in ("settings", "metrics", "versions"):
                try:
                    v = json.loads(v)
                except (TypeError, ValueError):
                    pass
            elif isinstance(v, np.generic):
                v = v.item()
            row[k] = v
        row["samples_stored"] = int(g["t"].shape[0]) if "t" in g else 0
        out.append(row)
    out.sort(key=lambda r: (str(r.get("created", "")), r["run_id"]))
    return out
