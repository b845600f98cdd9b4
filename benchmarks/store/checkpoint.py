"""A run's checkpoint group, `checkpoint/<part>/<entry>`: plain numbers in, plain numbers out.

An entry is a float64 or int64 number or a short text (an attribute of its part's group; text
as fixed-length UTF-8 bytes, so that its size is known before it is read) or a float64 or int64
array (a dataset). The reader is given a template, the entries the running code would write now
(part -> name -> value), and reads only those names, each only after its place, dtype and shape
are found to be the template's. So nothing in a file decides what is read, how much, or as what:
no object, variable-length or opaque dtype is ever read, no link is followed, no array larger
than the template's is allocated, and a name the code does not write (a pickled solver of an
older layout, say) is refused rather than skipped. Every refusal is one CheckpointRefused line
naming the run and the entry.
"""

from __future__ import annotations

import h5py
import numpy as np

from topdrift.benchmarks.errors import UserError

GROUP = "checkpoint"
ENTRY_DTYPES = (np.dtype(np.float64), np.dtype(np.int64))
# The longest text entry (a method's name, its settings as JSON): a few hundred bytes.
MAX_TEXT_BYTES = 4096


class CheckpointRefused(UserError):
    """A checkpoint that is not what this code writes; the run cannot resume from it."""


def _text_bytes(value: str) -> np.ndarray:
    raw = value.encode("utf-8")
    if len(raw) > MAX_TEXT_BYTES:
        raise TypeError(f"a checkpoint text entry holds at most {MAX_TEXT_BYTES} bytes")
    return np.array(raw, dtype=f"S{max(1, len(raw))}")


def entry_layout(value) -> tuple[str, np.dtype | str, tuple[int, ...]]:
    """(where, dtype, shape) of an entry: ("attr", ...) for a number or a text ("text" for the
    dtype), ("dataset", ...) for an array. Raises TypeError for anything else (a bool, an
    object, an array of another dtype): checkpoints hold numbers and text only."""
    if isinstance(value, str):
        _text_bytes(value)
        return "attr", "text", ()
    if isinstance(value, np.ndarray):
        if value.dtype in ENTRY_DTYPES:
            return "dataset", value.dtype, value.shape
    elif isinstance(value, (bool, np.bool_)):
        pass
    elif isinstance(value, (float, np.floating)) and np.dtype(type(value)) == np.float64:
        return "attr", np.dtype(np.float64), ()
    elif isinstance(value, (int, np.integer)) and -(2**63) <= int(value) < 2**63:
        if not isinstance(value, np.integer) or np.dtype(type(value)) == np.int64:
            return "attr", np.dtype(np.int64), ()
    shown = f"array of {value.dtype}" if isinstance(value, np.ndarray) else type(value).__name__
    raise TypeError(
        f"a checkpoint entry is a float64 or int64 number or array or a text, not a {shown}"
    )


def write_checkpoint(run: h5py.Group, parts: dict[str, dict], units: dict | None = None) -> None:
    """Replace the run's checkpoint with parts (part name -> entry name -> value). units: the
    `units` attribute of its arrays by kind ("float", "int"), None for none (version 1)."""
    # Checked before the old checkpoint is deleted.
    layouts = {(p, k): entry_layout(v) for p, entries in parts.items() for k, v in entries.items()}
    if GROUP in run:
        del run[GROUP]
    cp = run.create_group(GROUP)
    for part, entries in parts.items():
        sub = cp.create_group(part)
        for key, value in entries.items():
            where, dtype, _ = layouts[(part, key)]
            if where == "dataset":
                ds = sub.create_dataset(key, data=value)
                if units is not None:
                    ds.attrs["units"] = units["int" if dtype == np.int64 else "float"]
            elif dtype == "text":
                sub.attrs.create(key, _text_bytes(value))
            else:
                sub.attrs.create(key, value, dtype=dtype)


