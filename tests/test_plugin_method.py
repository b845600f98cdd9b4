"""An outside method plugs in through the entry-point group `topdrift.integrators` and runs
through the same contract, runner and store as the built-in ones."""

import json
import os
import subprocess
import textwrap

import numpy as np
from run_files import topdrift_cmd

from topdrift.integrators import Method, MethodInfo, Stepper, all_methods, get, register

# A tiny outside method: the explicit midpoint rule (second order; a standard textbook method,
# e.g. Hairer, Norsett and Wanner, Solving ODEs I, sec. II.1), written in plain Python on the
# models' right-hand side, as a third party would.
PLUGIN = textwrap.dedent("""
    import numpy as np
    from dataclasses import dataclass
    from topdrift.integrators import Method, MethodInfo, Stepper, MethodRefused, ST_OK
    from topdrift.models.dynamics import rhs

    @dataclass
    class MidpointStepper(Stepper):
        h: float = 0.0

        def advance_to(self, t_end):
            n = round((t_end - self.t) / self.h)
            if abs((t_end - self.t) - n * self.h) > 1e-9 * self.h * max(n, 1):
                raise MethodRefused("midpoint-demo: not on the step grid")
            k = np.empty_like(self.y)
            for _ in range(n):
                rhs(self.form, self.y, self.params, k)
                mid = self.y + 0.5 * self.h * k
                rhs(self.form, mid, self.params, k)
                self.y = self.y + self.h * k
                self.counters[0] += 1
                self.counters[2] += 2
            self.t = t_end
            return ST_OK

        def snapshot(self):
            return {"t": self.t, "y": self.y.copy(), "counters": self.counters.copy()}

        def restore(self, snap):
            self.t, self.y = float(snap["t"]), np.array(snap["y"])
            self.counters[:] = snap["counters"]

    class Midpoint(Method):
        info = MethodInfo(name="midpoint-demo", family="external", order=2, symplectic=False,
                          forms=("body", "euler"), control="step", keeps=(),
                          compensated=False, description="explicit midpoint rule (plug-in)")

        def start(self, form, params, t0, y0, settings):
            return MidpointStepper(form, params, t0, np.array(y0, dtype=float),
                                   h=settings["step"])

    def methods():
        return [Midpoint()]
""")


def _install_plugin(tmp_path):
    (tmp_path / "midpoint_plugin.py").write_text(PLUGIN)
    dist = tmp_path / "midpoint_plugin-0.1.dist-info"
    dist.mkdir()
    (dist / "METADATA").write_text("Metadata-Version: 2.1\nName: midpoint-plugin\nVersion: 0.1\n")
    (dist / "entry_points.txt").write_text(
        "[topdrift.integrators]\nmidpoint = midpoint_plugin:methods\n"
    )
    env = dict(os.environ)
    env["PYTHONPATH"] = str(tmp_path) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def _topdrift(env, *args):
    return subprocess.run(
        topdrift_cmd(*args),
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
    )


def test_entry_point_method_is_listed_and_runs(tmp_path):
    env = _install_plugin(tmp_path)
    r = _topdrift(env, "methods", "--json")
    assert r.returncode == 0, r.stderr
    names = {m["name"]: m for m in json.loads(r.stdout)["methods"]}
    assert names["midpoint-demo"]["family"] == "external"
    assert "leapfrog" in names  # the built-in methods are still there
    out = tmp_path / "runs.h5"
    r = _topdrift(
        env,
        "run",
        "looping-nutation",
        "--method",
        "midpoint-demo",
        "--step",
        "1e-3",
        "--horizon",
        "0.2",
        "--samples",
        "5",
        "--out",
        str(out),
        "--json",
    )
    assert r.returncode == 0, r.stderr
    run = json.loads(r.stdout)["runs"][0]
    assert run["status"] == "ok" and run["metrics"]["steps"] == 200
    # Second order against the exact solution: a small error, not a wrong trajectory.
    assert run["metrics"]["axis_angle_max"] < 1e-2


def test_a_broken_plugin_warns_and_leaves_the_built_ins(tmp_path):
    env = _install_plugin(tmp_path)
    (tmp_path / "midpoint_plugin.py").write_text("raise ImportError('broken on purpose')\n")
    r = _topdrift(env, "methods")
    assert r.returncode == 0
    assert "plug-in 'midpoint' (midpoint_plugin:methods) not loaded" in r.stderr
    assert "leapfrog" in r.stdout


class _Twice(Method):
    info = MethodInfo(
        name="leapfrog",
        family="external",
        order=2,
        symplectic=False,
        forms=("body",),
        control="step",
        keeps=(),
        compensated=False,
        description="a clash",
    )

    def start(self, form, params, t0, y0, settings) -> Stepper:  # pragma: no cover
        raise AssertionError


def test_register_refuses_a_name_taken():
    all_methods()
    try:
        register(_Twice())
    except ValueError as exc:
        assert "registered already" in str(exc)
    else:
        raise AssertionError("a second 'leapfrog' was accepted")
    assert get("leapfrog").info.family == "splitting"
    assert np.isfinite(get("leapfrog").info.order)
