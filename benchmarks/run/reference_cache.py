"""The on-disk cache of extended-precision references: one .npz file of plain arrays per
(case content, start, sample times, reference settings), so that a reference is built once and
every later `pick` or `describe` of the case reads it in milliseconds.

Where: $TOPDRIFT_REFERENCE_CACHE if set, else $XDG_CACHE_HOME/topdrift/references, else
~/.cache/topdrift/references. A file is written to a temporary name and renamed, so a reader
never sees half of one; a file that does not read back as what its name promises (damaged, of
another version, other times) is built again, never trusted. Files are data: numbers and two
short texts, read with allow_pickle=False.
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
import zipfile
import zlib
from pathlib import Path

import numpy as np

CACHE_ENV = "TOPDRIFT_REFERENCE_CACHE"
CACHE_VERSION = 1  # bump when the stored layout changes
ACCURACY_KEYS = ("axis", "attitude", "momentum")
COST_KEYS = ("steps", "check_steps", "wall_s", "check_wall_s")


def cache_dir() -> Path:
    env = os.environ.get(CACHE_ENV)
    if env:
        return Path(env)
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "topdrift" / "references"


def reference_key(
    case_text: str, body, y0: np.ndarray, horizon: float, samples: int, provider: dict
) -> str:
    """A stable hash of everything the reference's numbers depend on: the case file's text, the
    body and start actually integrated (a built body such as the demo wheel is computed, not
    written in the file), the sample times and the provider's name, version and settings."""
    key = json.dumps(
        {
            "cache_version": CACHE_VERSION,
            "case_text": case_text,
            "body": [repr(float(body.mass)), repr(float(body.gravity))]
            + [repr(float(v)) for v in (*body.inertia, *body.com)],
            "y0": [repr(float(v)) for v in y0],
            "horizon": repr(float(horizon)),
            "samples": int(samples),
            "provider": provider,
        },
        sort_keys=True,
    )
    return hashlib.sha256(key.encode()).hexdigest()[:24]


def cache_path(key: str) -> Path:
    return cache_dir() / f"reference-{key}.npz"


def load(key: str, times: np.ndarray) -> dict | None:
    """The cached entry for `key` as plain values, or None when there is none or it does not
    hold what the key promises (then it is built again)."""
    path = cache_path(key)
    try:
        with np.load(path, allow_pickle=False) as z:
            entry = {name: z[name] for name in z.files}
    except (OSError, ValueError, EOFError, KeyError, zipfile.BadZipFile, zlib.error):
        return None  # missing or damaged: built again
    try:
        if int(entry["cache_version"]) != CACHE_VERSION or str(entry["key"]) != key:
            return None
        t, states = entry["times"], entry["states"]
        acc, part, cost = entry["accuracy"], entry["parting"], entry["cost"]
        if t.dtype != np.float64 or not np.array_equal(t, times):
            return None
        if states.dtype != np.float64 or states.shape != (times.shape[0], 7):
            return None
        if acc.shape != (len(ACCURACY_KEYS),) or part.shape != acc.shape:
            return None
        if cost.shape != (len(COST_KEYS),):
            return None
        if not (np.all(np.isfinite(states)) and np.all(np.isfinite(acc)) and np.all(acc > 0)):
            return None
        return {
            "times": t,
            "states": states,
            "accuracy": dict(zip(ACCURACY_KEYS, map(float, acc), strict=True)),
            "parting": dict(zip(ACCURACY_KEYS, map(float, part), strict=True)),
            "cost": dict(zip(COST_KEYS, map(float, cost), strict=True)),
            "method": str(entry["method"]),
        }
    except (KeyError, ValueError, TypeError):
        return None


def store(key: str, ref) -> str | None:
    """Write `ref` (integrators.extended.reference.Reference) under `key`; None when written,
    else why not (the reference is still good for this process: a cache that cannot be written
    is said, not fatal)."""
    d = cache_dir()
    try:
        d.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=".reference-", suffix=".npz", dir=d)
    except OSError as exc:
        return f"not cached: cannot write in {d}: {exc.strerror or exc}"
    try:
        with os.fdopen(fd, "wb") as f:
            np.savez(
                f,
                cache_version=np.int64(CACHE_VERSION),
                key=np.str_(key),
                method=np.str_(ref.method),
                times=np.asarray(ref.times, dtype=np.float64),
                states=np.asarray(ref.states, dtype=np.float64),
                accuracy=np.array([ref.accuracy[k] for k in ACCURACY_KEYS]),
                parting=np.array([ref.parting[k] for k in ACCURACY_KEYS]),
                cost=np.array([float(ref.cost[k]) for k in COST_KEYS]),
            )
        os.replace(tmp, cache_path(key))
    except OSError as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        return f"not cached: writing in {d} failed: {exc.strerror or exc}"
    return None
