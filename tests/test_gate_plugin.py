"""The gate against a plug-in method, through the entry-point group, as a user's CI would run it:
a baseline recorded with the method working; then the method refuses every run, fails in its
first steps, or does three times its work per step; each is exit 1 naming the cell and why, and
the unchanged method is exit 0, from any working directory. A removed method's cells fail unless
accepted by name, and a method new since the baseline is reported, not failed.

Every command runs in a fresh process (`python -m topdrift.benchmarks.cli.entry`), with the
plug-in installed as a distribution on PYTHONPATH. The timing half is not what this file checks
(the machine is shared and the rounds are few): the gates pass --time-band 1; the timing rules
have their own tests in test_gate_timing.py.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap

import pytest

# A plug-in of our own: the built-in leapfrog's stepper behind another name, whose behaviour the
# test changes by rewriting the module between runs, as a plug-in author's code change would.
PLUGIN = textwrap.dedent("""
    import numpy as np
    from topdrift.integrators import C_EVALS, Method, MethodInfo, MethodRefused, get

    MODE = {mode!r}

    class Tripled:
        # Advances two shadow copies beside the real run and counts their sub-flow evaluations:
        # three times the work per step, said in the counters.
        def __init__(self, real, shadows):
            self.real, self.shadows = real, shadows

        def advance_to(self, t_end):
            for s in self.shadows:
                before = int(s.counters[C_EVALS])
                s.advance_to(t_end)
                self.real.counters[C_EVALS] += int(s.counters[C_EVALS]) - before
            return self.real.advance_to(t_end)

        def __getattr__(self, name):
            return getattr(self.real, name)

    class Broken:
        def __init__(self, real):
            self.real = real

        def advance_to(self, t_end):
            return 1 // int(self.real.counters[0] * 0)  # a kernel bug: ZeroDivisionError

        def __getattr__(self, name):
            return getattr(self.real, name)

    class Steady(Method):
        info = MethodInfo(name="steady-demo", family="splitting", order=2, symplectic=True,
                          forms=("euler", "body"), control="step", keeps=(),
                          compensated=False, description="leapfrog under another name")

        def check(self, body, form, settings):
            if MODE == "refuse":
                raise MethodRefused("steady-demo: refuses every run (planted)")
            super().check(body, form, settings)

        def start(self, form, params, t0, y0, settings):
            inner = get("leapfrog")
            def one():
                return inner.start(form, params.copy(), t0, np.array(y0), dict(settings))
            if MODE == "triple":
                return Tripled(one(), [one(), one()])
            if MODE == "crash":
                return Broken(one())
            return one()

    def methods():
        return [Steady()]
