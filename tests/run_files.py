"""Reading back what runs wrote, for the tests that compare two runs byte for byte or take a
snapshot through HDF5, and the command line in a fresh process (the way a user or a CI job runs
it)."""

from __future__ import annotations

import hashlib
import subprocess
import sys

import h5py
import numpy as np


def topdrift_cmd(*args: str) -> list[str]:
    """The argument vector of `topdrift ARGS` run by this Python."""
    return [sys.executable, "-m", "topdrift.benchmarks.cli.entry", *args]


def topdrift_process(*args: str, **kw) -> subprocess.Popen:
    """`topdrift ARGS` started in a fresh process, its output as text pipes."""
    return subprocess.Popen(
        topdrift_cmd(*args), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, **kw
    )


def dataset_hashes(path, run_id: str | None = None, *, checkpoint: bool = False) -> dict:
    """SHA-256 (hex) of the bytes of every dataset of one run (run_id), or of the whole file
    (None); a run's checkpoint is left out unless asked for."""
    out = {}
    with h5py.File(path, "r") as f:
        g = f if run_id is None else f["runs"][run_id]

        def visit(name, obj):
            if not isinstance(obj, h5py.Dataset):
                return
            if run_id is not None and not checkpoint and name.startswith("checkpoint"):
                return
            out[name] = hashlib.sha256(obj[()].tobytes()).hexdigest()

        g.visititems(visit)
    return out


def through_hdf5(snap: dict) -> dict:
    """A stepper snapshot stored as datasets and attributes of an in-memory HDF5 file and read
    back, as a checkpoint holds it: a snapshot must be plain numbers, strings and arrays."""
    with h5py.File("snapshot.h5", "w", driver="core", backing_store=False) as f:
        g = f.create_group("snap")
        for k, v in snap.items():
            if isinstance(v, np.ndarray):
                g.create_dataset(k, data=v)
            else:
                g.attrs[k] = v
        out = {k: ds[()] for k, ds in g.items()}
        for k, v in g.attrs.items():
            out[k] = v.decode() if isinstance(v, bytes) else v
    return out
