"""The cases of the run-file checks that the file fuzz (test_fuzz_run_files.py) draws at random,
one by one, with the exact words a user sees: a file that links out of itself, a damaged chunk
under --resume, datasets declaring 1e11 rows; and the write-failure handler telling no room from
a damaged file."""

from __future__ import annotations

import errno
import hashlib

import h5py
import numpy as np
import pytest
from tiny_cases import TOP_TOML, write_case

from topdrift.benchmarks.cases.schema import MAX_SAMPLES, read_case
from topdrift.benchmarks.cli import entry as cli
from topdrift.benchmarks.run.ensemble import MAX_MEMBERS
from topdrift.benchmarks.run.runner import execute, plan_run
from topdrift.benchmarks.store import failures, format
from topdrift.benchmarks.store.writer import open_writer

LEAPFROG = ["--method", "leapfrog", "--step", "0.01"]


def digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def one_line(capsys) -> str:
    err = capsys.readouterr().err
    lines = [ln for ln in err.splitlines() if ln.startswith("topdrift: error:")]
    assert len(lines) == 1 and "Traceback" not in err, err
    assert err.rstrip().splitlines()[-1] == lines[0], err
    return lines[0]


@pytest.fixture()
def files(tmp_path):
    case = write_case(tmp_path, "top.toml", TOP_TOML)
    other = tmp_path / "other.h5"
    assert cli.main(["run", str(case), *LEAPFROG, "--out", str(other)]) == 0
    return case, other


def test_limits_agree_with_the_case_files_and_ensembles():
    assert format.MAX_ROWS == MAX_SAMPLES
    assert format.MAX_MEMBERS == MAX_MEMBERS


def test_runs_as_an_external_link_is_refused_and_the_target_untouched(files, tmp_path, capsys):
    """The measured escape: `/runs` an external link to another results file made `summary`
    list that file's runs and `run --out` write into it."""
    case, other = files
    linked = tmp_path / "linked.h5"
    with h5py.File(linked, "w") as f:
        f.attrs["format"] = "topdrift-runs"
        f.attrs["format_version"] = 1
        f["runs"] = h5py.ExternalLink(str(other), "/runs")
    before = {p: digest(p) for p in (other, linked)}
    capsys.readouterr()
    for argv in (
        ["summary", str(linked)],
        ["summary", str(linked), "--json"],
        ["run", str(case), "--method", "leapfrog", "--step", "0.02", "--out", str(linked)],
        ["report", str(linked), "--out", str(tmp_path / "rep")],
        ["plot", str(linked), "--kind", "drift", "--out", str(tmp_path / "p.png")],
    ):
        assert cli.main(argv) == 2, argv
        line = one_line(capsys)
        assert str(linked) in line and "/runs is an external link" in line, line
        assert str(other) in line  # the line names where the link points
    assert {p: digest(p) for p in (other, linked)} == before
    assert not (tmp_path / "p.png").exists() and not (tmp_path / "rep").exists()


@pytest.mark.parametrize("kind", ["soft", "virtual", "external-storage"])
def test_other_ways_out_of_the_file_are_refused(files, tmp_path, capsys, kind):
    case, other = files
    bad = tmp_path / "bad.h5"
    bad.write_bytes(other.read_bytes())
    with h5py.File(other, "r") as f:
        (rid,) = f["runs"].keys()
    with h5py.File(bad, "r+") as f:
        g = f["runs"][rid]
        if kind == "soft":
            g.move("t", "t_moved")
            g["t"] = h5py.SoftLink(f"/runs/{rid}/t_moved")
            words = f"/runs/{rid}/t is a soft link"
        elif kind == "virtual":
            n = g["t"].shape[0]
            del g["t"]
            layout = h5py.VirtualLayout(shape=(n,), dtype="f8")
            layout[...] = h5py.VirtualSource(str(other), f"/runs/{rid}/t", shape=(n,))
            g.create_virtual_dataset("t", layout)
            words = "is virtual"
        else:
            data = g["t"][()]
            del g["t"]
            raw = tmp_path / "raw.bin"
            g.create_dataset("t", data=data, external=[(str(raw), 0, h5py.h5f.UNLIMITED)])
            words = "keeps its values in the external file"
    before = digest(bad)
    capsys.readouterr()
    assert cli.main(["summary", str(bad)]) == 2
    assert words in one_line(capsys)
    assert cli.main(["run", str(case), *LEAPFROG, "--out", str(bad)]) == 2
    assert words in one_line(capsys)
    assert digest(bad) == before


