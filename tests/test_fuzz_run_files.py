"""Damaged and crafted run files, generated: every command that reads a run file (summary, its
JSON, plot of each kind, report, run --resume of an interrupted run, run reusing a complete run,
sweep completing a grid) either succeeds with output that agrees with the file, or exits 2 with
one stderr line and no traceback; it never changes a file other than the one named (a link
target, the case file, the sweep file), and a command that refuses a file leaves it byte for
byte as it was. A resume that succeeds gives the bits of a run that never stopped wherever the
damage was elsewhere in the file.

The damage: the faults a crafted file can carry (format attributes of the wrong type or value,
`runs` or a run that is a dataset, attributes that are not UTF-8 or not JSON of their type,
datasets of the wrong dtype or shape or declaring 1e11 rows, soft and external links, virtual
datasets, external storage, a checkpoint of the wrong kinds), random attributes and datasets,
bytes flipped in a dataset's chunks or anywhere, and truncation; one to three at a time.

Commands run in this process (topdrift.benchmarks.cli.entry.main); the base files are built
once per module. Two properties: the commands that read and write (1000 examples) and the
figures (plot of each kind and report, which draw PNGs: 40 examples); and every crafted fault
alone with summary, resume and sweep."""

from __future__ import annotations

import contextlib
import hashlib
import io
import json
import shutil
import signal
import tempfile
from pathlib import Path

import h5py
import numpy as np
import pytest
from hypothesis import HealthCheck, Phase, example, given, settings
from hypothesis import strategies as st
from tiny_cases import TOP_TOML, write_case

from topdrift.benchmarks.cases.schema import read_case
from topdrift.benchmarks.cli import entry as cli
from topdrift.benchmarks.run.runner import StopFlag, execute, plan_run
from topdrift.benchmarks.store.writer import open_writer

pytestmark = pytest.mark.slow

CASE_NAME = "cli-top"
SAMPLES = 11  # TOP_TOML's
RESUMED = ["--method", "leapfrog", "--step", "0.005"]  # the interrupted run
REUSED = ["--method", "leapfrog", "--step", "0.01"]  # a complete run
SAMPLE_NAMES = (
    "t",
    "state",
    "euler",
    "quaternion",
    "momentum",
    "invariants/energy",
    "invariants/p_phi",
    "invariants/p_psi",
    "invariants/norm",
    "exact/euler",
    "exact/axis",
)


class _StopAt:
    """A progress sink that asks the run to stop once it has taken `k` samples."""

    def __init__(self, stop, k):
        self.stop, self.k = stop, k

    def begin(self, *_):
        pass

    def flushed(self, *_):
        pass

    def end(self, *_):
        pass

    def update(self, k, _steps):
        if k >= self.k:
            self.stop.signum = signal.SIGINT


