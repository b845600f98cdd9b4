"""Every compiled kernel must load from numba's cache in a second process (DEVELOPERS.md:
kernels call model functions by name; nothing passes dispatchers or builds closures)."""

import os
import subprocess
import sys
from pathlib import Path

WORKLOAD = Path(__file__).with_name("cache_workload.py")


def run_workload():
    env = dict(os.environ, NUMBA_DEBUG_CACHE="1")
    out = subprocess.run(
        [sys.executable, str(WORKLOAD)], env=env, capture_output=True, text=True, timeout=900
    )
    assert out.returncode == 0, out.stderr[-2000:]
    assert "workload done" in out.stdout
    return out.stdout


def test_second_process_compiles_nothing():
    run_workload()  # warms the cache (a cold CI machine compiles here)
    second = run_workload()
    saved = [line for line in second.splitlines() if "saved to" in line]
    loaded = [line for line in second.splitlines() if "loaded from" in line]
    assert loaded, "no kernel was loaded from the cache at all"
    assert not saved, "kernels recompiled in a second process:\n" + "\n".join(saved[:10])
