"""Nothing lost: `run --force` computes the new run beside the stored one and replaces it only
once complete, so a --force stopped by SIGINT, SIGTERM or SIGKILL leaves the stored run bit for
bit as it was (and says so); the leftover replacement is continued by --resume, started again
by --force, and waits, said, on a plain run. `report` and `plot` never write over a file they
did not write."""

from __future__ import annotations

import hashlib
import signal
import struct
import zlib

import h5py
import pytest
from run_files import topdrift_process as topdrift
from tiny_cases import TOP_TOML
from tiny_cases import write_case as write

from topdrift.benchmarks.cli import entry as cli

# Seconds of gauss4 (1.5e6 steps), flushed every half second: a signal sent at the first flush
# lands mid-run even on a loaded machine (at 5e5 steps a SIGKILL once came after the last sample).
LONG = ["--method", "gauss4", "--step", "0.0002", "--horizon", "300", "--samples", "201"]


def group_hashes(path, where: str) -> dict:
    """SHA-256 of every dataset and attribute under one group: the bits of a stored run."""
    out = {}
    with h5py.File(path, "r") as f:
        g = f[where]

        def visit(name, obj):
            if isinstance(obj, h5py.Dataset):
                out[name] = hashlib.sha256(obj[()].tobytes()).hexdigest()
            for key, value in obj.attrs.items():
                out[f"{name}@{key}"] = hashlib.sha256(repr(value).encode()).hexdigest()

        for key, value in g.attrs.items():
            out[f"@{key}"] = hashlib.sha256(repr(value).encode()).hexdigest()
        g.visititems(visit)
    return out


def dataset_hashes(path, where):
    return {k: v for k, v in group_hashes(path, where).items() if "@" not in k}


@pytest.fixture(scope="module")
def stored(tmp_path_factory):
    d = tmp_path_factory.mktemp("stored")
    case = write(d, "top.toml", TOP_TOML)
    out = d / "runs.h5"
    assert cli.main(["run", str(case), *LONG, "--out", str(out), "--json"]) == 0
    with h5py.File(out, "r") as f:
        (run_id,) = f["runs"].keys()
    return case, out, run_id


def _interrupted_force(case, out, sig):
    proc = topdrift("run", str(case), *LONG, "--out", str(out), "--force", "--flush-every", "0.5")
    for line in proc.stderr:
        if "flushed sample" in line:
            break
    else:
        raise AssertionError("the --force run ended before the signal")
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=60)
    return proc.returncode, err


@pytest.mark.parametrize(
    "sig", [signal.SIGINT, signal.SIGTERM, signal.SIGKILL], ids=["SIGINT", "SIGTERM", "SIGKILL"]
)
def test_an_interrupted_force_keeps_the_stored_run_bit_for_bit(
    stored, tmp_path, capsys, command_json, sig
):
    case, ref, run_id = stored
    out = tmp_path / "runs.h5"
    out.write_bytes(ref.read_bytes())
    before = group_hashes(out, f"runs/{run_id}")
    rc, err = _interrupted_force(case, out, sig)
    assert group_hashes(out, f"runs/{run_id}") == before  # the stored run, untouched
    with h5py.File(out, "r") as f:
        left = f[f"replacing/{run_id}"]
        assert left.attrs["status"] == ("running" if sig == signal.SIGKILL else "interrupted")
        n = left["t"].shape[0]
        assert 0 < n < 201
    if sig != signal.SIGKILL:
        assert rc == 128 + sig and "Traceback" not in err
        (line,) = [ln for ln in err.splitlines() if "stopped by" in ln]
        assert line.startswith(f"topdrift: run stopped by {sig.name}: 0 run(s) finished; ")
        assert f"run {run_id} (cli-top, gauss4) stopped at sample {n}/201" in line
        assert "the stored run, which is kept as it was" in line

    # A plain run reuses the stored run and says that a replacement waits; the file is
    # not even opened for writing.
    file_before = out.read_bytes()
    capsys.readouterr()
    rc, doc, _ = command_json("run", str(case), *LONG, "--out", str(out))
    assert rc == 0 and doc["runs"][0]["status"] == "ok"
    assert out.read_bytes() == file_before
    # summary lists the stored run as it is, and names the waiting replacement
    assert cli.main(["summary", str(out)]) == 0
    assert "1 unfinished --force replacement(s)" in capsys.readouterr().err

    if sig == signal.SIGTERM:
        # --force again: the leftover is dropped, the new run completes and replaces the old
        assert cli.main(["run", str(case), *LONG, "--out", str(out), "--force"]) == 0
    else:
        # --resume continues the replacement (the newest attempt) and then replaces the old
        assert cli.main(["run", str(case), *LONG, "--out", str(out), "--resume"]) == 0
    with h5py.File(out, "r") as f:
        assert list(f) == ["runs"] and list(f["runs"]) == [run_id]
        assert f["runs"][run_id].attrs["status"] == "ok"
    # the same computation: the replacement's samples are the stored run's, to the bit
    assert dataset_hashes(out, f"runs/{run_id}") == dataset_hashes(ref, f"runs/{run_id}")


