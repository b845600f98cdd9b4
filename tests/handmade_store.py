"""A small runs file built by hand with h5py in the documented layout (README, "Run store"),
for the analysis, plot and report tests. The motion is a steady precession, written down in
closed form: theta fixed, phi and psi growing linearly; a run is that motion with a phase error
growing in time, so its figure axis strays from the exact one. These are demo numbers, not
physics results."""

from __future__ import annotations

import json

import h5py
import numpy as np


def quaternion_zxz(phi, theta, psi):
    """Scalar-first q of Rz(phi) Rx(theta) Rz(psi): the product of the three half-angle
    rotations (common practice)."""
    a, b, c = phi / 2.0, theta / 2.0, psi / 2.0
    return np.stack(
        (
            np.cos(b) * np.cos(a + c),
            np.sin(b) * np.cos(a - c),
            np.sin(b) * np.sin(a - c),
            np.cos(b) * np.sin(a + c),
        ),
        axis=1,
    )


def add_run(
    f,
    run_id,
    case="steady",
    method="demo-method",
    settings=None,
    status="ok",
    metrics=None,
    n=200,
    horizon=10.0,
    phase_rate=1e-4,
    energy_noise=1e-9,
    exact=True,
    form="euler",
):
    t = np.linspace(0.0, horizon, n)
    theta0, prec, spin = 0.6, 0.8, 30.0
    ex = np.stack((prec * t, np.full(n, theta0), spin * t), axis=1)
    run = ex.copy()
    run[:, 0] += phase_rate * t * t  # precession phase error growing like t^2
    run[:, 1] += 0.5 * phase_rate * np.sin(3.0 * t)
    g = f["runs"].create_group(run_id)
    g.attrs["case"] = case
    g.attrs["case_toml"] = f'name = "{case}"\n'
    g.attrs["method"] = method
    g.attrs["form"] = form
    g.attrs["horizon"] = horizon
    g.attrs["settings"] = json.dumps(settings or {"step": 0.01})
    g.attrs["status"] = status
    g.attrs["created"] = "2026-01-01T00:00:00Z"
    g.attrs["versions"] = json.dumps({"topdrift": "test"})
    g.attrs["metrics"] = json.dumps(metrics or {})
    g["t"] = t
    g["euler"] = run
    g["quaternion"] = quaternion_zxz(run[:, 0], run[:, 1], run[:, 2])
    g["momentum"] = np.tile([0.0, 0.3, 1.2], (n, 1))
    g["invariants/energy"] = 2.5 * (1.0 + energy_noise * np.sqrt(t) * np.cos(7.0 * t))
    g["invariants/p_phi"] = np.full(n, 1.1)
    g["invariants/p_psi"] = 1.2 + 1e-12 * t
    if exact:
        g["exact/euler"] = ex
    return g


def metrics(axis, energy, wall, evals, exponent=0.0, steps=1000):
    return {
        "energy_rel_max": energy,
        "p_phi_rel_max": 0.0,
        "p_psi_rel_max": 1e-12,
        "norm_abs_max": None,
        "axis_angle_max": axis,
        "theta_abs_max": axis,
        "phi_abs_max": axis,
        "psi_abs_max": axis,
        "steps": steps,
        "rhs_evals": evals,
        "rejected": 0,
        "wall_s": wall,
        "ns_per_step": wall * 1e9 / steps,
        "energy_drift_exponent": exponent,
        "t_fail": None,
    }


def build(path, cases=("steady",)):
    """Two methods (a fixed-step one at three steps, an adaptive one at two tolerances) per
    case, plus one diverged run; returns the path."""
    with h5py.File(path, "w") as f:
        f.attrs["format"] = "topdrift-runs"
        f.attrs["format_version"] = 1
        f.create_group("runs")
        k = 0
        for case in cases:
            for i, h in enumerate((0.04, 0.02, 0.01)):
                e = 1e-3 * (h / 0.04) ** 2
                add_run(
                    f,
                    f"fixed{k:02d}",
                    case,
                    "split2",
                    {"step": h},
                    metrics=metrics(e, e * 1e-3, 0.01 * 2**i, 1000 * 2**i, 0.02),
                    phase_rate=e / 100.0,
                )
                k += 1
            for j, rtol in enumerate((1e-6, 1e-9)):
                e = 1e-2 * 10.0 ** (-3 * j)
                add_run(
                    f,
                    f"adapt{k:02d}",
                    case,
                    "rk-adapt",
                    {"rtol": rtol, "atol": rtol / 1e3},
                    metrics=metrics(e, e * 1e-2, 0.003 * 4**j, 300 * 4**j, 1.0),
                    phase_rate=e / 100.0,
                )
                k += 1
            add_run(
                f,
                f"bad{k:02d}",
                case,
                "split2",
                {"step": 0.5},
                status="diverged",
                metrics=metrics(None, 1.0, 0.001, 10, None, steps=10),
                n=20,
            )
            k += 1
    return path
