"""A small sweep grid shared by the sweep tests (local pool, Dask, killed client), and the helpers
that compare the runs of two results files dataset by dataset, byte for byte."""

from __future__ import annotations

import hashlib
import json
import re
from pathlib import Path

import h5py
from tiny_cases import ASYMMETRIC, top_toml

SYM_TOML = top_toml(
    "grid-top", "a heavy symmetric top for the sweep tests", horizon=1.0, samples=11
)

# Three different moments and the centre of mass on axis 3: no Euler form, no exact solution.
ASYM_TOML = top_toml(
    "grid-asym",
    "an asymmetric heavy top for the sweep tests",
    horizon=1.0,
    samples=11,
    inertia=ASYMMETRIC,
)

# 2 cases x 3 methods x 2 settings; leapfrog asked for in both forms, so that its Euler-form
# points on the asymmetric body are grid points the method cannot run. The steps are small
# enough that the fixed-step runs take a noticeable fraction of a second each, so that a kill
# lands while runs are still in flight.
SWEEP_TOML = """
name = "grid"
description = "two tops, three methods, two settings each"
cases = ["sym.toml", "asym.toml"]
methods = ["leapfrog", "rk4", "dop853"]
horizon = 1.5
samples = 16
steps = [1e-5, 5e-6]
rtols = [1e-7, 1e-10]

[method.leapfrog]
forms = ["euler", "body"]
steps = [4e-6, 2e-6]
"""

# Runs of the grid: symmetric top 2 forms x 2 + 2 + 2 = 8, asymmetric 2 + 2 + 2 = 6.
N_RUNS = 14
N_SKIPPED = 2  # leapfrog in the Euler form on the asymmetric body, two steps


def write_grid(folder: Path) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "sym.toml").write_text(SYM_TOML)
    (folder / "asym.toml").write_text(ASYM_TOML)
    sweep = folder / "grid.toml"
    sweep.write_text(SWEEP_TOML)
    return sweep


def run_datasets(path: Path) -> dict[str, dict]:
    """run id -> {status, datasets: {name: (dtype, shape, sha256 of the bytes)}} for every run,
    checkpoint included (a resumed run must match there too)."""
    out = {}
    with h5py.File(path, "r", locking=False) as f:
        for rid, g in f["runs"].items():
            ds = {}

            def visit(name, obj, ds=ds):
                if isinstance(obj, h5py.Dataset):
                    data = obj[()]
                    digest = hashlib.sha256(data.tobytes()).digest()
                    ds[name] = (str(data.dtype), data.shape, digest)

            g.visititems(visit)
            a = g.attrs
            out[rid] = {
                "status": a["status"],
                "case": a["case"],
                "method": a["method"],
                "form": a["form"],
                "settings": json.loads(a["settings"]),
                "datasets": ds,
            }
    return out


def same_datasets(a: dict, b: dict) -> None:
    """Assert that two run_datasets() results hold the same runs with the same bytes."""
    assert sorted(a) == sorted(b)
    for rid in a:
        assert a[rid]["datasets"] == b[rid]["datasets"], rid
        assert a[rid]["status"] == b[rid]["status"], rid


PROGRESS = re.compile(r"^\[(\d+)/(\d+)\] ")

_REFERENCE: dict = {}


def reference_sweep(tmp_path_factory) -> tuple[Path, Path, dict]:
    """(sweep file, results file, run_datasets) of the grid swept once, in this process, with
    one job: the reference every other sweep is compared with. Made once per test session."""
    if not _REFERENCE:
        from topdrift.benchmarks.cli import entry as cli

        folder = tmp_path_factory.mktemp("grid")
        grid = write_grid(folder)
        out = folder / "reference.h5"
        assert cli.main(["sweep", str(grid), "--out", str(out), "--jobs", "1"]) == 0
        _REFERENCE["value"] = (grid, out, run_datasets(out))
    return _REFERENCE["value"]
