"""Plug-in fields through the entry-point group topdrift.fields: the example package in
docs/field-example (a magnetic dipole in a uniform magnetic field, and linear damping), installed
as a distribution on PYTHONPATH the way pip would leave it, then listed, validated, run by every
method family, stored, swept, picked and gated by the command line in fresh processes (the
plug-ins are found when topdrift is imported, so a process of its own sees them).

Checks against something outside the project:
- The dipole's potential V = -mu.(R^T B) (common practice: the energy of a magnetic dipole in a
  uniform field, e.g. Jackson, Classical Electrodynamics, from memory) with B = B3 e_z and mu on
  the figure axis is -mu3 B3 Gamma_3: a heavy top with M g l = -mu3 B3. Its runs must follow the
  exact Lagrange-top solution (models/exact.py, itself checked against mpmath elsewhere) with a
  fourth-order method's error ratio under halving the step, and a splitting's run must be the
  equivalent heavy-top run (the same flows, the same arithmetic to the bit when mu3 = 1).
- Linear damping tau = -c w on a symmetric body: m3' = -c w3 (the gyroscopic term has no third
  component when I1 = I2), so w3(t) = w3(0) exp(-c t / I3) (the solution of a linear equation).
"""

from __future__ import annotations

import json
import math
import os
import shutil
import subprocess
import sys
import tomllib
from pathlib import Path

import h5py
import numpy as np
import pytest

from topdrift.models import FORM_BODY, RigidBody, body_state
from topdrift.models.exact import LagrangeTop

EXAMPLE = Path(__file__).resolve().parents[1] / "docs" / "field-example"
PACKAGE = "topdrift_magnet"

MASS, L, I1, I3 = 0.2, 0.025, 1.7e-4, 9.0e-5
MGL = MASS * 9.80665 * L  # the same operations as RigidBody.params (weight, then times com)
SPIN = 640.0 * 2.0 * math.pi / 60.0
C_DAMP = 2e-6

START = """
[start]
theta = "30 deg"
phi = 0.0
psi = 0.0
theta_rate = 0.0
phi_rate = 0.0
psi_rate = "640 rpm"
"""


def _case(name: str, field: str, com: float = 0.0, horizon: float = 1.0) -> str:
    return (
        f'format_version = 1\nname = "{name}"\ndescription = "a test scenario"\n'
        f"horizon = {horizon}\nsamples = 51\n\n[body]\nmass = {MASS}\n"
        f"inertia = [{I1}, {I1}, {I3}]\ncom = [0.0, 0.0, {com}]\n{field}{START}"
    )


MAGNET = (
    '\n[field]\nkind = "magnetic-dipole"\nmoment = [0.0, 0.0, 1.0]\n'
    f"flux_density = [0.0, 0.0, {-MGL!r}]\n"
)
DAMPED = f'\n[field]\nkind = "linear-damping"\ncoefficient = {C_DAMP!r}\n'


@pytest.fixture(scope="module")
def site(tmp_path_factory) -> Path:
    """The package and a dist-info built from its pyproject.toml: what pip leaves."""
    target = tmp_path_factory.mktemp("field-site")
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
    return target


@pytest.fixture(scope="module")
def work(site, tmp_path_factory) -> Path:
    d = tmp_path_factory.mktemp("field-cases")
    (d / "magnet-top.toml").write_text(_case("magnet-top", MAGNET))
    (d / "heavy-top.toml").write_text(_case("heavy-top", "", com=L))
    (d / "damped-top.toml").write_text(_case("damped-top", DAMPED))
    return d


def _topdrift(site: Path, cwd: Path, *args, timeout=900):
    env = dict(os.environ)
    env["PYTHONPATH"] = str(site) + os.pathsep + env.get("PYTHONPATH", "")
    return subprocess.run(
        [sys.executable, "-m", "topdrift.benchmarks.cli.entry", *args],
        env=env,
        cwd=cwd,
        capture_output=True,
        text=True,
        timeout=timeout,
    )


def _runs(path: Path) -> dict[str, dict]:
    """Every stored run by (case, method, step): its metrics and its state samples."""
    out = {}
    with h5py.File(path, "r") as f:
        for key, g in f["runs"].items():
            settings = json.loads(g.attrs["settings"])
            step = settings.get("step")
            out[(g.attrs["case"], g.attrs["method"], step)] = {
                "metrics": json.loads(g.attrs["metrics"]),
                "state": g["state"][()],
                "t": g["t"][()],
                "form": g.attrs["form"],
                "key": key,
            }
    return out


