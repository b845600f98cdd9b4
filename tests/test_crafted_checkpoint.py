"""A run file is data: a crafted checkpoint never runs code and never gets past the reader.

For each family that writes a checkpoint (explicit RK, adaptive RK, splitting and its variable-
step twins, Gauss-Legendre, the scipy references that resume), an interrupted run's checkpoint
is replaced by what a hostile or careless sender could put there: a pickle (as bytes in a
dataset, inside a field, as an opaque attribute), an object dtype, a huge or mis-shaped array,
NaN, a wrong dtype, a missing field, a link out of the group, or the snapshot of another method
or setting. `topdrift run --resume` on it exits 2 with one line naming the run and the entry,
leaves the file byte for byte as it was, creates nothing (the pickle's payload would touch a
sentinel file), and a clean copy of the same file still resumes. LSODA (never resumed from a
file), an ensemble run (keeps no checkpoint) and a sweep (runs unfinished runs again, never
resumes them) do not read the crafted checkpoint at all: they run again from the start, and the
payload stays inert.

The payload is pickle's documented behaviour (the Python docs, pickle module: "it is possible to
construct malicious pickle data which will execute arbitrary code during unpickling");
test_the_payload_is_live shows this one works, so that its absence elsewhere means something.
"""

from __future__ import annotations

import json
import os
import pickle
import shlex
import shutil
import subprocess
import sys

import h5py
import numpy as np
import pytest
from run_files import dataset_hashes
from tiny_cases import TOP_TOML
from tiny_cases import write_case as write

from topdrift.benchmarks.cases.schema import parse_case
from topdrift.benchmarks.cli import entry as cli
from topdrift.benchmarks.run.runner import StopFlag, execute, plan_run
from topdrift.benchmarks.store.writer import open_writer

STOP_AT = 5  # samples done when the run is interrupted (of 11)

# One method per family that resumes from its checkpoint, with a second run whose snapshot is
# of the same family but another method or setting (the same state shapes where possible, so
# that only the identity checks can tell them apart).
FAMILIES = {
    "explicit-rk": (("rk4", {"step": 0.01}), ("rk4-kahan", {"step": 0.01})),
    "adaptive-rk": (("dop853", {"rtol": 1e-8}), ("dop853", {"rtol": 1e-7})),
    "splitting": (("leapfrog", {"step": 0.01}), ("leapfrog-s4", {"step": 0.01})),
    "splitting-variable-step": (
        ("leapfrog-sundman", {"step": 0.01}),
        ("leapfrog-s4-sundman", {"step": 0.01}),
    ),
    "gauss-legendre": (("gauss4", {"step": 0.01}), ("gauss4", {"step": 0.005})),
    "first-order-engine": (
        ("engine-semi-implicit", {"step": 0.01}),
        ("engine-implicit-gyro", {"step": 0.01}),
    ),
    "taylor": (("taylor-adaptive", {"rtol": 1e-8}), ("taylor-adaptive", {"rtol": 1e-7})),
    "extrapolation": (("gbs", {"rtol": 1e-8}), ("gbs", {"rtol": 1e-7})),
    "lie-group-rk": (("lie-rkmk4", {"step": 0.01}), ("lie-cf4", {"step": 0.01})),
    "constrained": (("rattle", {"step": 0.01}), ("rattle", {"step": 0.005})),
    "generalized-alpha": (("lie-galpha", {"step": 0.01}), ("lie-galpha-undamped", {"step": 0.01})),
    "scipy-rk45": (("scipy-rk45", {"rtol": 1e-6}), ("scipy-rk45", {"rtol": 1e-7})),
    "scipy-dop853": (("scipy-dop853", {"rtol": 1e-6}), ("scipy-rk45", {"rtol": 1e-6})),
    "scipy-radau": (("scipy-radau", {"rtol": 1e-6}), ("scipy-radau", {"rtol": 1e-7})),
}


def cli_opts(method: str, settings: dict) -> list[str]:
    out = ["--method", method]
    for key, value in settings.items():
        out += [f"--{key}", repr(value)]
    return out


class _Payload:
    """Unpickling this calls os.system: the attack the issue measured."""

    def __init__(self, path):
        self.path = path

    def __reduce__(self):
        return (os.system, (f"touch {shlex.quote(str(self.path))}",))


class _StopAt:
    """A progress stand-in that asks the run to stop once it holds k samples."""

    def __init__(self, stop: StopFlag, k: int):
        self.stop, self.k = stop, k

    def begin(self, *_):
        pass

    def flushed(self, *_):
        pass

    def end(self, *_):
        pass

    def update(self, k, _steps):
        if k >= self.k:
            self.stop.signum = 2


