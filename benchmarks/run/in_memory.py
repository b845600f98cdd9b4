"""Runs that live in memory: the same runner and store code, writing into an HDF5 file image
instead of a file on disk. Sweep workers return such images to the one process that writes the
results file; `pick` and the regression gate read their metrics and samples straight from them."""

from __future__ import annotations

import io
import json
from dataclasses import dataclass

import h5py

from topdrift.benchmarks.run.runner import RunPlan, execute
from topdrift.benchmarks.store.format import FORMAT, FORMAT_VERSION, attr_str


@dataclass
class MemoryRun:
    run_id: str
    status: str
    metrics: dict
    detail: str
    image: bytes  # a complete topdrift-runs HDF5 file holding this one run

    def open(self) -> h5py.File:
        return h5py.File(io.BytesIO(self.image), "r")


def new_memory_store() -> tuple[h5py.File, io.BytesIO]:
    buf = io.BytesIO()
    f = h5py.File(buf, "w")
    f.attrs["format"] = FORMAT
    f.attrs["format_version"] = FORMAT_VERSION
    f.create_group("runs")
    return f, buf


def run_in_memory(plan: RunPlan) -> MemoryRun:
    """Execute a plan into a fresh in-memory store; never touches the disk."""
    f, buf = new_memory_store()
    try:
        # flush_every is irrelevant in memory; a large value keeps batches large.
        result = execute(plan, f, flush_every=3600.0)
    finally:
        f.close()
    return MemoryRun(result.run_id, result.status, result.metrics, result.detail, buf.getvalue())


def copy_run(image: bytes, run_id: str, dst: h5py.File) -> None:
    """Copy one run from an in-memory image into an open results file.

    The copy is marked `running` until it is complete, so a process killed mid-copy leaves a run
    that no reader takes for finished; an unfinished run of the same id is replaced."""
    with h5py.File(io.BytesIO(image), "r") as src:
        g = src["runs"][run_id]
        final = attr_str(g, "status")
        runs = dst.require_group("runs")
        if run_id in runs:
            del runs[run_id]
        src.copy(g, runs, name=run_id)
    copied = runs[run_id]
    copied.attrs["status"] = "running"
    dst.flush()
    copied.attrs["status"] = final
    dst.flush()


def metrics_of(image: bytes, run_id: str) -> dict:
    with h5py.File(io.BytesIO(image), "r") as src:
        return json.loads(attr_str(src["runs"][run_id], "metrics") or "{}")
