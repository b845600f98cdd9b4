"""The checks a run file passes before any command reads or writes it.

Two passes over an open file, both reading metadata only (headers and attributes, no samples):

1. check_links: every link in the file is a hard link to an object inside it, reached once; no
   dataset is virtual, keeps its values in another file (external storage) or uses a filter
   that the format does not use. Run first, before anything else is read, so that no command
   follows a link out of the file it was given.
2. check_layout: the root attributes (format, format_version), `runs` a group and every run a
   group; every known attribute of a run of its kind (UTF-8 text, JSON of the right type, a
   finite number, a whole number in range); every known dataset a float64 array (turn counts:
   int64) of its shape,
   with no more rows than the run's `samples` (and exactly that many once it is `ok`); the
   checkpoint a group.

Before a resume, check_resumable goes further into the one run resumed: its checkpoint holds
numbers and text only, of bounded size, and its stored samples can all be read (slice by slice),
so that a damaged chunk is found while the file is still as it was.

A run may lack attributes or datasets (its writer has only begun it): readers mark it
`incomplete`. What is there must be what the format says; anything else is a one-line
UserError naming the file, the object and what is wrong.
"""

from __future__ import annotations

import json
import math

import h5py
import numpy as np

from topdrift.benchmarks.store.format import (
    COUNT_ATTRS,
    ENSEMBLE_DATASETS,
    EXACT_DATASETS,
    FINAL_STATUSES,
    JSON_ATTRS,
    MAX_CHECKPOINT_VALUES,
    MAX_MEMBERS,
    MAX_ROWS,
    NUMBER_ATTRS,
    OPTIONAL_DATASETS,
    REPLACING,
    RUN_SUBGROUPS,
    RUNS,
    SAMPLE_DATASETS,
    STATE_DATASET,
    STATE_WIDTHS,
    STATUS_OK,
    STATUSES,
    TEXT_ATTRS,
    TURN_DATASETS,
    check_format,
    count_value,
    damaged,
    first_line,
    number_value,
    refused_link,
    text_value,
)

# Filters a run file's datasets may use: HDF5's own lossless ones and h5py's lzf. Any other
# filter id would make HDF5 look for a plug-in library by that number.
ALLOWED_FILTERS = {
    h5py.h5z.FILTER_DEFLATE: "gzip",
    h5py.h5z.FILTER_SHUFFLE: "shuffle",
    h5py.h5z.FILTER_FLETCHER32: "fletcher32",
    32000: "lzf",
}
# Integers in JSON beyond this are not counts any run can reach (and overflow a float).
MAX_JSON_INT = 2**63


def check_file(f: h5py.File, path) -> None:
    """Links first (every object header is read there), then the layout."""
    check_links(f, path)
    check_layout(f, path)


# --- pass 1: links -----------------------------------------------------------------------------


def _name(raw: bytes) -> str:
    return raw.decode("utf-8", "replace")


def check_links(f: h5py.File, path) -> None:
    """Walk every group from the root by link, without following any: refuse soft, external and
    user-defined links, objects reached by more than one hard link (a cycle, or two names for
    one object), committed datatypes, and datasets that are virtual, keep their values outside
    the file or use a filter not in ALLOWED_FILTERS."""
    stack = [("", f.id)]
    while stack:
        where, gid = stack.pop()
        for raw in list(gid):  # link names as bytes, in HDF5's order
            full = f"{where}/{_name(raw)}"
            try:
                raw.decode("utf-8")
            except UnicodeDecodeError:
                raise damaged(path, f"the name {full!r} is not UTF-8 text") from None
            info = gid.links.get_info(raw)
            if info.type == h5py.h5l.TYPE_SOFT:
                target = _name(gid.links.get_val(raw))
                raise refused_link(path, f"{full} is a soft link (to {target})")
            if info.type == h5py.h5l.TYPE_EXTERNAL:
                file, obj = (_name(x) for x in gid.links.get_val(raw))
                raise refused_link(path, f"{full} is an external link (to {obj} in {file})")
            if info.type != h5py.h5l.TYPE_HARD:
                raise refused_link(path, f"{full} is a user-defined link (type {info.type})")
            obj = h5py.h5o.get_info(gid, raw)
            if obj.rc != 1:
                raise damaged(path, f"{full} is one object under {obj.rc} names (hard links)")
            if obj.type == h5py.h5o.TYPE_GROUP:
                stack.append((full, h5py.h5g.open(gid, raw)))
            elif obj.type == h5py.h5o.TYPE_DATASET:
                _check_storage(h5py.h5d.open(gid, raw), full, path)
            else:
                raise damaged(path, f"{full} is a committed datatype, not a group or dataset")


