"""The kernel cache is keyed on the code: a digest over every kernel source file, so that a
kernel cached before a callee in another file changed is never used after it (numba keys its own
cache on the caller's file only; DEVELOPERS.md, "A stale cache to know of")."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

from topdrift.models import kernel_cache


def _tree(tmp_path: Path) -> Path:
    root = tmp_path / "src"
    for sub in kernel_cache.ROOTS:
        (root / sub).mkdir(parents=True)
    (root / "models" / "k.py").write_text(
        "from numba import njit\n@njit(cache=True)\ndef f(x):\n    return x\n"
    )
    (root / "integrators" / "g.py").write_text(
        "from numba import njit\n@njit(cache=True)\ndef g(x):\n    return 2*x\n"
    )
    (root / "benchmarks" / "cli.py").write_text("def main():\n    return 0\n")
    return root


def test_digest_follows_kernel_files_only(tmp_path):
    root = _tree(tmp_path)
    d0 = kernel_cache.kernel_digest(root)
    assert d0 == kernel_cache.kernel_digest(root)  # stable
    # a file that numba never compiles from does not change the key (no needless recompiles)
    (root / "benchmarks" / "cli.py").write_text("def main():\n    return 1\n")
    assert kernel_cache.kernel_digest(root) == d0
    # a callee's body changing in another file changes every kernel's key
    (root / "models" / "k.py").write_text(
        "from numba import njit\n@njit(cache=True)\ndef f(x):\n    return x + 1\n"
    )
    d1 = kernel_cache.kernel_digest(root)
    assert d1 != d0
    # a new kernel file, or a renamed one, too
    shutil.move(root / "integrators" / "g.py", root / "integrators" / "h.py")
    assert kernel_cache.kernel_digest(root) != d1


def test_cache_folder_rules(tmp_path):
    d = "0123456789abcdef"
    env = {"XDG_CACHE_HOME": str(tmp_path)}
    assert kernel_cache.cache_folder(d, env) == tmp_path / "topdrift" / "numba" / d
    env = {"NUMBA_CACHE_DIR": str(tmp_path / "mine")}
    assert kernel_cache.cache_folder(d, env) == tmp_path / "mine" / f"topdrift-{d}"
    # a child process of the same code inherits the parent's folder and keeps it
    env = {"NUMBA_CACHE_DIR": str(tmp_path / "mine" / f"topdrift-{d}")}
    assert kernel_cache.cache_folder(d, env) == tmp_path / "mine" / f"topdrift-{d}"


def test_prune_removes_only_stale_topdrift_folders(tmp_path):
    parent = tmp_path / "cache"
    keep, old, recent, foreign = (
        parent / n for n in ("topdrift-a", "topdrift-b", "topdrift-c", "other")
    )
    for f in (keep, old, recent, foreign):
        f.mkdir(parents=True)
        (f / "x.nbi").write_bytes(b"1")
    past = time.time() - 30 * 86400
    for f in (old, foreign):
        os.utime(f / "x.nbi", (past, past))
        os.utime(f, (past, past))
    removed = kernel_cache.prune(keep, stale_days=14)
    assert removed == [old]
    assert keep.exists() and recent.exists() and foreign.exists() and not old.exists()


def test_packages_point_numba_at_the_digest_folder(tmp_path):
    """Whatever topdrift package is imported first, its kernels are decorated with the cache
    pointed at this code's folder, and the folder is exported to child processes."""
    env = dict(os.environ, NUMBA_CACHE_DIR=str(tmp_path))
    code = (
        "import topdrift.benchmarks.run.sampling as s, numba.core.config as c, os;"
        "from topdrift.models import kernel_cache as k;"
        "print(c.CACHE_DIR); print(os.environ['NUMBA_CACHE_DIR']); print(k.kernel_digest())"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True
    )
    cache_dir, exported, digest = out.stdout.split()
    assert cache_dir == exported == str(tmp_path / f"topdrift-{digest}")
