"""Where numba keeps topdrift's compiled kernels: a folder named by a digest of every kernel
source file, so that a cached kernel is never used with code other than the code it came from.

Why: numba (0.68) keys a cached kernel on its own source file only (its modification time and
size). A kernel that inlines or calls one from another file keeps its old machine code, the old
callee compiled in, after the callee's file changes; a stale cache once gave a wrong dop853 after
the rotor change (measured: wrong end states, no error). A digest over the contents of all the
files that hold kernels changes with any of them, and the kernels are then compiled again into a
new folder: slower after an edit, never wrong. The plug-in fields' dispatch module and sources
(field_plugins.py) are part of the digest for the same reason: the kernels inline the dispatch,
which calls the plug-ins' functions.

The folder: $NUMBA_CACHE_DIR/topdrift-<digest> when that variable is set, else
$XDG_CACHE_HOME/topdrift/numba/<digest> (~/.cache/topdrift/numba/<digest>). Folders of other
digests that nobody used for STALE_DAYS are removed when a new folder is made; a folder in use
by another checkout is left alone. TOPDRIFT_KERNEL_CACHE=off leaves numba's own default (a
__pycache__ beside each source file, keyed per file) for whoever wants it.

The folder is also exported as NUMBA_CACHE_DIR, so that child processes (sweep workers) use
the same one: a NUMBA_CACHE_DIR that already names this digest's folder is taken as it is.

This module must run before any kernel is decorated: the packages' __init__ files import it
first. numba reads config.CACHE_DIR when a cached function is decorated.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import time
from pathlib import Path

import numba.core.config as numba_config

from . import field_plugins

ENV_SWITCH = "TOPDRIFT_KERNEL_CACHE"
STALE_DAYS = 14
ROOTS = ("models", "integrators", "benchmarks")
# Text that marks a file as one numba compiles from (decorators and the numba imports).
MARKERS = (b"njit", b"numba")


def source_root() -> Path:
    """The folder that holds models/, integrators/ and benchmarks/ (the checkout, or the
    installed topdrift package)."""
    return Path(__file__).resolve().parent.parent


def kernel_digest(root: Path | None = None) -> str:
    """A digest of the names and contents of every .py file under the three roots that mentions
    numba, in a fixed order, and of the plug-in fields' dispatch module and sources: it changes
    when any kernel's code, or code it can inline, does."""
    root = source_root() if root is None else root
    h = hashlib.sha256()
    for sub in ROOTS:
        base = root / sub
        if not base.is_dir():
            continue
        for path in sorted(base.rglob("*.py")):
            data = path.read_bytes()
            if not any(m in data for m in MARKERS):
                continue
            h.update(str(path.relative_to(root)).encode())
            h.update(b"\0")
            h.update(data)
            h.update(b"\0")
    h.update(numba_config.__file__.encode())  # another numba install is another cache
    # the plug-in fields: their dispatch module's text and their sources (field_plugins.py)
    h.update(field_plugins.source_digest_bytes())
    return h.hexdigest()[:16]


def cache_folder(digest: str, environ=os.environ) -> Path:
    user = environ.get("NUMBA_CACHE_DIR")
    if user and Path(user).name in (digest, f"topdrift-{digest}"):
        return Path(user)  # set by a parent process of the same code (a pool worker's parent)
    if user:
        return Path(user) / f"topdrift-{digest}"
    base = environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "topdrift" / "numba" / digest


def prune(folder: Path, stale_days: float = STALE_DAYS) -> list[Path]:
    """Remove the sibling digest folders of `folder` untouched for stale_days; return them.
    Only folders under a topdrift-owned parent are considered (never a user's NUMBA_CACHE_DIR
    contents other than topdrift-* folders)."""
    parent = folder.parent
    if not parent.is_dir():
        return []
    cutoff = time.time() - stale_days * 86400.0
    removed = []
    for other in parent.iterdir():
        if other == folder or not other.is_dir():
            continue
        if parent.name != "numba" and not other.name.startswith("topdrift-"):
            continue
        try:
            newest = max((p.stat().st_mtime for p in other.rglob("*")), default=0.0)
            newest = max(newest, other.stat().st_mtime)
            if newest < cutoff:
                shutil.rmtree(other, ignore_errors=True)
                removed.append(other)
        except OSError:
            continue  # another process is at work there: leave it
    return removed


def configure() -> Path | None:
    """Point numba's cache at this code's folder; return it (None when switched off)."""
    if os.environ.get(ENV_SWITCH, "").lower() in ("off", "0", "no"):
        return None
    folder = cache_folder(kernel_digest())
    try:
        fresh = not folder.exists()
        folder.mkdir(parents=True, exist_ok=True)
        if fresh:
            prune(folder)
    except OSError:
        return None  # an unwritable home: numba's own default (or no cache) stays
    numba_config.CACHE_DIR = str(folder)
    # In the environment too: numba re-reads its NUMBA_* variables whenever one of them changes
    # (and would reset CACHE_DIR), and worker processes of a sweep inherit the same folder.
    os.environ["NUMBA_CACHE_DIR"] = str(folder)
    return folder


FOLDER = configure()