def _check_storage(did, full: str, path) -> None:
    plist = did.get_create_plist()
    if plist.get_layout() == h5py.h5d.VIRTUAL:
        raise refused_link(path, f"dataset {full} is virtual (its values live in other files)")
    if plist.get_external_count() > 0:
        name = _name(plist.get_external(0)[0])
        raise refused_link(path, f"dataset {full} keeps its values in the external file {name}")
    for i in range(plist.get_nfilters()):
        code = plist.get_filter(i)[0]
        if code not in ALLOWED_FILTERS:
            raise damaged(path, f"dataset {full} uses filter {code}, which run files do not use")


# --- pass 2: the layout ------------------------------------------------------------------------


def check_layout(f: h5py.File, path) -> None:
    """The root attributes, then every run of /runs and of /replacing (the --force runs kept
    beside their stored ones until complete), each checked as a run."""
    check_format(f.attrs, path)
    for parent in (RUNS, REPLACING):
        if parent in f:  # a file holds no runs yet, and /replacing only while one waits
            _check_runs(f[parent], parent, path)


def _check_runs(runs, parent: str, path) -> None:
    if not isinstance(runs, h5py.Group):
        raise damaged(path, f"/{parent} is a dataset, not a group")
    for raw in list(runs.id):
        run_id = run_name(raw, path)
        g = runs[run_id]
        if not isinstance(g, h5py.Group):
            raise damaged(path, f"run {run_id} is a dataset, not a group")
        check_run(g, run_id, path)


def run_name(raw: bytes, path) -> str:
    """A run group's name as text: UTF-8 and printable (it is printed and written to JSON)."""
    try:
        name = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise damaged(path, f"a run's name {raw!r} is not UTF-8 text") from None
    if not name.isprintable():
        raise damaged(path, f"a run's name {name!r} holds control characters")
    return name


def read_attrs(g: h5py.Group, run_id: str, path) -> dict:
    """The run's known attributes, checked and decoded (JSON ones parsed); absent ones are left
    out. Raises the damaged-file error naming the first that is not of its kind."""
    out = {}
    for name in (*TEXT_ATTRS, *JSON_ATTRS, *NUMBER_ATTRS, *COUNT_ATTRS):
        if name not in g.attrs:
            continue
        what = f"run {run_id}: attribute '{name}'"
        try:
            raw = g.attrs[name]
        except (OSError, TypeError, ValueError) as exc:
            raise damaged(path, f"{what} cannot be read ({first_line(exc)})") from None
        try:
            out[name] = _attr_value(name, raw, what)
        except ValueError as exc:
            raise damaged(path, str(exc)) from None
    return out


def _attr_value(name: str, raw, what: str):
    if name in TEXT_ATTRS:
        v = text_value(raw, what)
        if name == "status" and v not in STATUSES:
            raise ValueError(f"{what} is {v!r}, not one of {', '.join(STATUSES)}")
        if name == "form" and v not in STATE_WIDTHS:
            raise ValueError(f"{what} is {v!r}, not one of {', '.join(STATE_WIDTHS)}")
        return v
    if name in JSON_ATTRS:
        return _json_value(name, text_value(raw, what), what)
    if name in NUMBER_ATTRS:
        v = number_value(raw, what)
        if name == "horizon" and not v > 0.0:
            raise ValueError(f"{what} is {v!r}, not a positive time")
        return v
    v = count_value(raw, what)
    if name == "samples" and not 2 <= v <= MAX_ROWS:
        raise ValueError(f"{what} is {v}, not between 2 and {MAX_ROWS}")
    if name == "ensemble_members" and not 2 <= v <= MAX_MEMBERS:
        raise ValueError(f"{what} is {v}, not between 2 and {MAX_MEMBERS}")
    return v


# Metrics that are text where a number could not be had (the reason a drift law is unknown).
TEXT_METRICS = frozenset({"energy_drift_unknown"})
# Metrics that are a pair of times (the window the drift law was fitted on).
SPAN_METRICS = frozenset({"energy_drift_window"})


