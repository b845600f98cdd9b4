"""The same run in two fresh processes gives the same bytes in every dataset (samples, exact
solution, checkpoint), for a fixed-step, an adaptive and a Gauss-Legendre method; each run records
the library versions and the machine's CPU."""

from __future__ import annotations

import json
import subprocess

import h5py
import pytest
from run_files import dataset_hashes, topdrift_cmd
from tiny_cases import TOP_TOML, write_case

METHODS = {
    "rk4": ["--method", "rk4", "--step", "0.001", "--form", "body"],
    "dop853": ["--method", "dop853", "--rtol", "1e-10"],
    "gauss4": ["--method", "gauss4", "--step", "0.002"],
}
# Attributes that say when and how fast a run went, not what it computed.
TIMING_ATTRS = {"created"}
TIMING_METRICS = {"wall_s", "cpu_s", "ns_per_step", "ns_per_step_cpu"}


def attrs_of(path) -> dict:
    with h5py.File(path, "r") as f:
        (g,) = f["runs"].values()
        return {k: (v.decode() if isinstance(v, bytes) else v) for k, v in g.attrs.items()}


@pytest.fixture(scope="module")
def pairs(tmp_path_factory):
    d = tmp_path_factory.mktemp("twice")
    case = write_case(d, "top.toml", TOP_TOML)
    procs = {}
    for method, opts in METHODS.items():
        for k in (1, 2):
            out = d / f"{method}-{k}.h5"
            cmd = topdrift_cmd("run", str(case), *opts)
            procs[(method, k)] = (
                subprocess.Popen([*cmd, "--out", str(out)], stderr=subprocess.PIPE),
                out,
            )
    for proc, _ in procs.values():
        _, err = proc.communicate(timeout=120)
        assert proc.returncode == 0, err.decode()
    return {key: out for key, (_, out) in procs.items()}


@pytest.mark.parametrize("method", list(METHODS))
def test_two_processes_write_the_same_dataset_bytes(pairs, method):
    a, b = dataset_hashes(pairs[(method, 1)]), dataset_hashes(pairs[(method, 2)])
    (run_id,) = {name.split("/")[1] for name in a}
    names = {n.split(f"runs/{run_id}/", 1)[1] for n in a}
    assert {"t", "state", "euler", "quaternion", "momentum", "invariants/energy"} <= names
    assert {"exact/euler", "exact/axis", "checkpoint/run/y", "checkpoint/run/counters"} <= names
    assert a == b


@pytest.mark.parametrize("method", list(METHODS))
def test_two_processes_record_the_same_run_apart_from_its_timing(pairs, method):
    a, b = attrs_of(pairs[(method, 1)]), attrs_of(pairs[(method, 2)])
    ma, mb = json.loads(a.pop("metrics")), json.loads(b.pop("metrics"))
    for k in TIMING_ATTRS:
        a.pop(k), b.pop(k)
    assert a == b
    for k in TIMING_METRICS:
        ma.pop(k, None), mb.pop(k, None)
    assert ma == mb


def test_runs_record_versions_and_cpu(pairs):
    versions = json.loads(attrs_of(pairs[("rk4", 1)])["versions"])
    assert {"python", "topdrift", "numpy", "scipy", "numba", "h5py", "cpu"} <= set(versions)
    import numba
    import numpy

    assert versions["numpy"] == numpy.__version__ and versions["numba"] == numba.__version__
    assert isinstance(versions["cpu"], str) and versions["cpu"].strip()