def test_a_damaged_chunk_refuses_the_resume_as_damage_not_a_full_disk(tmp_path, capsys, stop_at):
    """The measured confusion: bytes flipped in a data chunk of an interrupted run, then
    `--resume`, said "cannot write the results (... filter returned failure during read) ...
    make room" and left datasets at different lengths, status running."""
    case = write_case(tmp_path, "top.toml", TOP_TOML)
    out = tmp_path / "r.h5"
    plan = plan_run(read_case(case), "leapfrog", step=0.01)
    stop, progress = stop_at(5)
    f = open_writer(out)
    try:
        r = execute(plan, f, stop=stop, progress=progress, flush_every=0.0)
    finally:
        f.close()
    assert r.status == "interrupted"
    with h5py.File(out, "r") as f:
        info = f["runs"][plan.run_id]["invariants/energy"].id.get_chunk_info(0)
    data = bytearray(out.read_bytes())
    for i in range(info.byte_offset + 2, info.byte_offset + min(info.size, 12)):
        data[i] ^= 0x5A
    out.write_bytes(bytes(data))
    before = digest(out)
    capsys.readouterr()
    rc = cli.main(["run", str(case), *LEAPFROG, "--out", str(out), "--resume"])
    line = one_line(capsys)
    assert rc == 2 and "damaged run file" in line and "invariants/energy" in line, line
    assert "make room" not in line and "cannot write" not in line
    assert digest(out) == before


def test_datasets_declaring_1e11_rows_are_refused_before_any_allocation(files, tmp_path, capsys):
    """The measured crash: datasets recreated to declare 1e11 rows; `summary` said ok, `run`
    reused the run as ok, and `report` tried to allocate 7.28 TiB."""
    case, other = files
    bad = tmp_path / "huge.h5"
    bad.write_bytes(other.read_bytes())
    with h5py.File(bad, "r+") as f:
        (g,) = f["runs"].values()
        for name in ("t", "euler", "invariants/energy"):
            cols = g[name].shape[1:]
            del g[name]
            g.create_dataset(name, shape=(10**11, *cols), chunks=(4096, *cols), dtype="f8")
    before = digest(bad)
    assert bad.stat().st_size < 1_000_000  # the rows are declared, not written
    capsys.readouterr()
    for argv in (
        ["summary", str(bad), "--json"],
        ["run", str(case), *LEAPFROG, "--out", str(bad)],
        ["report", str(bad), "--out", str(tmp_path / "rep")],
    ):
        assert cli.main(argv) == 2, argv
        line = one_line(capsys)
        assert "declares 100000000000 rows, more than its 11 samples" in line, line
    assert digest(bad) == before