def _json_value(name: str, text: str, what: str):
    try:
        v = json.loads(text)
    except (ValueError, RecursionError) as exc:
        raise ValueError(f"{what} is not valid JSON ({first_line(exc)})") from None
    kind = JSON_ATTRS[name]
    if not isinstance(v, kind):
        raise ValueError(f"{what} holds a JSON {type(v).__name__}, not a {kind.__name__}")
    if name == "settings":
        for k, x in v.items():
            if not _is_number(x) or not math.isfinite(x):
                raise ValueError(f"{what}: '{k}' is {x!r}, not a finite number")
    elif name == "metrics":
        for k, x in v.items():
            if x is None or _is_number(x):
                continue
            if k in TEXT_METRICS and isinstance(x, str):
                continue  # why a quantity could not be measured, in words
            if k in SPAN_METRICS and isinstance(x, list) and len(x) == 2:
                if all(_is_number(e) and math.isfinite(e) for e in x):
                    continue  # a time window [from, to]
            raise ValueError(f"{what}: '{k}' is {x!r}, not a number or null")
    elif name == "versions":
        for k, x in v.items():
            if x is not None and not isinstance(x, str):
                raise ValueError(f"{what}: '{k}' is {x!r}, not text or null")
    else:  # notes
        for x in v:
            if not isinstance(x, str):
                raise ValueError(f"{what} holds {x!r}, not text")
    return v


def _is_number(x) -> bool:
    if isinstance(x, bool):
        return False
    if isinstance(x, int):
        return abs(x) < MAX_JSON_INT
    return isinstance(x, float)


def check_run(g: h5py.Group, run_id: str, path) -> dict:
    """One run group: its attributes, its groups' kinds, its datasets' dtypes, shapes and row
    counts, its checkpoint. Returns the decoded attributes."""
    attrs = read_attrs(g, run_id, path)
    for sub in RUN_SUBGROUPS:
        if sub in g and not isinstance(g[sub], h5py.Group):
            raise damaged(path, f"run {run_id}: '{sub}' is a dataset, not a group")
    rows = {}
    for name, shape in expected_shapes(attrs).items():
        if name not in g:
            continue
        ds = g[name]
        what = f"run {run_id}: '{name}'"
        if not isinstance(ds, h5py.Dataset):
            raise damaged(path, f"{what} is a group, not a dataset")
        if name in TURN_DATASETS:
            if ds.dtype.kind != "i" or ds.dtype.itemsize != 8:
                raise damaged(path, f"{what} has dtype {ds.dtype}, not int64 (whole turns)")
        elif ds.dtype.kind != "f" or ds.dtype.itemsize != 8:
            raise damaged(path, f"{what} has dtype {ds.dtype}, not float64")
        if ds.ndim != 1 + len(shape) or any(
            want is not None and have != want
            for have, want in zip(ds.shape[1:], shape, strict=True)
        ):
            want = ", ".join(["n", *("?" if w is None else str(w) for w in shape)])
            raise damaged(path, f"{what} has shape {ds.shape}, not ({want})")
        rows[name] = int(ds.shape[0])
    _check_rows(rows, attrs, run_id, path)
    return attrs


def expected_shapes(attrs: dict) -> dict:
    """Every dataset a run may hold -> the shape of one of its rows (None: any length)."""
    out = {name: () if k == 0 else (k,) for name, k in SAMPLE_DATASETS.items()}
    out[STATE_DATASET] = (STATE_WIDTHS.get(attrs.get("form")),)
    out.update({name: (k,) for name, k in EXACT_DATASETS.items()})
    out.update({name: () if k == 0 else (k,) for name, k in OPTIONAL_DATASETS.items()})
    out.update({name: (k,) for name, k in TURN_DATASETS.items()})
    members = attrs.get("ensemble_members")
    for name, row in ENSEMBLE_DATASETS.items():
        out[name] = tuple(members if d == "m" else d for d in row)
    return out


