"""The run-file format "topdrift-runs", version 2 (and version 1, which it extends), as one set
of names: the constants of the layout (docs/run-files.md documents it and it is a contract:
change it only with a version bump), the one version check, and the one set of messages every
reader and the writer give about a file.

The reader (reader.py), the checks behind it (validate.py) and the writer (writer.py) all take
their names from here, so that two commands never describe the same file in two ways.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from topdrift.benchmarks.errors import UserError

FORMAT = "topdrift-runs"
FORMAT_VERSION = 2  # the version this topdrift writes into a new file
READABLE_VERSIONS = (1, 2)  # the versions this topdrift reads (and appends to, in their layout)
DEFAULT_FILE = Path("results") / "runs.h5"
# Groups at the top of a run file. /runs holds one group per run. /replacing (optional) holds a
# run that `run --force` computes to replace a stored run of the same id: it is moved into /runs
# only once complete, so that an interrupted --force leaves the stored run as it was
# (replacement.py). Readers of runs look at /runs only.
RUNS = "runs"
REPLACING = "replacing"

# A run's `status` attribute: running while it is written, then how it ended.
RUNNING = "running"
OK = "ok"
DIVERGED = "diverged"  # the state or its energy blew up
SINGULAR = "singular"  # the state left the domain of its form
INTERRUPTED = "interrupted"  # stopped by a signal or a full disk; --resume goes on
FAILED = "failed"  # the method or the exact reference failed
STATUSES = (RUNNING, OK, DIVERGED, SINGULAR, INTERRUPTED, FAILED)
FINAL_STATUSES = (OK, DIVERGED, SINGULAR, FAILED)
STATUS_OK = OK
# Not a writer's status: a reader's word for a group that lacks what a run must have (its writer
# has only begun it).
STATUS_INCOMPLETE = "incomplete"

# Sample datasets: path inside the run group -> number of columns (0: one value per sample).
SAMPLE_DATASETS = {
    "t": 0,
    "euler": 3,
    "quaternion": 4,
    "momentum": 3,
    "invariants/energy": 0,
    "invariants/p_phi": 0,
    "invariants/p_psi": 0,
    "invariants/norm": 0,
}
EXACT_DATASETS = {"exact/euler": 3, "exact/axis": 3}
# Optional sample datasets of format 1, present only where the quantity is an invariant of the
# run's body: Kovalevskaya's integral for a Kovalevskaya top.
KOVALEVSKAYA_DATASET = "invariants/kovalevskaya"
OPTIONAL_DATASETS = {KOVALEVSKAYA_DATASET: 0}
STATE_DATASET = "state"
# Version 2: the whole turns of phi and psi beside their folded angles (int64, columns phi, psi;
# unfolded angle = folded + 2 pi turns), for the exact reference of every run that has one and
# for the samples of every Euler-form run (a body-form run knows its angles only modulo 2 pi,
# from the quaternion). A version-1 file has none; a run appended to one is written in its
# layout, without them.
TURNS_DATASET = "euler_turns"
EXACT_TURNS_DATASET = "exact/euler_turns"
TURN_DATASETS = {TURNS_DATASET: 2, EXACT_TURNS_DATASET: 2}
FIRST_VERSION_WITH_TURNS = 2
# Version 2: every dataset carries a `units` attribute (SI, text). A dataset whose columns differ
# in units lists them per column, comma-separated. Energies in J (kg m^2/s^2), momenta in
# kg m^2/s, Kovalevskaya's integral in 1/s^4 (the square of a squared rate); "1" for numbers
# without a unit (quaternions, unit vectors, norms, counts of turns).
UNITS_ATTR = "units"
MOMENTUM_UNITS = "kg m^2/s"
STATE_UNITS = {
    "euler": "rad, rad, rad, kg m^2/s, kg m^2/s, kg m^2/s",  # phi, theta, psi, p_phi, ...
    "body": "1, 1, 1, 1, kg m^2/s, kg m^2/s, kg m^2/s",  # q0..q3, m1..m3
}
UNITS = {
    "t": "s",
    "euler": "rad",
    "quaternion": "1",
    "momentum": MOMENTUM_UNITS,
    "invariants/energy": "J",
    "invariants/p_phi": MOMENTUM_UNITS,
    "invariants/p_psi": MOMENTUM_UNITS,
    "invariants/norm": "1",
    KOVALEVSKAYA_DATASET: "1/s^4",
    "exact/euler": "rad",
    "exact/axis": "1",
    TURNS_DATASET: "1",
    EXACT_TURNS_DATASET: "1",
    "ensemble/energy": "J",
    "ensemble/p_phi": MOMENTUM_UNITS,
    "ensemble/p_psi": MOMENTUM_UNITS,
    "ensemble/axis": "1",
    "ensemble/axis_spread": "rad",
}
# A checkpoint's arrays are a stepper's own (its state, compensation terms, stage values: the
# state's units, column by column, or the stage derivatives') and its counters; they are read
# back only by a resume, and say so.
CHECKPOINT_UNITS = {"float": "internal (a stepper's own arrays, for resuming)", "int": "1"}
STATE_WIDTHS = {"euler": 6, "body": 7}  # columns of `state` by the run's form
# An ensemble run's own datasets: path -> the shape of one row after the member count
# ("m" stands for the `ensemble_members` attribute).
ENSEMBLE_DATASETS = {
    "ensemble/energy": ("m",),
    "ensemble/p_phi": ("m",),
    "ensemble/p_psi": ("m",),
    "ensemble/axis": ("m", 3),
    "ensemble/axis_spread": (),
}
# Groups a run group may hold, each holding only what is listed above (or a checkpoint).
RUN_SUBGROUPS = ("invariants", "exact", "checkpoint", "ensemble")

# The most rows a dataset may hold: the case files' limit on samples (cases/schema.py,
# MAX_SAMPLES; a test keeps the two equal). A float64 column of this length is 80 MB.
MAX_ROWS = 10_000_000
# The most members an ensemble holds (run/ensemble.py, MAX_MEMBERS; a test keeps them equal).
MAX_MEMBERS = 100_000
# The most numbers one checkpoint entry may hold: a stepper's state is a few hundred numbers;
# scipy's dense output a few thousand. Anything near this is not a checkpoint.
MAX_CHECKPOINT_VALUES = 1_000_000

CHUNK_ROWS = 4096
# gzip is in every HDF5 build (lzf is h5py's own); level 1 with shuffle costs little time.
COMPRESSION = {"compression": "gzip", "compression_opts": 1, "shuffle": True}

# Run attributes by kind. Text is UTF-8; JSON is UTF-8 text holding the given JSON type.
TEXT_ATTRS = ("case", "case_toml", "method", "form", "status", "detail", "created")
JSON_ATTRS = {"settings": dict, "metrics": dict, "versions": dict, "notes": list}
NUMBER_ATTRS = ("horizon", "ensemble_spread")  # finite real numbers
COUNT_ATTRS = ("samples", "ensemble_members", "ensemble_seed")  # whole numbers
RUN_ATTRS = TEXT_ATTRS + tuple(JSON_ATTRS) + NUMBER_ATTRS + COUNT_ATTRS


# --- the one set of messages -------------------------------------------------------------------
# Every message starts with the file's path, so that a user with several files knows which one.


def no_such_file(path) -> UserError:
    return UserError(f"{path}: does not exist")


def is_a_directory(path) -> UserError:
    return UserError(f"{path}: is a directory, not a run file")


def not_a_regular_file(path) -> UserError:
    from topdrift.benchmarks.store.paths import kind

    what = kind(path) or "not a regular file"  # a named pipe (FIFO), a socket, a device
    return UserError(f"{path}: is {what}, not a run file")


def not_hdf5(path, why: str = "no HDF5 signature") -> UserError:
    return UserError(f"{path}: not an HDF5 file ({why})")


def cannot_open(path, why: str) -> UserError:
    return UserError(f"{path}: not a readable HDF5 file ({why})")


def busy(path) -> UserError:
    return UserError(f"{path}: another process is writing this file")


def not_a_run_file(path, found: str) -> UserError:
    return UserError(
        f"{path}: not a topdrift run store (format attribute {found}, expected '{FORMAT}')"
    )


class BadRunFile(UserError):
    """A file that fails the run-file checks or cannot be read where it should be: no command
    goes on with it (a reader that skips runs it cannot use still stops on this)."""


def damaged(path, what: str) -> BadRunFile:
    """The file holds something the format does not allow, or HDF5 cannot read a part of it."""
    return BadRunFile(f"{path}: damaged run file: {what}")


def refused_link(path, what: str) -> BadRunFile:
    """A link, virtual dataset or external storage that would make a command read or write
    another file than the one named."""
    return BadRunFile(
        f"{path}: refused: {what}; a run file must hold its data itself (no command reads or "
        "writes another file through it)"
    )


def first_line(exc: BaseException) -> str:
    text = str(exc)
    return text.splitlines()[0] if text.strip() else type(exc).__name__


# --- values of attributes ----------------------------------------------------------------------


def text_value(value, what: str) -> str:
    """An attribute's value as text: a string, or bytes that are UTF-8. Raises ValueError naming
    what is wrong (the caller adds the file and the attribute)."""
    if isinstance(value, np.ndarray):
        if value.shape != ():
            raise ValueError(f"{what} is an array of shape {value.shape}, not text")
        value = value[()]
    if isinstance(value, (bytes, np.bytes_)):
        try:
            return bytes(value).decode("utf-8")
        except UnicodeDecodeError:
            raise ValueError(f"{what} is not UTF-8 text") from None
    if isinstance(value, str):
        try:
            value.encode("utf-8")  # h5py keeps undecodable bytes as lone surrogates
        except UnicodeEncodeError:
            raise ValueError(f"{what} is not UTF-8 text") from None
        return str(value)
    raise ValueError(f"{what} is {_kind(value)}, not text")


def attr_str(g, name: str, default=None):
    """A text attribute of a group or file, or default where it is absent. For files the reader
    has checked (and in-memory images this topdrift wrote); raises the damaged-file error when
    the value is not UTF-8 text."""
    if name not in g.attrs:
        return default
    try:
        return text_value(g.attrs[name], f"attribute '{name}' of {g.name}")
    except ValueError as exc:
        raise damaged(g.file.filename, str(exc)) from None


def number_value(value, what: str) -> float:
    """A real, finite scalar (integer or float, not a boolean)."""
    if isinstance(value, np.ndarray):
        if value.shape != ():
            raise ValueError(f"{what} is an array of shape {value.shape}, not a number")
        value = value[()]
    if isinstance(value, (bool, np.bool_)) or not isinstance(
        value, (int, float, np.integer, np.floating)
    ):
        raise ValueError(f"{what} is {_kind(value)}, not a number")
    x = float(value)
    if not np.isfinite(x):
        raise ValueError(f"{what} is {x!r}, not a finite number")
    return x


def count_value(value, what: str) -> int:
    """A whole number stored as an integer."""
    if isinstance(value, np.ndarray):
        if value.shape != ():
            raise ValueError(f"{what} is an array of shape {value.shape}, not a whole number")
        value = value[()]
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, np.integer)):
        raise ValueError(f"{what} is {_kind(value)}, not a whole number")
    return int(value)


def _kind(value) -> str:
    if isinstance(value, np.generic):
        return f"of type {value.dtype}"
    return f"of type {type(value).__name__}"


def check_version(found, path) -> int:
    """The one version check: `format_version` must be a whole number this topdrift reads."""
    try:
        version = count_value(found, "format_version")
    except ValueError as exc:
        raise damaged(path, f"{exc} (root attribute)") from None
    if version > max(READABLE_VERSIONS):
        raise UserError(
            f"{path}: run store format_version {version}; this topdrift reads version "
            f"{', '.join(map(str, READABLE_VERSIONS))}: upgrade topdrift"
        )
    if version not in READABLE_VERSIONS:
        raise damaged(path, f"format_version {version}, which never existed")
    return version


def check_format(attrs, path) -> None:
    """The root attributes: `format` names this format, `format_version` is one this topdrift
    reads. attrs: the file's root attributes (h5py AttributeManager or a dict)."""
    if "format" not in attrs:
        raise not_a_run_file(path, "missing")
    try:
        fmt = text_value(attrs["format"], "format")
    except ValueError:
        raise not_a_run_file(path, "not text") from None
    if fmt != FORMAT:
        raise not_a_run_file(path, repr(fmt))
    if "format_version" not in attrs:
        raise damaged(path, "no format_version attribute")
    check_version(attrs["format_version"], path)
