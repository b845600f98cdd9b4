"""The pytest plugin: the topdrift_check fixture from a user's own test module (run through
pytester in a fresh pytest session), and a start-up that imports nothing heavy."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

# The inner sessions run in this process, and pytester drops the modules they import when each
# ends; numpy cannot be imported twice in a process, so what the fixture imports is loaded here.
import topdrift.benchmarks.cases.library  # noqa: F401
import topdrift.benchmarks.run.in_memory  # noqa: F401
import topdrift.benchmarks.run.runner  # noqa: F401
from topdrift.models.quaternion import from_euler

# numba finishes its own imports (scipy.linalg, numpy.fft, its typing of numpy's polynomials)
# the first time it loads or compiles a kernel in a process; done here, before any inner session,
# so that none of them is dropped by pytester and imported a second time (the test failed when it
# ran alone, with "cannot load module more than once per process").
from_euler(0.1, 0.2, 0.3)

pytest_plugins = ["pytester"]

EXAMPLE = Path(__file__).parent / "plugin_example" / "user_suite.py"


def test_fixture_in_a_user_suite(pytester):
    pytester.makepyfile(test_user_suite=EXAMPLE.read_text(encoding="utf-8"))
    result = pytester.runpytest("-q", "-p", "no:cacheprovider")
    result.assert_outcomes(passed=3, failed=1)
    out = result.stdout.str()
    # the failure says which bound broke and by how much, without a traceback into the plugin
    result.stdout.fnmatch_lines(
        [
            "*topdrift_check: rk4 on looping-nutation (body form, step 0.001): 1 bound(s) broken",
            "*energy: relative energy error energy_rel_max = * > 1e-15 (* x the bound)",
        ]
    )
    assert "pytest_plugin.py" not in out
    assert "axis" not in out.split("1 bound(s) broken", 1)[1].split("\n")[1]


def test_unknown_bound_and_bad_method(pytester):
    pytester.makepyfile(
        test_bad="""
        import pytest

        def test_unknown_bound(topdrift_check):
            with pytest.raises(TypeError, match="unknown bound"):
                topdrift_check("leapfrog", step=1e-3, horizon=0.1, energy_rel=1e-3)

        def test_unknown_method(topdrift_check):
            topdrift_check("no-such-method", step=1e-3, horizon=0.1)

        def test_bound_on_what_a_form_lacks(topdrift_check):
            # the Euler form carries no quaternion: a norm bound cannot be checked
            topdrift_check("leapfrog", form="euler", step=1e-3, horizon=0.1, samples=11,
                           norm=1e-12)
        """
    )
    result = pytester.runpytest("-q", "-p", "no:cacheprovider")
    result.assert_outcomes(passed=1, failed=2)
    result.stdout.fnmatch_lines(
        [
            "*topdrift_check: no-such-method on looping-nutation: cannot run: unknown method*",
            "*norm: norm_abs_max not measured in this run*",
        ]
    )


def test_plugin_start_up_imports_nothing_heavy():
    code = (
        "import sys, topdrift.benchmarks.pytest_plugin; "
        "heavy = [m for m in ('numpy', 'numba', 'scipy', 'h5py', 'topdrift.integrators', "
        "'topdrift.models', 'topdrift.benchmarks.run.runner') if m in sys.modules]; print(heavy)"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout
    assert out.strip() == "[]"