def _names(g: h5py.Group) -> set[str]:
    return set(g.attrs.keys()) | set(g.keys())


def _hard_member(g: h5py.Group, name: str, where: str, refuse):
    link = g.get(name, getlink=True)
    if not isinstance(link, h5py.HardLink):
        refuse(f"{where} is a link ({type(link).__name__}), not an object of this file")
    return g[name]


def read_checkpoint(run: h5py.Group, template: dict[str, dict], run_id: str) -> dict | None:
    """The checkpoint's entries (part -> name -> value; numbers as Python float and int, arrays
    as numpy arrays), None when the run has none. Raises CheckpointRefused unless it holds
    exactly the template's parts and names, each in the template's place, dtype and shape."""

    path = run.file.filename

    def refuse(what: str):
        raise CheckpointRefused(
            f"{path}: run {run_id}: checkpoint {what}; it cannot be resumed (--force runs it again)"
        )

    if GROUP not in run and run.get(GROUP, getlink=True) is None:
        return None
    try:
        cp = _hard_member(run, GROUP, "group", refuse)
        if not isinstance(cp, h5py.Group):
            refuse("is not a group")
        _same_names(_names(cp), set(template), "", refuse)
        out: dict[str, dict] = {}
        for part, entries in template.items():
            sub = _hard_member(cp, part, part, refuse)
            if not isinstance(sub, h5py.Group):
                refuse(f"{part} is not a group")
            _same_names(_names(sub), set(entries), f"{part}/", refuse)
            out[part] = {
                key: _read_entry(sub, key, value, f"{part}/{key}", refuse)
                for key, value in entries.items()
            }
        return out
    except CheckpointRefused:
        raise
    except (OSError, RuntimeError, KeyError, ValueError, TypeError) as exc:
        # A part HDF5 cannot read (damaged bytes, an unsupported filter): the same one line.
        text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        refuse(f"cannot be read ({text})")


def _same_names(have: set[str], want: set[str], prefix: str, refuse) -> None:
    missing = sorted(want - have)
    if missing:
        refuse(f"lacks {prefix}{missing[0]}")
    extra = sorted(have - want)
    if extra:
        refuse(f"holds {prefix}{extra[0]}, which this run's method does not write")


def _read_entry(g: h5py.Group, key: str, example, where: str, refuse):
    place, dtype, shape = entry_layout(example)
    if place == "attr":
        if key not in g.attrs:
            refuse(f"{where} should be an attribute (a number or a text)")
        aid = g.attrs.get_id(key)
        if dtype == "text":
            t = aid.dtype
            if t.kind != "S" or t.itemsize > MAX_TEXT_BYTES or aid.shape != ():
                refuse(f"{where} is {_shown(t, aid.shape)}, expected a fixed-length UTF-8 text")
            try:
                return bytes(g.attrs[key]).decode("utf-8")
            except UnicodeDecodeError:
                refuse(f"{where} is not UTF-8 text")
        if aid.dtype != dtype or aid.shape != ():
            article = "an" if dtype == np.int64 else "a"
            refuse(f"{where} is {_shown(aid.dtype, aid.shape)}, expected {article} {dtype} number")
        return g.attrs[key].item()
    if key in g.attrs:
        refuse(f"{where} should be a dataset (an array)")
    ds = _hard_member(g, key, where, refuse)
    if not isinstance(ds, h5py.Dataset):
        refuse(f"{where} is a group, expected a dataset")
    if ds.dtype != dtype or ds.shape != shape:
        refuse(f"{where} is {_shown(ds.dtype, ds.shape)}, expected {_shown(dtype, shape)}")
    if ds.is_virtual or ds.external:
        refuse(f"{where} keeps its data outside this file")
    return np.asarray(ds[()], dtype=dtype)


def _shown(dtype, shape) -> str:
    if shape is None:
        return f"an empty {dtype} entry"
    return f"{dtype} of shape {tuple(shape)}"