def test_listed_described_and_bad_input_is_one_line(site, work):
    d = _topdrift(site, work, "describe", "magnet-top.toml", "--json")
    assert d.returncode == 0, d.stderr
    info = json.loads(d.stdout)
    assert info["kind"] == "plugin-field"
    assert info["plugin_field"]["keeps"] == ["energy", "p_phi", "p_psi"]
    assert info["body"]["field"]["constants"] == [0.0, 0.0, 1.0, 0.0, 0.0, -MGL]
    assert info["invariants"]["energy"] is not None
    assert info["exact"] is None  # the exact solution is of uniform gravity only
    d = _topdrift(site, work, "describe", "damped-top.toml", "--json")
    info = json.loads(d.stdout)
    assert info["plugin_field"]["conservative"] is False
    assert info["invariants"]["energy"] is None and info["invariants"]["p_phi"] is None
    text = _topdrift(site, work, "describe", "damped-top.toml").stdout
    assert "linear-damping" in text and "no gradient" in text

    bad = {
        "unknown-kind": (MAGNET.replace("magnetic-dipole", "no-such-field"), "field.kind"),
        "unknown-key": (MAGNET.replace("moment =", "momentt ="), "field.momentt"),
        "short-vector": (MAGNET.replace("[0.0, 0.0, 1.0]", "[0.0, 1.0]"), "field.moment"),
        "not-a-number": (DAMPED.replace(repr(C_DAMP), '"fast"'), "field.coefficient"),
        "negative": (DAMPED.replace(repr(C_DAMP), "-1.0"), "field.coefficient"),
    }
    for name, (field, key) in bad.items():
        (work / f"{name}.toml").write_text(_case(name, field))
        r = _topdrift(site, work, "run", f"{name}.toml", "--method", "rk4", "--step", "1e-3")
        assert r.returncode == 2, (name, r.stderr)
        lines = r.stderr.strip().splitlines()
        assert len(lines) == 1 and key in lines[0] and "Traceback" not in r.stderr, lines
    # a com with a plug-in field: its torque is the only one, the body has no fixed point
    (work / "com.toml").write_text(_case("com", MAGNET, com=0.01))
    r = _topdrift(site, work, "describe", "com.toml")
    assert r.returncode == 2 and "body.com" in r.stderr and len(r.stderr.splitlines()) == 1


def test_without_the_plugin_the_kind_is_unknown(work, tmp_path):
    """The same case file where no plug-in is installed: exit 2, one line naming field.kind."""
    empty = tmp_path / "empty-site"
    empty.mkdir()
    r = _topdrift(empty, work, "describe", "magnet-top.toml")
    assert r.returncode == 2
    assert r.stderr.count("\n") == 1 and "field.kind" in r.stderr and "magnetic-dipole" in r.stderr


# one method of each family, a setting each (adaptive: a tolerance); and what each does with the
# damping: runs it, or refuses it with one line naming why
FAMILIES = [
    ("rk4", ["--step", "2e-3"]),
    ("dop853", ["--rtol", "1e-10"]),
    ("leapfrog-s4", ["--step", "2e-3"]),
    ("leapfrog-proc4", ["--step", "2e-3"]),
    ("gauss4", ["--step", "2e-3"]),
    ("engine-semi-implicit", ["--step", "2e-4"]),
    ("gbs", ["--rtol", "1e-10"]),
    ("lie-rkmk4", ["--step", "2e-3"]),
    ("scipy-dop853", ["--rtol", "1e-10"]),
]
REFUSED_ALWAYS = {  # families whose kernels write the uniform-gravity torque themselves
    "taylor-adaptive": ["--rtol", "1e-10"],
    "rattle": ["--step", "2e-3"],
    "lie-galpha": ["--step", "2e-3"],
    "leapfrog-sundman": ["--step", "2e-3"],  # the Euler form only
}
SPLITTINGS = {"leapfrog-s4", "leapfrog-proc4"}


def test_every_family_runs_or_refuses_and_stores(site, work):
    out = work / "families.h5"
    for method, setting in FAMILIES:
        for case in ("magnet-top", "damped-top"):
            r = _topdrift(
                site, work, "run", f"{case}.toml", "--method", method, *setting, "--out", str(out)
            )
            if case == "damped-top" and method in SPLITTINGS:
                assert r.returncode == 2, r.stderr
                assert r.stderr.count("\n") == 1 and "no gradient" in r.stderr, r.stderr
            else:
                assert r.returncode == 0, (method, case, r.stderr)
    for method, setting in REFUSED_ALWAYS.items():
        r = _topdrift(site, work, "run", "magnet-top.toml", "--method", method, *setting)
        assert r.returncode == 2 and r.stderr.count("\n") == 1, (method, r.stderr)
    runs = _runs(out)
    i3w3 = I3 * SPIN  # m3 at the start: I3 w3 (the start's psi rate, no precession)
    for (case, method, _), run in runs.items():
        m = run["metrics"]
        assert run["form"] == "body"
        # the first-order engine schemes at 2e-4 err by about 1e-2 (as on the heavy top)
        tol = 5e-2 if method.startswith("engine") else 1e-5
        if case == "magnet-top":
            # B along e_z, mu on the figure axis of a symmetric body: all three kept
            assert m["energy_rel_max"] is not None and m["energy_rel_max"] < tol, (method, m)
            assert m["p_phi_rel_max"] is not None and m["p_phi_rel_max"] < tol, (method, m)
            assert m["p_psi_rel_max"] is not None and m["p_psi_rel_max"] < tol, (method, m)
        else:
            assert m["energy_rel_max"] is None and m["energy_drift_exponent"] is None
            assert m["energy_drift_unknown"] and "no gradient" in m["energy_drift_unknown"]
            assert m["p_phi_rel_max"] is None and m["p_psi_rel_max"] is None
            # w3(t) = w3(0) exp(-c t / I3): m3 = I3 w3; the decay over the horizon is 2.2 %
            expected = i3w3 * np.exp(-C_DAMP * run["t"] / I3)
            err = np.max(np.abs(run["state"][:, 6] - expected)) / i3w3
            assert err < (tol if method.startswith("engine") else 1e-9), (method, err)
    assert len(runs) == 2 * len(FAMILIES) - len(SPLITTINGS)