""")

SWEEP = """
name = "plugged"
description = "a plug-in method and a built-in one, short runs"
cases = ["looping-nutation"]
methods = [{methods}]
forms = ["euler"]
horizon = 1.0
samples = 11
steps = [0.005]
"""
KEY = "looping-nutation steady-demo euler step=0.005"
GATE = ["--time-band", "1"]


def _install(root, mode: str, version: str = "0.1") -> None:
    (root / "steady_plugin.py").write_text(PLUGIN.format(mode=mode))
    dist = root / "steady_plugin-0.1.dist-info"
    dist.mkdir(exist_ok=True)
    (dist / "METADATA").write_text(
        f"Metadata-Version: 2.1\nName: steady-plugin\nVersion: {version}\n"
    )
    (dist / "entry_points.txt").write_text(
        "[topdrift.integrators]\nsteady = steady_plugin:methods\n"
    )


def _sweep(path, *methods) -> None:
    path.write_text(SWEEP.format(methods=", ".join(f'"{m}"' for m in methods)))


@pytest.fixture(scope="module")
def project(tmp_path_factory):
    """(plug-in folder, project folder with sweep and baseline, environment)."""
    root = tmp_path_factory.mktemp("gate_plugin")
    plugins, proj = root / "site", root / "project"
    plugins.mkdir()
    (proj / "ci").mkdir(parents=True)
    _install(plugins, "normal")
    _sweep(proj / "ci" / "plugged.toml", "steady-demo", "leapfrog")
    env = dict(os.environ)
    env["PYTHONPATH"] = str(plugins) + os.pathsep + env.get("PYTHONPATH", "")
    env["PYTHONDONTWRITEBYTECODE"] = "1"  # the module is rewritten within a second
    r = _topdrift(
        env,
        proj,
        "baseline",
        "--sweep",
        "ci/plugged.toml",
        "--out",
        "results/baseline.json",
        "--rounds",
        "4",
    )
    assert r.returncode == 0, r.stderr
    return plugins, proj, env


def _topdrift(env, cwd, *args):
    return subprocess.run(
        [sys.executable, "-m", "topdrift.benchmarks.cli.entry", *args],
        env=env,
        cwd=cwd,
        capture_output=True,
        text=True,
        timeout=600,
    )


def _gate(project, *extra, cwd=None):
    plugins, proj, env = project
    baseline = proj / "results" / "baseline.json"
    return _topdrift(env, cwd or proj, "gate", "--baseline", str(baseline), *GATE, *extra)


def test_the_baseline_names_its_sweep_and_the_plugin(project):
    _, proj, _ = project
    data = json.loads((proj / "results" / "baseline.json").read_text())
    # relative to the baseline's folder, not to where it was recorded from
    assert data["sweep"] == {**data["sweep"], "kind": "file", "source": "../ci/plugged.toml"}
    assert data["plugins"] == {"steady-demo": {"package": "steady-plugin", "version": "0.1"}}
    assert data["runs"][KEY]["status"] == "ok"


def test_unchanged_passes_from_another_directory(project, tmp_path):
    r = _gate(project, cwd=tmp_path)
    assert r.returncode == 0, r.stdout + r.stderr
    assert r.stdout.splitlines()[-1].startswith("gate: pass: no regressions (2 runs")


def test_a_method_that_refuses_fails_with_the_reason(project):
    plugins, _, _ = project
    _install(plugins, "refuse")
    try:
        r = _gate(project)
    finally:
        _install(plugins, "normal")
    assert r.returncode == 1, r.stdout + r.stderr
    row = next(ln for ln in r.stdout.splitlines() if ln.startswith("REGRESSION") and KEY in ln)
    assert "was ok, now refused: steady-demo: refuses every run (planted)" in row
    assert "timing steady-demo euler" in r.stdout  # its timing is gone too, and said so
    assert r.stdout.splitlines()[-1].startswith("gate: FAIL:")


def test_a_method_that_fails_in_its_first_steps_is_failed_not_refused(project):
    plugins, _, _ = project
    _install(plugins, "crash")
    try:
        r = _gate(project)
    finally:
        _install(plugins, "normal")
    assert r.returncode == 1, r.stdout + r.stderr
    row = next(ln for ln in r.stdout.splitlines() if ln.startswith("REGRESSION") and KEY in ln)
    assert "was ok, now failed:" in row and "ZeroDivisionError in the first steps" in row


def test_a_plugin_that_no_longer_loads_fails_naming_it(project):
    plugins, _, _ = project
    module = plugins / "steady_plugin.py"
    module.write_text("raise ImportError('broken by an edit')\n")
    try:
        r = _gate(project)
    finally:
        _install(plugins, "normal")
    assert r.returncode == 1, r.stdout + r.stderr
    assert "plug-in 'steady' (steady_plugin:methods) not loaded: broken by an edit" in r.stderr
    row = next(ln for ln in r.stdout.splitlines() if ln.startswith("REGRESSION") and KEY in ln)
    assert "was ok, now error: unknown method 'steady-demo'" in row


def test_three_times_the_work_fails_on_the_counts(project):
    plugins, _, _ = project
    _install(plugins, "triple")
    try:
        r = _gate(project, "--json")
    finally:
        _install(plugins, "normal")
    assert r.returncode == 1, r.stdout + r.stderr
    doc = json.loads(r.stdout)
    hit = {(f["run"], f["metric"]): f for f in doc["findings"] if f["kind"] == "regression"}
    evals = hit[(KEY, "rhs_evals")]
    assert evals["now"] == 3 * evals["baseline"]
    assert (KEY, "steps") not in hit  # the same steps, three times the work each
    assert not any("leapfrog euler" in run for run, _ in hit)  # the built-in is untouched


def test_a_new_plugin_version_is_reported(project):
    plugins, _, _ = project
    _install(plugins, "normal", version="0.2")
    try:
        r = _gate(project)
    finally:
        _install(plugins, "normal")
    assert r.returncode == 0, r.stdout + r.stderr
    assert "plug-in steady-demo steady-plugin 0.1 -> steady-plugin 0.2" in r.stdout


def test_a_removed_method_fails_unless_accepted_and_a_new_one_is_reported(project):
    _, proj, _ = project
    sweep = proj / "ci" / "plugged.toml"
    _sweep(sweep, "leapfrog", "rk4")
    try:
        r = _gate(project)
        accepted = _gate(project, "--accept-missing", "steady-demo")
    finally:
        _sweep(sweep, "steady-demo", "leapfrog")
    assert r.returncode == 1, r.stdout + r.stderr
    row = next(ln for ln in r.stdout.splitlines() if ln.startswith("REGRESSION") and KEY in ln)
    assert "was ok, now missing" in row
    assert accepted.returncode == 0, accepted.stdout + accepted.stderr
    out = accepted.stdout
    assert "accepted as missing (--accept-missing steady-demo): 2 cell(s):" in out
    assert KEY in out and "timing steady-demo euler" in out
    assert "method rk4 is new since the baseline: 1 run(s), reported, not gated" in out
    assert "changed since the baseline was recorded" in out