@pytest.mark.parametrize(
    ("fault", "says"),
    [
        (lambda f, g: f.attrs.__setitem__("format_version", "abc"), "not a whole number"),
        (lambda f, g: f.attrs.__setitem__("format_version", np.array([1, 1])), "an array"),
        (lambda f, g: g.attrs.__setitem__("settings", "5"), "holds a JSON int, not a dict"),
        (
            lambda f, g: g.attrs.__setitem__("settings", '{"step": "small"}'),
            "'step' is 'small', not a finite number",
        ),
        (lambda f, g: g.attrs.__setitem__("case", np.bytes_(b"\xff\xfe")), "not UTF-8 text"),
        (lambda f, g: (g.__delitem__("euler"), g.__setitem__("euler", np.zeros(11))), "(n, 3)"),
        (
            lambda f, g: (g.__delitem__("t"), g.__setitem__("t", np.array([b"x"] * 11))),
            "not float64",
        ),
    ],
)
def test_crafted_attributes_and_datasets_are_one_line(files, tmp_path, capsys, fault, says):
    """The issue's tracebacks (AttributeError, ValueError, TypeError, UnicodeDecodeError,
    IndexError by command), each now one line naming what is wrong, for every reader."""
    case, other = files
    bad = tmp_path / "bad.h5"
    bad.write_bytes(other.read_bytes())
    with h5py.File(bad, "r+") as f:
        (g,) = f["runs"].values()
        fault(f, g)
    before = digest(bad)
    capsys.readouterr()
    for argv in (
        ["summary", str(bad)],
        ["summary", str(bad), "--json"],
        ["plot", str(bad), "--kind", "theta", "--out", str(tmp_path / "p.png")],
        ["report", str(bad), "--out", str(tmp_path / "rep")],
        ["run", str(case), *LEAPFROG, "--out", str(bad)],
    ):
        assert cli.main(argv) == 2, argv
        line = one_line(capsys)
        assert str(bad) in line and says in line, line
    assert digest(bad) == before


def test_a_runs_group_that_is_a_dataset_and_a_run_that_is_a_dataset(files, tmp_path, capsys):
    _, other = files
    for what, says in (("runs", "/runs is a dataset"), ("run", "is a dataset, not a group")):
        bad = tmp_path / f"{what}.h5"
        bad.write_bytes(other.read_bytes())
        with h5py.File(bad, "r+") as f:
            if what == "runs":
                del f["runs"]
                f["runs"] = np.zeros(3)
            else:
                (rid,) = f["runs"].keys()
                del f["runs"][rid]
                f["runs"][rid] = np.zeros(3)
        capsys.readouterr()
        assert cli.main(["summary", str(bad)]) == 2
        assert says in one_line(capsys)


@pytest.mark.parametrize(
    ("exc", "kind"),
    [
        (OSError(errno.ENOSPC, "No space left on device"), failures.NO_ROOM),
        (OSError(errno.EFBIG, "File too large"), failures.NO_ROOM),
        (
            RuntimeError("Can't decrement id ref count (file write failed: errno = 28, ...)"),
            failures.NO_ROOM,
        ),
        (
            OSError("Can't synchronously read data (filter returned failure during read)"),
            failures.DAMAGED,
        ),
        (KeyError("Unable to open object (bad object header version number)"), failures.DAMAGED),
        (OSError(errno.EIO, "Input/output error"), failures.WRITE),
        (ValueError("a programming error"), None),
        (TypeError("another"), None),
    ],
)
def test_failure_kinds(exc, kind):
    """h5py's words for each failure (HDF5 1.14 and 2.0, from messages seen in this suite's
    full-disk and damaged-file runs)."""
    assert failures.failure_kind(exc) == kind


def test_one_handler_says_each_kind_in_its_words(tmp_path):
    path = tmp_path / "r.h5"
    room = failures.file_failure(
        OSError(errno.ENOSPC, "No space left on device"),
        None,
        path,
        in_hand="the run in hand is not marked complete",
        next_step="go on with --resume",
    )
    assert str(room).startswith(f"{path}: cannot write the results (No space left on device)")
    assert "make room" in str(room) and "go on with --resume" in str(room)
    bad = failures.file_failure(
        OSError("Can't synchronously read data (filter returned failure during read)"),
        None,
        path,
        in_hand="the run in hand is not marked complete",
        next_step="go on with --resume",
    )
    assert str(bad).startswith(f"{path}: damaged run file:") and "not a full disk" in str(bad)
    assert "make room" not in str(bad)
    assert failures.file_failure(ValueError("bug"), None, path, in_hand="", next_step="") is None
    assert "\n" not in str(room) and "\n" not in str(bad)