def _check_rows(rows: dict, attrs: dict, run_id: str, path) -> None:
    limit = attrs.get("samples", MAX_ROWS)
    for name, n in rows.items():
        if n > limit:
            said = f"its {limit} samples" if "samples" in attrs else f"{MAX_ROWS} rows"
            raise damaged(path, f"run {run_id}: '{name}' declares {n} rows, more than {said}")
    status = attrs.get("status")
    if status in FINAL_STATUSES:
        # A finished run holds its samples: its times at least and, when it names its sample
        # count (every run the writer makes does), every dataset the writer makes, the exact
        # solution's both or neither.
        needed = ["t"]
        if "samples" in attrs:
            needed += [*SAMPLE_DATASETS, STATE_DATASET]
            if any(name in rows for name in EXACT_DATASETS):
                needed += list(EXACT_DATASETS)
        missing = [name for name in needed if name not in rows]
        if missing:
            raise damaged(path, f"run {run_id} is {status} but has no dataset '{missing[0]}'")
    if status in FINAL_STATUSES and rows:
        # A finished run's datasets were appended batch by batch, all together.
        counts = sorted(set(rows.values()))
        if len(counts) > 1:
            a = min(rows, key=rows.get)
            b = max(rows, key=rows.get)
            raise damaged(
                path,
                f"run {run_id} is {status} but '{a}' holds {rows[a]} rows and '{b}' {rows[b]}",
            )
        if status == STATUS_OK and "samples" in attrs and counts[0] != attrs["samples"]:
            raise damaged(
                path,
                f"run {run_id} is ok but holds {counts[0]} of its {attrs['samples']} samples",
            )


def check_checkpoint(cp, run_id: str, path) -> None:
    """Numbers and text only: every part a group of attributes (scalars) and numeric arrays."""
    for part_name in list(cp):
        part = cp[part_name]
        where = f"run {run_id}: checkpoint/{part_name}"
        if not isinstance(part, h5py.Group):
            raise damaged(path, f"{where} is a dataset, not a group")
        for key in list(part.attrs):
            try:
                v = part.attrs[key]
            except (OSError, TypeError, ValueError) as exc:
                why = first_line(exc)
                raise damaged(path, f"{where}: '{key}' cannot be read ({why})") from None
            try:
                if isinstance(v, (str, bytes, np.bytes_)):
                    text_value(v, f"{where}: '{key}'")
                else:
                    _checkpoint_number(v, f"{where}: '{key}'")
            except ValueError as exc:
                raise damaged(path, str(exc)) from None
        for key in list(part):
            ds = part[key]
            what = f"{where}/{key}"
            if not isinstance(ds, h5py.Dataset):
                raise damaged(path, f"{what} is a group, not an array")
            if ds.dtype.kind not in "fiub" or ds.dtype.itemsize > 8:
                raise damaged(path, f"{what} has dtype {ds.dtype}, not numbers")
            if ds.size > MAX_CHECKPOINT_VALUES:
                raise damaged(path, f"{what} holds {ds.size} values, too many for a checkpoint")


def _checkpoint_number(v, what: str) -> None:
    """A real scalar (NaN and infinities allowed: a stepper may keep them, say as no-limit)."""
    if isinstance(v, np.ndarray):
        raise ValueError(f"{what} is an array attribute, not a number")
    if isinstance(v, (bool, np.bool_)) or not isinstance(v, (int, float, np.integer, np.floating)):
        raise ValueError(f"{what} is of type {type(v).__name__}, not a number")


# --- samples -----------------------------------------------------------------------------------

READ_ROWS = 1 << 16  # rows per read while checking samples: memory stays a few MB


def check_resumable(g: h5py.Group, run_id: str, path) -> None:
    """The checkpoint of a run about to be resumed (if any) and its stored samples."""
    if "checkpoint" in g:
        check_checkpoint(g["checkpoint"], run_id, path)
    check_samples(g, run_id, path)


def check_samples(g: h5py.Group, run_id: str, path) -> None:
    """Read every stored row of the run's datasets once (in slices), so that a chunk HDF5 cannot
    read (bytes overwritten, a file cut short) is found before anything is written."""
    datasets = (
        *SAMPLE_DATASETS,
        STATE_DATASET,
        *EXACT_DATASETS,
        *OPTIONAL_DATASETS,
        *TURN_DATASETS,
    )
    for name in (*datasets, *ENSEMBLE_DATASETS):
        if name not in g:
            continue
        ds = g[name]
        try:
            for lo in range(0, ds.shape[0], READ_ROWS):
                ds[lo : lo + READ_ROWS]
        except (OSError, RuntimeError, ValueError) as exc:
            raise damaged(
                path, f"run {run_id}: '{name}' cannot be read ({first_line(exc)})"
            ) from None