def _exact_theta(times: np.ndarray) -> np.ndarray:
    """theta(t) of the equivalent heavy top from the exact Lagrange-top solution."""
    top = RigidBody(mass=MASS, inertia=(I1, I1, I3), com=(0.0, 0.0, L))
    y0 = body_state(top, 0.0, math.radians(30.0), 0.0, 0.0, 0.0, SPIN)  # phi, theta, psi, rates
    return LagrangeTop.from_state(top, FORM_BODY, y0).euler(times)[:, 1]


def _theta(state: np.ndarray) -> np.ndarray:
    """The tilt of the figure axis from the quaternion: cos theta = (R e3).e_z."""
    q0, q1, q2, _ = state[:, 0], state[:, 1], state[:, 2], state[:, 3]
    q3 = state[:, 3]
    cz = q0 * q0 - q1 * q1 - q2 * q2 + q3 * q3
    return np.arccos(np.clip(cz / np.sum(state[:, :4] ** 2, axis=1), -1.0, 1.0))


def test_the_dipole_is_the_lagrange_top(site, work):
    out = work / "lagrange.h5"
    for step in ("1e-3", "5e-4"):  # h w3 = 0.067 and 0.034: in the asymptotic range
        r = _topdrift(site, work, "run", "magnet-top.toml", "--method", "rk4", "--step", step,
                      "--out", str(out))  # fmt: skip
        assert r.returncode == 0, r.stderr
    for case in ("magnet-top", "heavy-top"):
        r = _topdrift(site, work, "run", f"{case}.toml", "--method", "leapfrog", "--step",
                      "1e-3", "--form", "body", "--out", str(out))  # fmt: skip
        assert r.returncode == 0, r.stderr
    runs = _runs(out)
    coarse = runs[("magnet-top", "rk4", 1e-3)]
    fine = runs[("magnet-top", "rk4", 5e-4)]
    exact = _exact_theta(fine["t"])
    e_coarse = np.max(np.abs(_theta(coarse["state"]) - exact))
    e_fine = np.max(np.abs(_theta(fine["state"]) - exact))
    # fourth order: halving the step divides the error by 16 (within a band for the constant)
    assert 1e-12 < e_fine < 1e-6, e_fine
    assert 13.0 < e_coarse / e_fine < 19.0, (e_coarse, e_fine)
    # the splitting: the same flows as the heavy top's body form (B3 = -M g l, mu3 = 1)
    a = runs[("magnet-top", "leapfrog", 1e-3)]["state"]
    b = runs[("heavy-top", "leapfrog", 1e-3)]["state"]
    assert np.max(np.abs(a - b)) <= 1e-13 * np.max(np.abs(b)), np.max(np.abs(a - b))


def test_sweep_pick_and_gate(site, work):
    (work / "fields.toml").write_text(
        'name = "fields"\ndescription = "plug-in fields"\n'
        'cases = ["magnet-top.toml", "damped-top.toml"]\n'
        'methods = ["rk4", "leapfrog"]\nhorizon = 0.5\nsamples = 11\nsteps = [1e-3]\n'
        "rtols = [1e-8]\n"
    )
    r = _topdrift(site, work, "sweep", "fields.toml", "--out", str(work / "sweep.h5"),
                  "--jobs", "1", "--json")  # fmt: skip
    # the damped case with the leapfrog is refused (a failed cell, said), the rest run
    assert r.returncode in (0, 1), r.stderr
    runs = _runs(work / "sweep.h5")
    assert ("magnet-top", "rk4", 1e-3) in runs and ("damped-top", "rk4", 1e-3) in runs
    assert runs[("damped-top", "rk4", 1e-3)]["metrics"]["energy_rel_max"] is None

    r = _topdrift(site, work, "pick", "magnet-top.toml", "--target", "1e-4", "--methods",
                  "rk4", "leapfrog", "--horizon", "0.5", "--json")  # fmt: skip
    assert r.returncode == 0, r.stderr
    assert "rk4" in r.stdout or "leapfrog" in r.stdout

    baseline = work / "baseline.json"
    r = _topdrift(site, work, "baseline", "--sweep", "fields.toml", "--out", str(baseline),
                  "--rounds", "4")  # fmt: skip
    assert r.returncode == 0, r.stderr
    cells = json.loads(baseline.read_text())
    assert "magnet-top" in json.dumps(cells) and "damped-top" in json.dumps(cells)
    r = _topdrift(site, work, "gate", "--baseline", str(baseline), "--time-band", "1")
    assert r.returncode == 0, r.stdout + r.stderr