def _run(argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        rc = cli.main([str(a) for a in argv])
    return rc, out.getvalue(), err.getvalue()


def _samples(path, run_id) -> dict:
    with h5py.File(path, "r") as f:
        g = f["runs"][run_id]
        return {n: g[n][()].tobytes() for n in SAMPLE_NAMES if n in g}


class Bases(dict):
    """The base files' bytes and names (a short repr: hypothesis prints its arguments)."""

    def __repr__(self) -> str:
        return "<base files>"


@pytest.fixture(scope="module")
def bases(tmp_path_factory):
    d = tmp_path_factory.mktemp("fuzz-bases")
    case = write_case(d, "top.toml", TOP_TOML)
    base = d / "base.h5"
    for opts in (REUSED, ["--method", "rk45", "--rtol", "1e-8"]):
        rc, _, err = _run(["run", case, *opts, "--out", base])
        assert rc == 0, err
    plan = plan_run(read_case(case), "leapfrog", step=0.005)
    stop = StopFlag()
    f = open_writer(base)
    try:
        r = execute(plan, f, stop=stop, progress=_StopAt(stop, 5), flush_every=0.0)
    finally:
        f.close()
    assert r.status == "interrupted"
    ref = d / "ref.h5"
    assert _run(["run", case, *RESUMED, "--out", ref])[0] == 0
    other = d / "other.h5"
    assert _run(["run", case, "--method", "leapfrog", "--step", "0.02", "--out", other])[0] == 0
    with h5py.File(base, "r") as f:
        ids = {
            str(g.attrs["method"]) + str(json.loads(g.attrs["settings"]).get("step")): k
            for k, g in f["runs"].items()
        }
    with h5py.File(other, "r") as f:
        (other_id,) = f["runs"].keys()
    return Bases(
        {
            "dir": d,
            "case": case.read_text(),
            "base": base.read_bytes(),
            "other": other.read_bytes(),
            "other_id": other_id,
            "ref": _samples(ref, plan.run_id),
            "resumed": plan.run_id,
            "reused": ids["leapfrog0.01"],
            "adaptive": ids["rk45None"],
        }
    )


# --- the damage --------------------------------------------------------------------------------
# Each fault is (name, function(f, ctx, k)) where f is the file open for writing, ctx names the
# runs and the folder, and k a drawn whole number the fault may use to vary itself.


def _replace(g, name, value):
    if name in g:
        del g[name]
    g[name] = value


def _run_group(f, ctx, k):
    ids = (ctx["resumed"], ctx["reused"], ctx["adaptive"])
    return ids[k % 3]


def f_root_attr(value):
    def fault(f, ctx, k):
        f.attrs["format_version"] = value

    return fault


def f_format(value):
    def fault(f, ctx, k):
        if value is None:
            del f.attrs["format"]
        else:
            f.attrs["format"] = value

    return fault


def f_runs_dataset(f, ctx, k):
    del f["runs"]
    f["runs"] = np.zeros(3)


def f_runs_external(f, ctx, k):
    del f["runs"]
    f["runs"] = h5py.ExternalLink(str(ctx["other"]), "/runs")


def f_runs_soft(f, ctx, k):
    f.move("runs", "elsewhere")
    f["runs"] = h5py.SoftLink("/elsewhere")


def f_run_dataset(f, ctx, k):
    rid = _run_group(f, ctx, k)
    del f["runs"][rid]
    f["runs"][rid] = np.arange(4.0)


def f_run_external(f, ctx, k):
    rid = _run_group(f, ctx, k)
    del f["runs"][rid]
    f["runs"][rid] = h5py.ExternalLink(str(ctx["other"]), f"/runs/{ctx['other_id']}")


def f_run_soft(f, ctx, k):
    rid = _run_group(f, ctx, k)
    other = _run_group(f, ctx, k + 1)
    del f["runs"][rid]
    f["runs"][rid] = h5py.SoftLink(f"/runs/{other}")


def f_run_hard_twice(f, ctx, k):
    rid = _run_group(f, ctx, k)
    f["runs"]["0123456789abcdef"] = f["runs"][rid]


def f_run_attr(name, value):
    def fault(f, ctx, k):
        f["runs"][_run_group(f, ctx, k)].attrs[name] = value

    return fault


def f_dataset(name, make):
    def fault(f, ctx, k):
        g = f["runs"][_run_group(f, ctx, k)]
        n = g["t"].shape[0]
        _replace(g, name, make(n))

    return fault


def f_huge_rows(f, ctx, k):
    g = f["runs"][_run_group(f, ctx, k)]
    rows = 10 ** (11 + k % 2)
    for name in SAMPLE_NAMES:
        if name in g:
            cols = g[name].shape[1:]
            del g[name]
            g.create_dataset(
                name, shape=(rows, *cols), maxshape=(None, *cols), chunks=(4096, *cols), dtype="f8"
            )
    if k % 3 == 0:
        g.attrs["samples"] = rows


def f_link_dataset(kind):
    def fault(f, ctx, k):
        rid = _run_group(f, ctx, k)
        g = f["runs"][rid]
        name = SAMPLE_NAMES[k % 5]
        if name not in g:
            return
        if kind == "external":
            _replace(
                g, name, h5py.ExternalLink(str(ctx["other"]), f"/runs/{ctx['other_id']}/{name}")
            )
        elif kind == "soft":
            other = _run_group(f, ctx, k + 1)
            _replace(g, name, h5py.SoftLink(f"/runs/{other}/{name}"))
        elif kind == "virtual":
            with h5py.File(ctx["other"], "r") as o:
                shape = o["runs"][ctx["other_id"]][name].shape
            layout = h5py.VirtualLayout(shape=shape, dtype="f8")
            layout[...] = h5py.VirtualSource(
                str(ctx["other"]), f"/runs/{ctx['other_id']}/{name}", shape=shape
            )
            del g[name]
            g.create_virtual_dataset(name, layout)
        elif kind == "external-storage":
            data = g[name][()]
            raw = ctx["dir"] / "raw.bin"
            del g[name]
            g.create_dataset(name, data=data, external=[(str(raw), 0, h5py.h5f.UNLIMITED)])
        elif kind == "named-type":
            g["a_type"] = np.dtype("f8")

    return fault


def f_checkpoint(what):
    def fault(f, ctx, k):
        g = f["runs"][ctx["resumed"]]
        cp = g["checkpoint"]
        if what == "dataset":
            del g["checkpoint"]
            g["checkpoint"] = np.zeros(2)
        elif what == "gone":
            del g["checkpoint"]
        elif what.startswith("sample="):
            cp["run"].attrs["sample"] = json.loads(what[7:])
        elif what == "y-shape":
            _replace(cp["run"], "y", np.zeros((2, 3)))
        elif what == "y-text":
            _replace(cp["run"], "y", np.array([b"cos", b"sin"]))
        elif what == "bytes":
            names = sorted(cp["stepper"].keys())
            _replace(cp["stepper"], names[k % len(names)], np.void(b"\x80\x04cos\nsystem\n"))
        elif what == "drop":
            keys = sorted(cp["stepper"].keys()) + sorted(cp["stepper"].attrs.keys())
            key = keys[k % len(keys)]
            if key in cp["stepper"]:
                del cp["stepper"][key]
            else:
                del cp["stepper"].attrs[key]
        elif what == "huge":
            del cp["metrics"]["maxima"]
            cp["metrics"].create_dataset("maxima", shape=(10**8,), chunks=(4096,), dtype="f8")
        elif what == "counters":
            _replace(cp["run"], "counters", np.arange(k % 7, dtype=np.float64))
        elif what == "text-attr":
            cp["run"].attrs["wall_s"] = "fast"

    return fault


TARGETED = {
    # format attributes
    "format_version 'abc'": f_root_attr("abc"),
    "format_version array": f_root_attr(np.array([1, 1])),
    "format_version 1.0": f_root_attr(1.0),
    "format_version 3": f_root_attr(3),
    "format_version -1": f_root_attr(-1),
    "format_version true": f_root_attr(np.bool_(True)),
    "format not UTF-8": f_format(np.bytes_(b"\xff\xfe")),
    "format gone": f_format(None),
    "format other": f_format("some-other-format"),
    # kinds of groups
    "runs a dataset": f_runs_dataset,
    "runs an external link": f_runs_external,
    "runs a soft link": f_runs_soft,
    "run a dataset": f_run_dataset,
    "run an external link": f_run_external,
    "run a soft link": f_run_soft,
    "run under two names": f_run_hard_twice,
    # run attributes
    "settings '5'": f_run_attr("settings", "5"),
    "settings step text": f_run_attr("settings", '{"step": "small"}'),
    "settings step NaN": f_run_attr("settings", '{"step": NaN}'),
    "settings not JSON": f_run_attr("settings", "{step: 1"),
    "settings nested deep": f_run_attr("settings", "[" * 100_000),
    "settings huge int": f_run_attr("settings", '{"step": 1' + "0" * 400 + "}"),
    "metrics text": f_run_attr("metrics", '"fine"'),
    "metrics steps text": f_run_attr("metrics", '{"steps": "many"}'),
    "metrics steps list": f_run_attr("metrics", '{"steps": [1, 2]}'),
    "metrics 1e400": f_run_attr("metrics", '{"energy_rel_max": 1e400, "steps": 5}'),
    "case not UTF-8": f_run_attr("case", np.bytes_(b"\xff\xfecase")),
    "case a number": f_run_attr("case", 5),
    "case an array": f_run_attr("case", np.array([b"a", b"b"])),
    "status unknown": f_run_attr("status", "weird"),
    "status array": f_run_attr("status", np.array(["ok", "ok"], dtype=h5py.string_dtype())),
    "status ok early": f_run_attr("status", "ok"),
    "samples text": f_run_attr("samples", "ten"),
    "samples 1e12": f_run_attr("samples", 10**12),
    "samples 1": f_run_attr("samples", 1),
    "samples float": f_run_attr("samples", 11.0),
    "horizon text": f_run_attr("horizon", "abc"),
    "horizon NaN": f_run_attr("horizon", float("nan")),
    "horizon negative": f_run_attr("horizon", -1.0),
    "form unknown": f_run_attr("form", "sideways"),
    "notes a dict": f_run_attr("notes", '{"a": 1}'),
    "versions a list": f_run_attr("versions", "[1]"),
    "detail bytes": f_run_attr("detail", np.bytes_(b"\xc3\x28")),
    # datasets
    "euler 1-D": f_dataset("euler", lambda n: np.zeros(n)),
    "t text": f_dataset("t", lambda n: np.array([b"0.1"] * n)),
    "t integers": f_dataset("t", lambda n: np.arange(n)),
    "t complex": f_dataset("t", lambda n: np.zeros(n, dtype=complex)),
    "t 2-D": f_dataset("t", lambda n: np.zeros((n, 2))),
    "state width 5": f_dataset("state", lambda n: np.zeros((n, 5))),
    "energy short": f_dataset("invariants/energy", lambda n: np.zeros(max(n - 3, 0))),
    "euler long": f_dataset("euler", lambda n: np.zeros((n + 40, 3))),
    "invariants a dataset": f_dataset("invariants", lambda n: np.zeros(n)),
    "exact a dataset": f_dataset("exact", lambda n: np.zeros(n)),
    "huge rows": f_huge_rows,
    # links, virtual and external storage
    "dataset external link": f_link_dataset("external"),
    "dataset soft link": f_link_dataset("soft"),
    "dataset virtual": f_link_dataset("virtual"),
    "dataset external storage": f_link_dataset("external-storage"),
    "named datatype": f_link_dataset("named-type"),
    # checkpoint
    "checkpoint a dataset": f_checkpoint("dataset"),
    "checkpoint gone": f_checkpoint("gone"),
    "checkpoint sample 1e9": f_checkpoint("sample=1000000000"),
    "checkpoint sample -5": f_checkpoint("sample=-5"),
    "checkpoint sample 2": f_checkpoint("sample=2"),
    "checkpoint y shape": f_checkpoint("y-shape"),
    "checkpoint y text": f_checkpoint("y-text"),
    "checkpoint bytes": f_checkpoint("bytes"),
    "checkpoint entry gone": f_checkpoint("drop"),
    "checkpoint huge": f_checkpoint("huge"),
    "checkpoint counters": f_checkpoint("counters"),
    "checkpoint text attr": f_checkpoint("text-attr"),
}
ATTR_NAMES = [
    "case",
    "method",
    "form",
    "settings",
    "metrics",
    "status",
    "samples",
    "horizon",
    "created",
    "notes",
    "versions",
    "detail",
    "format",
    "format_version",
    "sample",
    "step",
    "n",
    "t",
    "extra",
]
VALUES = st.one_of(
    st.text(max_size=12),
    st.binary(max_size=12).map(np.bytes_),
    st.integers(-(2**63), 2**63 - 1),
    st.floats(allow_nan=True, allow_infinity=True),
    st.booleans().map(np.bool_),
    st.lists(st.floats(-10, 10), min_size=0, max_size=4).map(np.array),
    st.sampled_from(
        [
            '{"step": 0.01}',
            "{}",
            "[]",
            "null",
            '{"steps": 1}',
            "ok",
            "running",
            "euler",
            "body",
            "5",
            "-1",
            '["a"]',
        ]
    ),
)
DTYPES = ["f8", "f4", "i8", "u1", "S3", "?", "c16"]


def _objects(f) -> list[str]:
    names = []
    f.visit(names.append)
    return ["/"] + sorted(names)


def apply_random_attr(f, k, name, value):
    objs = _objects(f)
    obj = f[objs[k % len(objs)]]
    try:
        obj.attrs[name] = value
    except (TypeError, ValueError):
        pass  # a value h5py cannot store: no fault


def apply_random_dataset(f, k, dtype, shape):
    objs = [n for n in _objects(f) if isinstance(f[n], h5py.Dataset)]
    if not objs:
        return
    name = objs[k % len(objs)]
    del f[name]
    size = int(np.prod(shape)) if shape else 1
    data = (np.arange(size) % 3).astype(dtype).reshape(shape)
    f[name] = data


def apply_delete(f, k):
    objs = _objects(f)[1:]
    if objs:
        name = objs[k % len(objs)]
        if name in f:
            del f[name]


def _storage(path) -> list[tuple[str, int, int]]:
    """(dataset, byte offset, size) of every stored piece of every dataset: chunks and
    contiguous blocks."""
    out = []
    try:
        with h5py.File(path, "r") as f:
            for name in _objects(f)[1:]:
                ds = f.get(name)
                if not isinstance(ds, h5py.Dataset):
                    continue
                if ds.chunks is None:
                    off = ds.id.get_offset()
                    if off is not None and ds.id.get_storage_size():
                        out.append((name, off, ds.id.get_storage_size()))
                else:
                    for i in range(ds.id.get_num_chunks()):
                        info = ds.id.get_chunk_info(i)
                        out.append((name, info.byte_offset, info.size))
    except (OSError, KeyError, RuntimeError, ValueError):
        pass
    return out


H5_FAULT = st.one_of(
    st.tuples(st.just("targeted"), st.sampled_from(sorted(TARGETED)), st.integers(0, 1000)),
    st.tuples(st.just("attr"), st.integers(0, 1000), st.sampled_from(ATTR_NAMES), VALUES),
    st.tuples(
        st.just("dataset"),
        st.integers(0, 1000),
        st.sampled_from(DTYPES),
        st.lists(st.integers(0, 5), max_size=3).map(tuple),
    ),
    st.tuples(st.just("delete"), st.integers(0, 1000)),
)
BYTE_FAULT = st.one_of(
    st.tuples(st.just("chunk"), st.integers(0, 10**6), st.integers(0, 10**6), st.integers(1, 255)),
    st.tuples(st.just("flip"), st.floats(0.0, 1.0), st.integers(1, 255)),
    st.tuples(st.just("cut"), st.floats(0.0, 1.0)),
)
DAMAGE = st.tuples(st.lists(H5_FAULT, max_size=3), st.lists(BYTE_FAULT, max_size=2)).filter(
    lambda d: d[0] or d[1]
)


def damage_file(path: Path, ctx: dict, damage) -> dict:
    """Apply the faults; returns what they touched: {'runs': set of run ids or '*'}."""
    h5_faults, byte_faults = damage
    touched: set[str] = set()
    if h5_faults:
        with h5py.File(path, "r+") as f:
            for fault in h5_faults:
                kind = fault[0]
                touched.add("*")
                try:
                    if kind == "targeted":
                        _, name, k = fault
                        TARGETED[name](f, ctx, k)
                    elif kind == "attr":
                        apply_random_attr(f, fault[1], fault[2], fault[3])
                    elif kind == "dataset":
                        apply_random_dataset(f, fault[1], fault[2], fault[3])
                    else:
                        apply_delete(f, fault[1])
                except (KeyError, ValueError, TypeError, OSError):
                    pass  # an earlier fault removed what this one changes
    for fault in byte_faults:
        data = bytearray(path.read_bytes())
        if not data:
            break
        if fault[0] == "chunk":
            pieces = _storage(path)
            if not pieces:
                continue
            name, off, size = pieces[fault[1] % len(pieces)]
            i = off + fault[2] % max(size, 1)
            if i < len(data):
                data[i] ^= fault[3]
            parts = name.strip("/").split("/")
            touched.add(parts[1] if len(parts) > 1 and parts[0] == "runs" else "*")
        elif fault[0] == "flip":
            i = min(int(fault[1] * len(data)), len(data) - 1)
            data[i] ^= fault[2]
            touched.add("*")
        else:
            data = data[: int(fault[1] * len(data))]
            touched.add("*")
        path.write_bytes(bytes(data))
    return {"runs": touched}


# --- the oracle --------------------------------------------------------------------------------


def _digests(folder: Path) -> dict:
    return {
        str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


def _one_error_line(rc, err, where):
    assert "Traceback" not in err, f"{where}: traceback\n{err}"
    lines = [ln for ln in err.splitlines() if ln.startswith("topdrift: error:")]
    assert len(lines) == 1, f"{where}: exit {rc}, {len(lines)} error lines\n{err}"
    assert err.rstrip().splitlines()[-1] == lines[0], f"{where}: more after the error\n{err}"


def _plain_runs(path) -> dict:
    """What plain h5py reads of a file the reader accepted: run id -> (status, t rows, attrs)."""
    out = {}
    with h5py.File(path, "r") as f:
        runs = f.get("runs")
        if runs is None:
            return out
        for rid in runs:
            g = runs[rid]
            status = g.attrs.get("status")
            out[rid] = {
                "status": status.decode() if isinstance(status, bytes) else status,
                "rows": int(g["t"].shape[0]) if "t" in g else 0,
                "metrics": json.loads(g.attrs["metrics"]) if "metrics" in g.attrs else None,
            }
    return out


def _readable(path) -> bool:
    rc, _, err = _run(["summary", path, "--json"])
    return rc == 0


def check_command(command, w: Path, ctx: dict, touched: dict):
    bad = w / "bad.h5"
    before_file = bad.read_bytes()
    before = _digests(w)
    argv = {
        "summary": ["summary", bad],
        "summary-json": ["summary", bad, "--json"],
        "report": ["report", bad, "--out", w / "rep"],
        "resume": ["run", w / "top.toml", *RESUMED, "--out", bad, "--resume", "--json"],
        "reuse": ["run", w / "top.toml", *REUSED, "--out", bad, "--json"],
        "sweep": ["sweep", w / "sweep.toml", "--out", bad, "--jobs", "1", "--json"],
    }.get(command)
    if command.startswith("plot-"):
        argv = ["plot", bad, "--kind", command[5:], "--out", w / "fig.png"]
    rc, out, err = _run(argv)
    where = f"{command}: exit {rc}"
    assert "Traceback" not in err, f"{where}\n{err}"
    writes = command in ("resume", "reuse", "sweep")
    new_files = {"report": "rep/", "plot": "fig.png"}
    after = _digests(w)
    for name, digest in before.items():
        if name == "bad.h5" and writes and rc != 2:
            continue
        assert after.get(name) == digest, f"{where}: {name} changed\n{err}"
    extra = set(after) - set(before)
    allowed = new_files.get(command.split("-")[0], None) if rc == 0 else None
    assert all(allowed and n.startswith(allowed) for n in extra), f"{where}: wrote {extra}"
    if rc == 2:
        _one_error_line(rc, err, where)
        assert bad.read_bytes() == before_file, f"{where}: the refused file changed\n{err}"
        return "refused"
    allowed_rc = (0, 1) if command in ("resume", "reuse") else (0,)
    assert rc in allowed_rc, f"{where}\n{out}\n{err}"
    if command in ("summary", "summary-json"):
        truth = _plain_runs(bad)
        if command == "summary-json":
            doc = json.loads(out)
            got = {r["run_id"]: r for r in doc["runs"]}
            assert set(got) == set(truth), where
            for rid, r in got.items():
                assert r["samples_stored"] == truth[rid]["rows"], where
                if truth[rid]["status"] is not None and r["status"] != "incomplete":
                    assert r["status"] == truth[rid]["status"], where
                if r["status"] == "ok" and isinstance(r.get("samples"), int):
                    assert r["samples_stored"] == r["samples"], where
        else:
            lines = out.splitlines()
            assert len(lines) == (1 + len(truth) if truth else 1), f"{where}\n{out}"
    elif command.startswith("plot-"):
        png = w / "fig.png"
        assert out.strip() == str(png) and png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n", where
    elif command == "report":
        assert (w / "rep" / "report.md").is_file(), where
    else:
        assert _readable(bad), f"{where}: left a file the reader refuses\n{err}"
        truth = _plain_runs(bad)
        doc = json.loads(out)
        for r in doc["runs"]:
            assert truth[r["run_id"]]["status"] == r["status"], where
            if r["status"] == "ok":
                assert truth[r["run_id"]]["rows"] == SAMPLES, where
        if command == "reuse":
            (r,) = doc["runs"]
            assert r["metrics"] == truth[r["run_id"]]["metrics"], where
        if command == "resume":
            rid = ctx["resumed"]
            if (
                truth[rid]["status"] == "ok"
                and rid not in touched["runs"]
                and ("*" not in touched["runs"])
            ):
                assert _samples(bad, rid) == ctx["ref"], f"{where}: resumed to other bits"
    return "ok"


SWEEP = """\
name = "fuzz"
description = "one run reused, one new"
cases = ["{case}"]
methods = ["leapfrog"]
steps = [0.01, 0.025]
"""


def _folder(bases, work: Path) -> tuple[Path, dict]:
    w = Path(tempfile.mkdtemp(dir=work))
    (w / "top.toml").write_text(bases["case"])
    (w / "other.h5").write_bytes(bases["other"])
    (w / "sweep.toml").write_text(SWEEP.format(case=w / "top.toml"))
    (w / "bad.h5").write_bytes(bases["base"])
    ctx = Bases(bases, dir=w, other=w / "other.h5")
    return w, ctx


OUTCOMES: dict[str, dict[str, int]] = {}


def _fuzz(bases, tmp_path_factory, damage, command):
    work = tmp_path_factory.getbasetemp() / "fuzz-work"
    work.mkdir(exist_ok=True)
    w, ctx = _folder(bases, work)
    try:
        touched = damage_file(w / "bad.h5", ctx, damage)
        outcome = check_command(command, w, ctx, touched)
    finally:
        shutil.rmtree(w, ignore_errors=True)
    counts = OUTCOMES.setdefault(command, {})
    counts[outcome] = counts.get(outcome, 0) + 1


# Drawing is the slow part (about a second a figure, ten for a report on two loaded cores):
# the figures get fewer examples than the commands that only read and write.
FIGURE_EXAMPLES = 30
FAST = ["summary", "summary-json", "resume", "reuse", "sweep"]
FIGURES = ["plot-drift", "plot-theta", "plot-axis-path", "plot-work-precision", "report"]
FUZZ = dict(
    deadline=None,
    database=None,
    # No shrinking: a failing example is a short list of named faults already, and shrinking
    # one through file rebuilds takes many minutes on two cores.
    phases=[Phase.explicit, Phase.reuse, Phase.generate],
    suppress_health_check=[
        HealthCheck.function_scoped_fixture,
        HealthCheck.too_slow,
        HealthCheck.filter_too_much,
        HealthCheck.data_too_large,
    ],
)


# For every command, one fault it must refuse and one it must read past (an attribute the format
# does not name, on the root), whatever the random examples draw.
REFUSED = ([("targeted", "runs a dataset", 0)], [])
HARMLESS = ([("attr", 0, "extra", "not a format attribute")], [])


def _explicit(commands):
    def add(test):
        for command in commands:
            for damage in (REFUSED, HARMLESS):
                test = example(damage=damage, command=command)(test)
        return test

    return add


@settings(max_examples=1000, **FUZZ)
@given(damage=DAMAGE, command=st.sampled_from(FAST))
@_explicit(FAST)
def test_damaged_run_files_cheap_commands(bases, tmp_path_factory, damage, command):
    _fuzz(bases, tmp_path_factory, damage, command)


@settings(max_examples=FIGURE_EXAMPLES, **FUZZ)
@given(damage=DAMAGE, command=st.sampled_from(FIGURES))
@_explicit(FIGURES)
def test_damaged_run_files_figures(bases, tmp_path_factory, damage, command):
    _fuzz(bases, tmp_path_factory, damage, command)


@pytest.mark.parametrize("name", sorted(TARGETED))
@pytest.mark.parametrize("command", ["summary-json", "resume", "sweep"])
def test_each_crafted_fault(bases, tmp_path_factory, name, command):
    """Every crafted fault on its own, read (summary), resumed and written into (sweep): one
    line or correct output. The properties above combine them with the other commands."""
    _fuzz(bases, tmp_path_factory, ([("targeted", name, 0)], []), command)


def test_both_outcomes_were_seen():
    """The properties saw refusals and successes for every command (a test that only ever
    refuses, or only ever passes, would check less than it claims): the explicit examples
    REFUSED and HARMLESS must have come out so."""
    if not OUTCOMES:
        pytest.skip("runs after the properties above (run the whole module)")
    for command in FAST + FIGURES:
        seen = OUTCOMES.get(command, {})
        assert seen.get("refused", 0) > 0 and seen.get("ok", 0) > 0, (command, seen)