def test_a_completed_force_replaces_the_stored_run(stored, tmp_path, command_json):
    case, ref, run_id = stored
    out = tmp_path / "runs.h5"
    out.write_bytes(ref.read_bytes())
    quick = ["--method", "leapfrog", "--step", "0.01", "--out", str(out)]
    rc, doc, _ = command_json("run", str(case), *quick)
    assert rc == 0
    other = doc["runs"][0]["run_id"]
    before = group_hashes(out, f"runs/{run_id}")
    with h5py.File(out, "r") as f:
        created = f["runs"][other].attrs["created"]
    rc, doc, _ = command_json("run", str(case), *quick, "--force")
    assert rc == 0 and doc["runs"][0]["status"] == "ok"
    with h5py.File(out, "r") as f:
        assert sorted(f) == ["runs"] and sorted(f["runs"]) == sorted([run_id, other])
        assert f["runs"][other].attrs["created"] >= created
    assert group_hashes(out, f"runs/{run_id}") == before  # the other run is not touched


# ----------------------------------------------------------------------------- report, plot


def foreign_png(path) -> bytes:
    """A valid 1x1 PNG written by someone else (no topdrift text chunk), PNG specification."""

    def chunk(kind: bytes, data: bytes) -> bytes:
        body = kind + data
        return struct.pack(">I", len(data)) + body + struct.pack(">I", zlib.crc32(body))

    raw = (
        b"\x89PNG\r\n\x1a\n"
        + chunk(b"IHDR", struct.pack(">IIBBBBB", 1, 1, 8, 0, 0, 0, 0))
        + chunk(b"tEXt", b"Software\x00another program")
        + chunk(b"IDAT", zlib.compress(b"\x00\x00"))
        + chunk(b"IEND", b"")
    )
    path.write_bytes(raw)
    return raw


def one_line(capsys) -> str:
    err = capsys.readouterr().err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("topdrift: error: "), err
    return lines[0]


def test_report_refuses_to_write_over_files_it_did_not_write(stored, tmp_path, capsys):
    _, runs, _ = stored
    out = tmp_path / "rep"
    out.mkdir()
    notes = out / "report.md"
    notes.write_text("# my notes\n\nthe wheel at 600 rpm, by hand\n")
    assert cli.main(["report", str(runs), "--out", str(out)]) == 2
    line = one_line(capsys)
    assert "report.md" in line and "not written by topdrift report" in line and "--force" in line
    assert notes.read_text() == "# my notes\n\nthe wheel at 600 rpm, by hand\n"
    assert sorted(p.name for p in out.iterdir()) == ["report.md"]  # nothing else written

    # Its own report it writes again; it recognises it by the marker line.
    fresh = tmp_path / "fresh"
    assert cli.main(["report", str(runs), "--out", str(fresh)]) == 0
    first = (fresh / "report.md").read_text().splitlines()[0]
    assert first == "<!-- written by topdrift report; running it again replaces this file -->"
    assert cli.main(["report", str(runs), "--out", str(fresh)]) == 0
    # A figure name taken by another program's PNG is refused, and left alone.
    fig = fresh / "cli-top-drift.png"
    raw = foreign_png(fig)
    capsys.readouterr()
    assert cli.main(["report", str(runs), "--out", str(fresh)]) == 2
    assert "cli-top-drift.png" in one_line(capsys)
    assert fig.read_bytes() == raw
    # --force writes over both.
    assert cli.main(["report", str(runs), "--out", str(out), "--force"]) == 0
    assert notes.read_text().splitlines()[0] == first
    capsys.readouterr()


def test_plot_outputs_are_checked_before_anything_is_drawn(stored, tmp_path, capsys):
    _, runs, _ = stored
    victim = tmp_path / "victim.h5"
    victim.write_bytes(b"someone's data\n")
    argv = ["plot", str(runs), "--kind", "drift", "--out"]
    assert cli.main(argv + [str(victim)]) == 2
    assert "figures are written as PNG" in one_line(capsys)
    theirs = tmp_path / "theirs.png"
    raw = foreign_png(theirs)
    assert cli.main(argv + [str(theirs)]) == 2
    assert "exists and is not a figure topdrift wrote" in one_line(capsys)
    assert victim.read_bytes() == b"someone's data\n" and theirs.read_bytes() == raw
    # A figure of its own it draws again, into a folder it makes.
    mine = tmp_path / "figs" / "drift.png"
    assert cli.main(argv + [str(mine)]) == 0
    assert cli.main(argv + [str(mine)]) == 0
    assert mine.read_bytes().startswith(b"\x89PNG") and b"Software\x00topdrift" in mine.read_bytes()
    capsys.readouterr()
