"""The worked plug-in in docs/plugin-example: installed as a package would be (pip --target, no
index, no build isolation; offline), listed and run by the command line through its entry point,
and its method checked: order 4 against scipy, every right-hand-side call counted by the base."""

import importlib.util
import json
import os
import shutil
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from topdrift.integrators import C_EVALS, C_STEPS, ST_OK
from topdrift.models import FORM_BODY, RigidBody, body_state
from topdrift.models.dynamics import rhs

EXAMPLE = Path(__file__).resolve().parents[1] / "docs" / "plugin-example"
PACKAGE = "topdrift_kutta38"


def _hand_install(target: Path) -> None:
    """The package and a dist-info built from its pyproject.toml: what pip would leave, for a
    machine where pip cannot build (no setuptools in the environment)."""
    meta = tomllib.loads((EXAMPLE / "pyproject.toml").read_text())["project"]
    shutil.copytree(EXAMPLE / PACKAGE, target / PACKAGE)
    dist = target / f"{meta['name'].replace('-', '_')}-{meta['version']}.dist-info"
    dist.mkdir()
    (dist / "METADATA").write_text(
        f"Metadata-Version: 2.1\nName: {meta['name']}\nVersion: {meta['version']}\n"
    )
    lines = []
    for group, eps in meta["entry-points"].items():
        lines.append(f"[{group}]")
        lines += [f"{k} = {v}" for k, v in eps.items()]
    (dist / "entry_points.txt").write_text("\n".join(lines) + "\n")


def _can_build() -> bool:
    """Whether pip can build the example here without fetching anything: setuptools, and a
    bdist_wheel command (setuptools 70.1 has its own, older ones need the wheel package)."""
    if importlib.util.find_spec("setuptools") is None:
        return False
    if importlib.util.find_spec("wheel") is not None:
        return True
    from importlib.metadata import version

    major, minor = (int(x) for x in version("setuptools").split(".")[:2])
    return (major, minor) >= (70, 1)


@pytest.fixture(scope="module")
def installed(tmp_path_factory) -> Path:
    target = tmp_path_factory.mktemp("plugin-site")
    build = tmp_path_factory.mktemp("plugin-src") / "src"
    shutil.copytree(EXAMPLE, build)  # pip builds in place; keep the repository clean
    if not _can_build():
        _hand_install(target)
    else:
        cmd = [sys.executable, "-m", "pip", "install", "--quiet", "--no-deps", "--no-index"]
        cmd += ["--no-build-isolation", "--target", str(target), str(build)]
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
        assert proc.returncode == 0, f"pip could not install the example: {proc.stderr}"
    assert (target / PACKAGE / "__init__.py").is_file()
    assert list(target.glob("*.dist-info/entry_points.txt"))
    return target


def _topdrift(site: Path, *args):
    env = dict(os.environ)
    env["PYTHONPATH"] = str(site) + os.pathsep + env.get("PYTHONPATH", "")
    return subprocess.run(
        [sys.executable, "-m", "topdrift.benchmarks.cli.entry", *args],
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
    )


def test_the_installed_example_is_listed_and_runs(installed, tmp_path):
    r = _topdrift(installed, "methods", "--json")
    assert r.returncode == 0, r.stderr
    names = {m["name"]: m for m in json.loads(r.stdout)["methods"]}
    assert names["kutta38"]["family"] == "external" and names["kutta38"]["order"] == 4
    assert "leapfrog" in names
    out = tmp_path / "runs.h5"
    runs = {}
    for name in ("kutta38", "rk4"):
        args = ["run", "looping-nutation", "--method", name, "--step", "1e-3"]
        args += ["--horizon", "0.2", "--samples", "5", "--out", str(out), "--json"]
        r = _topdrift(installed, *args)
        assert r.returncode == 0, r.stderr
        runs[name] = json.loads(r.stdout)["runs"][0]
    run = runs["kutta38"]
    assert run["status"] == "ok"
    assert run["metrics"]["steps"] == 200
    assert run["metrics"]["rhs_evals"] == 4 * 200  # counted by the base, four per step
    # Against the exact solution, an error of the size of the classical RK4's at the same step
    # (both of order 4 with error constants of one size; a wrong method would be far off).
    ratio = run["metrics"]["axis_angle_max"] / runs["rk4"]["metrics"]["axis_angle_max"]
    assert 0.25 < ratio < 4.0, ratio


@pytest.fixture(scope="module")
def example(installed):
    sys.path.insert(0, str(installed))
    try:
        import topdrift_kutta38

        yield topdrift_kutta38
    finally:
        sys.path.remove(str(installed))
        sys.modules.pop(PACKAGE, None)


# A heavy top of our own: 1 kg, I = (0.05, 0.05, 0.02) kg m^2, centre of mass 0.1 m up the axis.
TOP = RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1))
Y0 = body_state(TOP, 0.3, 0.9, 0.2, 1.0, 0.5, 20.0)


def _scipy_reference(t_end: float) -> np.ndarray:
    # scipy's DOP853 at tolerances far below the errors measured (a reference library).
    p = TOP.params()

    def f(t, y):
        dy = np.empty(7)
        rhs(FORM_BODY, np.ascontiguousarray(y), p, dy)
        return dy

    sol = solve_ivp(f, (0.0, t_end), Y0, method="DOP853", rtol=1e-13, atol=1e-15)
    return sol.y[:, -1]


def test_the_example_has_order_four(example):
    # Kutta's 3/8 rule is of classical order 4 (Kutta 1901; Hairer, Norsett and Wanner I,
    # sec. II.1, from memory): halving the step divides the error by 2^4.
    t_end = 1.0
    ref = _scipy_reference(t_end)
    errs = []
    for h in (0.02, 0.01, 0.005):
        st = example.KUTTA38.start(FORM_BODY, TOP.params(), 0.0, Y0, {"step": h})
        assert st.advance_to(t_end) == ST_OK
        errs.append(np.max(np.abs(st.y - ref)))
        assert st.counters[C_STEPS] == round(t_end / h)
        assert st.counters[C_EVALS] == 4 * round(t_end / h)
    orders = np.log2(np.array(errs[:-1]) / np.array(errs[1:]))
    assert np.all(np.abs(orders - 4.0) < 0.2), (errs, orders)


def test_the_hand_built_install_is_found_too(tmp_path):
    # The offline fallback of the fixture (no setuptools or wheel): the same entry point.
    _hand_install(tmp_path)
    r = _topdrift(tmp_path, "methods", "--json")
    assert r.returncode == 0, r.stderr
    assert "kutta38" in {m["name"] for m in json.loads(r.stdout)["methods"]}