def interrupted_run(folder, case_path, method: str, settings: dict):
    """A results file holding one run of the case stopped after STOP_AT samples."""
    case = parse_case(case_path.read_text(), str(case_path))
    plan = plan_run(case, method, **settings)
    out = folder / f"{method}-{'-'.join(f'{k}{v}' for k, v in settings.items())}.h5"
    stop = StopFlag()
    f = open_writer(out)
    try:
        r = execute(plan, f, stop=stop, progress=_StopAt(stop, STOP_AT), flush_every=0.0)
    finally:
        f.close()
    assert r.status == "interrupted"
    return out, plan.run_id


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """Per family: (the case, the interrupted run's file and id, the other run's file and id)."""
    d = tmp_path_factory.mktemp("interrupted")
    case = write(d, "top.toml", TOP_TOML)
    out = {}
    for family, ((m, s), (m2, s2)) in FAMILIES.items():
        path, rid = interrupted_run(d, case, m, s)
        other, rid2 = interrupted_run(d, case, m2, s2)
        out[family] = (case, path, rid, other, rid2)
    return out


# ------------------------------------------------------------------------------ the attacks


def _replace(g, name, **kw):
    del g[name]
    g.create_dataset(name, **kw)


def pickle_dataset(cp, blob, **_):
    # Where the scipy references kept their pickled solver before.
    if "solver_state" in cp["stepper"]:
        del cp["stepper/solver_state"]
    cp["stepper"].create_dataset("solver_state", data=np.frombuffer(blob, dtype=np.uint8))


def pickle_in_field(cp, blob, **_):
    _replace(cp["stepper"], "y", data=np.frombuffer(blob, dtype=np.uint8))


def pickle_opaque_attr(cp, blob, **_):
    cp["stepper"].attrs["t"] = np.void(blob)


def object_dtype(cp, blob, **_):
    vlen = h5py.vlen_dtype(np.dtype(np.uint8))
    ds = np.empty(1, dtype=object)
    ds[0] = np.frombuffer(blob, dtype=np.uint8)
    _replace(cp["stepper"], "y", data=ds, dtype=vlen)


def string_attr(cp, blob, **_):
    cp["run"].attrs["sample"] = blob.decode("ascii")


def huge_array(cp, **_):
    # 10^12 float64 declared, nothing stored: 8 TB if anything tried to read it.
    n = 10**12
    _replace(cp["stepper"], "y", shape=(n,), dtype="f8", chunks=(4096,))


def mis_shaped(cp, **_):
    y = cp["stepper/y"][()]
    _replace(cp["stepper"], "y", data=np.append(y, 0.0))


def nan_in_state(cp, **_):
    y = cp["stepper/y"][()]
    y[1] = np.nan
    cp["stepper/y"][...] = y


def nan_in_metrics(cp, **_):
    cp["metrics"].attrs["e_scale"] = np.nan


def wrong_dtype(cp, **_):
    c = cp["stepper/counters"][()]
    _replace(cp["stepper"], "counters", data=c.astype(np.float64))


def wrong_float_width(cp, **_):
    y = cp["stepper/y"][()]
    _replace(cp["stepper"], "y", data=y.astype(np.float32))


def missing_field(cp, **_):
    del cp["stepper/counters"]


def missing_part(cp, **_):
    del cp["metrics"]


def sample_out_of_range(cp, **_):
    cp["run"].attrs["sample"] = np.int64(10**9)


def soft_link(cp, **_):
    del cp["stepper"]
    cp["stepper"] = h5py.SoftLink("/runs")


def external_link(cp, other, other_id, **_):
    del cp["stepper"]
    cp["stepper"] = h5py.ExternalLink(str(other), f"/runs/{other_id}/checkpoint/stepper")


def other_snapshot(cp, other, other_id, **_):
    # The whole checkpoint of the other run, stopped at the same sample: only the stepper's
    # identity (method, setting) tells it apart.
    run = cp.parent
    del run["checkpoint"]
    with h5py.File(other, "r") as src:
        src.copy(src[f"runs/{other_id}/checkpoint"], run, name="checkpoint")


