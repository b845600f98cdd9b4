"""The one writer of run files (format "topdrift-runs" version 2: the names are in format.py,
the layout in docs/run-files.md, and it is a contract: change it only with a version bump).

A new file is version 2. A run added to a version-1 file (a resume, or a new run in an old
file) is written in version 1's layout, without the turn datasets, so that a file never mixes
the two: its format_version says what every run in it holds.

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
from topdrift.benchmarks.store.failures import ensure_room
from topdrift.benchmarks.store.format import (
    CHECKPOINT_UNITS,
    CHUNK_ROWS,
    COMPRESSION,
    EXACT_DATASETS,
    FIRST_VERSION_WITH_TURNS,
    FORMAT,
    FORMAT_VERSION,
    KOVALEVSKAYA_DATASET,
    OPTIONAL_DATASETS,
    RUNS,
    SAMPLE_DATASETS,
    STATE_DATASET,
    STATE_UNITS,
    TURN_DATASETS,
    TURNS_DATASET,
    UNITS,
    UNITS_ATTR,
    attr_str,
    busy,
    cannot_open,
    first_line,
)
from topdrift.benchmarks.store.reader import check_open_file, open_reader


def open_writer(path: Path) -> h5py.File:
    """Open (or create) a run file for writing; results/ and the like are created as needed.

    An existing file passes the reader's checks (reader.open_reader: the path, then
    validate.check_file: links, layout, every header) on a read-only open first, because HDF5
    writes into a file it merely opens for writing (a superblock into an empty or foreign file,
    the root group's cached entry into others), so that a foreign, damaged or linking file is
    refused as it is; then again with the writer's lock held, before anything is written."""
    path = Path(path)
    if path.exists() or path.is_symlink():
        with open_reader(path):
            pass
        try:
            f = h5py.File(path, "r+")
        except BlockingIOError:
            raise busy(path) from None
        except OSError as exc:
            if "lock" in str(exc).lower():
                raise busy(path) from None
            raise cannot_open(path, first_line(exc)) from None
        try:
            check_open_file(f, path)
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
    """One run's group in an open, writable store (under /runs, or under `parent`)."""

    def __init__(self, f: h5py.File, run_id: str, parent: str = RUNS):
        self.f = f
        self.run_id = run_id
        self.parent = parent
        self.g = f[parent][run_id]

    @classmethod
    def create(
        cls,
        f: h5py.File,
        run_id: str,
        attrs: dict,
        state_width: int,
        has_exact: bool,
        samples: int,
        kovalevskaya: bool = False,
        parent: str = RUNS,
        euler_form: bool = False,
    ) -> RunGroup:
        """A new, empty group for the run, replacing one of the same id under `parent`. In a
        version-2 file an Euler-form run (euler_form) gets the samples' turn counts and a run
        with an exact reference the reference's."""
        ensure_room(f, 64 * 1024, f"run {run_id}")
        runs = f.require_group(parent)
        if run_id in runs:
            del runs[run_id]
        g = runs.create_group(run_id)
        for k, v in attrs.items():
            g.attrs[k] = v
        g.attrs["status"] = "running"
        g.attrs["metrics"] = "{}"
        cols = dict(SAMPLE_DATASETS)
        cols[STATE_DATASET] = state_width
        if has_exact:
            cols.update(EXACT_DATASETS)
        if kovalevskaya:  # Kovalevskaya's integral, an invariant of such a top only
            cols[KOVALEVSKAYA_DATASET] = 0
        rows = max(1, min(CHUNK_ROWS, int(samples)))  # a short run needs no 4096-row chunk
        group = cls(f, run_id, parent)
        group.add_datasets({name: () if k == 0 else (k,) for name, k in cols.items()}, rows)
        if group.keeps_turns:
            turns = {n: (k,) for n, k in TURN_DATASETS.items() if n != TURNS_DATASET or euler_form}
            if not has_exact:
                turns = {n: k for n, k in turns.items() if not n.startswith("exact/")}
            group.add_datasets(turns, rows, dtype="i8")
        f.flush()
        return group

    def add_datasets(
        self, rows: dict[str, tuple[int, ...]], chunk_rows: int, dtype: str = "f8"
    ) -> None:
        """Sample datasets that grow by one row a sample: path in the group -> shape of one
        row, chunked by chunk_rows samples and compressed like every sample dataset."""
        for name, shape in rows.items():
            ds = self.g.create_dataset(
                name,
                shape=(0, *shape),
                maxshape=(None, *shape),
                chunks=(chunk_rows, *shape),
                dtype=dtype,
                **COMPRESSION,
            )
            if self.keeps_turns:  # version 2: every dataset says its units
                ds.attrs[UNITS_ATTR] = self.units_of(name)

    def units_of(self, name: str) -> str:
        """The `units` attribute of a sample dataset of this run (format.UNITS)."""
        if name == STATE_DATASET:
            return STATE_UNITS[attr_str(self.g, "form")]
        return UNITS[name]

    @property
    def version(self) -> int:
        """The file's format_version (checked when it was opened)."""
        return int(self.f.attrs["format_version"])

    @property
    def keeps_turns(self) -> bool:
        """Whether runs of this file store turn counts and units (version 2 and later)."""
        return self.version >= FIRST_VERSION_WITH_TURNS

    @property
    def status(self) -> str:
        return attr_str(self.g, "status")

    @property
    def n_stored(self) -> int:
        return int(self.g["t"].shape[0])

    @property
    def has_exact(self) -> bool:
        return "exact" in self.g

    def append(self, batch: dict[str, np.ndarray]) -> None:
        """Append rows to every sample dataset; batch holds one array per dataset name. Turn
        counts are left out where the run has no dataset for them (a version-1 file, a
        body-form run)."""
        n0 = self.n_stored
        m = None
        for name, rows in batch.items():
            if name in TURN_DATASETS and name not in self.g:
                continue
            ds = self.g[name]
            m = rows.shape[0]
            ds.resize(n0 + m, axis=0)
            ds[n0 : n0 + m] = rows
        if m is None:
            return

    def datasets(self) -> dict:
        """The run's sample datasets present in its group, by name."""
        names = [
            *SAMPLE_DATASETS,
            STATE_DATASET,
            *EXACT_DATASETS,
            *OPTIONAL_DATASETS,
            *TURN_DATASETS,
        ]
        return {name: self.g[name] for name in names if name in self.g}

    def truncate(self, n: int) -> None:
        """Drop samples beyond n (written after the last checkpoint, if any)."""
        for name in self.datasets():
            if self.g[name].shape[0] > n:
                self.g[name].resize(n, axis=0)

    def write_checkpoint(self, parts: dict[str, dict]) -> None:
        """Replace the checkpoint: parts maps a subgroup name to its entries (numbers, text and
        float64/int64 arrays only, see store/checkpoint.py)."""
        write_checkpoint(self.g, parts, CHECKPOINT_UNITS if self.keeps_turns else None)

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
        return attr_str(self.g, name, default)

    def flush(self) -> None:
        self.f.flush()
