"""Replacing a stored run without losing it: `run --force` computes the new run under
/replacing/<run_id>, beside the stored /runs/<run_id>, and moves it into /runs only once it is
complete (a final status). Until then the stored run is not touched, so a --force stopped by a
signal, a full disk or a kill leaves it bit for bit as it was.

The unfinished replacement stays in /replacing (with its checkpoint, as any run) until the next
`run` of the same id: `--resume` continues it and then replaces the stored run, `--force`
starts it again, and a plain `run` reuses the stored run and says that the replacement is
waiting. Readers of runs (summary, plot, report, sweeps) look at /runs only.
"""

from __future__ import annotations

import h5py

from topdrift.benchmarks.store.format import REPLACING, RUNS


def swap_in(f: h5py.File, run_id: str) -> None:
    """Move the complete replacement /replacing/<run_id> over /runs/<run_id> (one flush: HDF5
    link operations, no data is copied), and drop /replacing once it is empty."""
    runs = f.require_group(RUNS)
    if run_id in runs:
        del runs[run_id]
    f.move(f"{REPLACING}/{run_id}", f"{RUNS}/{run_id}")
    if len(f[REPLACING]) == 0:
        del f[REPLACING]
    f.flush()


def waiting(f: h5py.File) -> list[str]:
    """Run ids with an unfinished replacement in an open store."""
    group = f.get(REPLACING)
    return sorted(group.keys()) if isinstance(group, h5py.Group) else []