ATTACKS = {
    "pickle-dataset": (pickle_dataset, "solver_state"),
    "pickle-in-field": (pickle_in_field, "stepper/y"),
    "pickle-opaque-attr": (pickle_opaque_attr, "stepper/t"),
    "object-dtype": (object_dtype, "stepper/y"),
    "string-attr": (string_attr, "run/sample"),
    "huge-array": (huge_array, "stepper/y"),
    "mis-shaped": (mis_shaped, "stepper/y"),
    "nan-in-state": (nan_in_state, "'y' is not finite"),
    "nan-in-metrics": (nan_in_metrics, "e_scale"),
    "wrong-dtype": (wrong_dtype, "stepper/counters"),
    "wrong-float-width": (wrong_float_width, "stepper/y"),
    "missing-field": (missing_field, "stepper/counters"),
    "missing-part": (missing_part, "metrics"),
    "sample-out-of-range": (sample_out_of_range, "run/sample"),
    # Links are refused by the file checks before any checkpoint is read (store/validate.py).
    "soft-link": (soft_link, "soft link"),
    "external-link": (external_link, "external link"),
    # Refused by the stepper's identity check, or by the reader when the layouts differ.
    "other-snapshot": (other_snapshot, "snapshot is of|made with other|stepper/"),
}


@pytest.fixture(scope="module")
def blob(tmp_path_factory):
    d = tmp_path_factory.mktemp("payload")
    # Protocol 0 is ASCII: the same payload also fits in a string attribute.
    return pickle.dumps(_Payload(d / "sentinel"), protocol=0), d / "sentinel"


def test_the_payload_is_live(tmp_path, blob):
    data, sentinel = blob
    (tmp_path / "blob.pkl").write_bytes(data)
    code = "import pickle, sys; pickle.loads(open(sys.argv[1], 'rb').read())"
    subprocess.run([sys.executable, "-c", code, str(tmp_path / "blob.pkl")], check=True)
    assert sentinel.exists()
    sentinel.unlink()


def _listing(folder) -> set[str]:
    return {str(p.relative_to(folder)) for p in folder.rglob("*")}


@pytest.mark.parametrize("attack", list(ATTACKS))
@pytest.mark.parametrize("family", list(FAMILIES))
def test_crafted_checkpoint_is_refused_in_one_line(
    tmp_path, monkeypatch, capsys, files, blob, family, attack
):
    case, clean, run_id, other, other_id = files[family]
    data, sentinel = blob
    craft, named = ATTACKS[attack]
    target = tmp_path / "crafted.h5"
    shutil.copy(clean, target)
    with h5py.File(target, "r+") as f:
        craft(f[f"runs/{run_id}/checkpoint"], blob=data, other=other, other_id=other_id)
    before = target.read_bytes()
    listing = _listing(tmp_path)
    other_bytes = other.read_bytes()
    monkeypatch.chdir(tmp_path)  # anything written by a relative path would land here
    (method, settings), _ = FAMILIES[family]
    capsys.readouterr()
    rc = cli.main(["run", str(case), *cli_opts(method, settings), "--out", str(target), "--resume"])
    err = capsys.readouterr().err
    assert rc == 2, err
    assert err.count("\n") == 1 and err.startswith("topdrift: error: "), err
    assert run_id in err and any(words in err for words in named.split("|")), err
    assert "Traceback" not in err
    assert target.read_bytes() == before  # the file is left exactly as it was
    assert other.read_bytes() == other_bytes  # and so is the file a link pointed to
    assert _listing(tmp_path) == listing
    assert not sentinel.exists()


@pytest.mark.parametrize("family", list(FAMILIES))
def test_the_clean_file_still_resumes_to_the_same_bytes(tmp_path, capsys, files, family):
    # The control for the test above: the same file without the crafting resumes, and ends with
    # the bytes of a run never stopped, so the refusals are the crafting's doing.
    case, clean, run_id, _, _ = files[family]
    (method, settings), _ = FAMILIES[family]
    opts = cli_opts(method, settings)
    part = tmp_path / "part.h5"
    shutil.copy(clean, part)
    whole = tmp_path / "whole.h5"
    assert cli.main(["run", str(case), *opts, "--out", str(whole)]) == 0
    assert cli.main(["run", str(case), *opts, "--out", str(part), "--resume"]) == 0
    assert dataset_hashes(part, run_id) == dataset_hashes(whole, run_id)


def test_a_checkpoint_of_another_case_is_refused(tmp_path, capsys, files):
    # The same method, setting, horizon and sample count on another start: the snapshot fits
    # every shape and setting, and only the start's reference values give it away.
    case, clean, run_id, _, _ = files["splitting"]
    other_case = write(tmp_path, "other.toml", TOP_TOML, theta="31 deg")
    other, other_id = interrupted_run(tmp_path, other_case, "leapfrog", {"step": 0.01})
    target = tmp_path / "crafted.h5"
    shutil.copy(clean, target)
    with h5py.File(target, "r+") as f:
        other_snapshot(f[f"runs/{run_id}/checkpoint"], other=other, other_id=other_id)
    before = target.read_bytes()
    capsys.readouterr()
    args = ["run", str(case), "--method", "leapfrog", "--step", "0.01", "--out", str(target)]
    assert cli.main([*args, "--resume"]) == 2
    err = capsys.readouterr().err
    assert "reference values of another start" in err and err.count("\n") == 1, err
    assert target.read_bytes() == before


def _crafted_copy(clean, run_id, target, blob):
    shutil.copy(clean, target)
    with h5py.File(target, "r+") as f:
        pickle_dataset(f[f"runs/{run_id}/checkpoint"], blob=blob)


def test_lsoda_never_reads_its_checkpoint_and_runs_again(tmp_path, monkeypatch, capsys, blob):
    data, sentinel = blob
    case = write(tmp_path, "top.toml", TOP_TOML)
    clean, run_id = interrupted_run(tmp_path, case, "scipy-lsoda", {"rtol": 1e-6})
    target = tmp_path / "crafted.h5"
    _crafted_copy(clean, run_id, target, data)
    monkeypatch.chdir(tmp_path)
    opts = ["--method", "scipy-lsoda", "--rtol", "1e-06"]
    capsys.readouterr()
    assert cli.main(["run", str(case), *opts, "--out", str(target), "--resume"]) == 0
    err = capsys.readouterr().err
    assert "not resumed: scipy's LSODA" in err and "running it again from the start" in err
    assert not sentinel.exists()
    whole = tmp_path / "whole.h5"
    assert cli.main(["run", str(case), *opts, "--out", str(whole)]) == 0
    assert dataset_hashes(target, run_id) == dataset_hashes(whole, run_id)


def test_an_ensemble_run_never_reads_a_checkpoint(tmp_path, monkeypatch, capsys, blob):
    data, sentinel = blob
    case = write(tmp_path, "top.toml", TOP_TOML)
    out = tmp_path / "ens.h5"
    args = ["run", str(case), "--method", "leapfrog", "--step", "0.01", "--ensemble", "4"]
    assert cli.main([*args, "--out", str(out), "--json"]) == 0
    run_id = json.loads(capsys.readouterr().out)["runs"][0]["run_id"]
    whole = dataset_hashes(out, run_id)
    with h5py.File(out, "r+") as f:  # as if it had stopped, with a hostile checkpoint beside it
        g = f[f"runs/{run_id}"]
        g.attrs["status"] = "interrupted"
        cp = g.create_group("checkpoint")
        for part in ("run", "stepper", "metrics"):
            cp.create_group(part)
        pickle_dataset(cp, blob=data)
    monkeypatch.chdir(tmp_path)
    assert cli.main([*args, "--out", str(out), "--resume"]) == 0
    assert "keeps no checkpoint" in capsys.readouterr().err
    assert not sentinel.exists()
    assert dataset_hashes(out, run_id) == whole


SWEEP = """
name = "crafted"
description = "one case, one method, one step"
cases = ["top.toml"]
methods = ["leapfrog"]
steps = [0.01]
"""


def test_a_sweep_runs_an_unfinished_run_again_without_reading_it(
    tmp_path, monkeypatch, capsys, blob
):
    data, sentinel = blob
    write(tmp_path, "top.toml", TOP_TOML)
    (tmp_path / "crafted.toml").write_text(SWEEP)
    out = tmp_path / "sweep.h5"
    args = ["sweep", str(tmp_path / "crafted.toml"), "--jobs", "1", "--out", str(out)]
    assert cli.main(args) == 0
    with h5py.File(out, "r") as f:
        (run_id,) = f["runs"].keys()
    whole = dataset_hashes(out, run_id)
    with h5py.File(out, "r+") as f:
        g = f[f"runs/{run_id}"]
        g.attrs["status"] = "running"  # as a client killed mid-copy leaves it
        pickle_dataset(g["checkpoint"], blob=data)
    monkeypatch.chdir(tmp_path)
    capsys.readouterr()
    assert cli.main(args) == 0
    assert not sentinel.exists()
    assert dataset_hashes(out, run_id) == whole
    with h5py.File(out, "r") as f:
        assert "solver_state" not in f[f"runs/{run_id}/checkpoint/stepper"]
