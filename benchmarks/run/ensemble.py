"""Ensemble runs: `topdrift run CASE --ensemble N --spread S`.

N starts of one case, member 0 the case's own and the others with every start angle perturbed
by N(0, S^2) rad (a seed drawn from the run id, so a rerun repeats the bits), advanced together
by one parallel kernel (integrators/ensemble.py) and sampled at the run's uniform times. The run
group holds the usual datasets for member 0, so that `summary` and `plot` read it like any run,
and an `ensemble` group with every member's invariants and figure axis and the spread of the
figure axes over time (the RMS angle of the members' axes about their mean direction).

An ensemble run is not checkpointed: an interrupted one is run again from its start.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np

from topdrift.benchmarks.choose.roundoff import perturbed_starts
from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.runner import RunPlan, RunResult, _Buffers, make_run_id, run_attrs
from topdrift.benchmarks.run.sampling import S_ENERGY, S_P_PHI, S_P_PSI
from topdrift.benchmarks.store.writer import _COMPRESSION, RunGroup, ensure_room
from topdrift.integrators import C_EVALS, C_FORCE_EVALS
from topdrift.integrators.ensemble import EnsembleStepper

MAX_MEMBERS = 100_000
BATCH = 256  # samples buffered between writes
FLUSH_S = 2.0  # and at least this often, so that a killed run leaves what it did


@dataclass
class EnsemblePlan:
    base: RunPlan
    members: int
    spread: float
    seed: int
    run_id: str

    @property
    def label(self) -> str:
        return f"{self.base.case.name} {self.base.method.name} x{self.members} {self.run_id[:8]}"


def plan_ensemble(plan: RunPlan, members: int, spread: float) -> EnsemblePlan:
    if isinstance(members, bool) or not isinstance(members, int) or not 2 <= members <= MAX_MEMBERS:
        raise UserError(
            f"--ensemble: need a whole number of starts from 2 to {MAX_MEMBERS}, got {members!r}"
        )
    if not (isinstance(spread, float) and math.isfinite(spread) and spread >= 0.0):
        raise UserError(f"--spread: must be a finite angle >= 0 (rad), got {spread!r}")
    if plan.y0 is None:
        raise UserError(f"{plan.case.name}: {plan.start_singular}")
    if "step" not in plan.stepper_settings:
        raise UserError(
            f"{plan.method.name}: ensembles run on fixed-step methods (splittings "
            f"and Gauss-Legendre)"
        )
    settings = dict(plan.settings, ensemble=members, spread=spread)
    run_id = make_run_id(
        plan.case.toml_text, plan.method.name, plan.form, settings, plan.horizon, plan.samples
    )
    plan.settings = settings
    plan.run_id = run_id
    seed = int(run_id[:8], 16)
    # Build the stepper once here, so that a method without an ensemble kernel is refused
    # before any file is opened.
    Y0 = perturbed_starts(plan.case, plan.form, members, spread, seed)
    EnsembleStepper(
        plan.method, plan.form_code, plan.params, 0.0, Y0[:2], plan.stepper_settings["step"]
    )
    return EnsemblePlan(plan, members, spread, seed, run_id)


def _axis_spread(axes: np.ndarray) -> float:
    mean = axes.mean(axis=0)
    norm = np.linalg.norm(mean)
    if norm == 0.0:
        return math.pi / 2
    mean /= norm
    c = np.clip(axes @ mean, -1.0, 1.0)
    s = np.linalg.norm(np.cross(axes, mean), axis=1)
    ang = np.arctan2(s, c)
    return float(math.sqrt(np.mean(ang * ang)))


def execute_ensemble(ep: EnsemblePlan, f, *, progress=None, stop=None) -> RunResult:
    plan = ep.base
    form, p, n, m = plan.form_code, plan.params, plan.samples, ep.members
    h = plan.stepper_settings["step"]
    Y0 = perturbed_starts(plan.case, plan.form, m, ep.spread, ep.seed)
    # Compile (or load) the parallel kernel on a throwaway copy before any clock starts.
    EnsembleStepper(plan.method, form, p, 0.0, Y0[:2], h).advance_to(2.0 * h)
    ens = EnsembleStepper(plan.method, form, p, 0.0, Y0, h)
    attrs = run_attrs(plan)
    attrs.update(ensemble_members=m, ensemble_spread=ep.spread, ensemble_seed=ep.seed)
    group = RunGroup.create(f, ep.run_id, attrs, Y0.shape[1], False, n)
    g = group.g.create_group("ensemble")
    rows = max(1, min(BATCH, n))
    for name, shape in (
        ("energy", (m,)),
        ("p_phi", (m,)),
        ("p_psi", (m,)),
        ("axis", (m, 3)),
        ("axis_spread", ()),
    ):
        g.create_dataset(
            name,
            shape=(0, *shape),
            maxshape=(None, *shape),
            chunks=(rows, *shape),
            dtype="f8",
            **_COMPRESSION,
        )
    buf = _Buffers(m, Y0.shape[1])
    first = {}
    worst = {"energy": 0.0, "p_phi": 0.0, "p_psi": 0.0}
    spreads: list[float] = []
    status, detail, t_fail = "ok", "", None
    wall = 0.0
    pending: list[dict] = []
    last_write = time.perf_counter()

    def write() -> None:
        nonlocal last_write
        if pending:
            batch = {k: np.concatenate([row[k] for row in pending]) for k in pending[0]}
            ensure_room(
                f,
                sum(v.nbytes for v in batch.values()) + 64 * 1024,
                f"the ensemble's samples up to {k}",
            )
            group.append(batch)
            pending.clear()
            group.flush()
        last_write = time.perf_counter()

    if progress:
        progress.begin(0, 0)
    for k in range(n):
        tk = plan.sample_time(k)
        st = ens.status
        if k > 0:
            t0 = time.perf_counter()
            st = ens.advance_to(tk)
            wall += time.perf_counter() - t0
        for j in range(m):
            buf.record(form, ens.y[j], p, j)
        row = {
            "energy": buf.scal[:m, S_ENERGY].copy(),
            "p_phi": buf.scal[:m, S_P_PHI].copy(),
            "p_psi": buf.scal[:m, S_P_PSI].copy(),
        }
        axes = buf.axis[:m].copy()
        if k == 0:
            first = {name: v.copy() for name, v in row.items()}
            l0 = np.linalg.norm(buf.mom[:m], axis=1)
            l0[l0 == 0.0] = 1.0
            e_scale = np.where(first["energy"] == 0.0, 1.0, np.abs(first["energy"]))
        alive = st == 0
        for name, scale in (("energy", e_scale), ("p_phi", l0), ("p_psi", l0)):
            dev = np.abs(row[name] - first[name]) / scale
            worst[name] = max(worst[name], float(np.max(np.where(alive, dev, 0.0))))
        spread = _axis_spread(axes[alive]) if alive.any() else math.nan
        spreads.append(spread)
        pending.append(
            {
                "t": np.array([tk]),
                "state": ens.y[:1].copy(),
                "euler": buf.euler[:1].copy(),
                "quaternion": buf.quat[:1].copy(),
                "momentum": buf.mom[:1].copy(),
                "invariants/energy": row["energy"][:1],
                "invariants/p_phi": row["p_phi"][:1],
                "invariants/p_psi": row["p_psi"][:1],
                "invariants/norm": buf.scal[:1, 3].copy(),
                "ensemble/energy": row["energy"][None, :],
                "ensemble/p_phi": row["p_phi"][None, :],
                "ensemble/p_psi": row["p_psi"][None, :],
                "ensemble/axis": axes[None, :, :],
                "ensemble/axis_spread": np.array([spread]),
            }
        )
        if len(pending) >= BATCH or time.perf_counter() - last_write > FLUSH_S:
            write()
        if progress:
            progress.update(k + 1, int(ens.counters[0, 0]))
        if not alive.all():
            status = "singular" if np.any(st == 2) else "diverged"
            t_fail = tk
            detail = f"{int(np.count_nonzero(~alive))} of {m} members stopped by t = {tk:.17g}"
            break
        if stop is not None and stop.requested:
            status = "interrupted"
            break
    write()
    member_steps = int(ens.counters[:, 0].sum())
    metrics = {
        "energy_rel_max": worst["energy"],
        "p_phi_rel_max": worst["p_phi"],
        "p_psi_rel_max": worst["p_psi"],
        "axis_spread_final": spreads[-1],
        "axis_spread_max": float(np.nanmax(spreads)),
        "members": m,
        "spread": ep.spread,
        "steps": int(ens.counters[0, 0]),
        "member_steps": member_steps,
        "rhs_evals": int(ens.counters[:, C_EVALS].sum()),
        "force_evals": int(ens.counters[:, C_FORCE_EVALS].sum()),
        "rejected": 0,
        "wall_s": wall,
        "ns_per_step": wall / member_steps * 1e9 if member_steps else None,
        "t_fail": t_fail,
    }
    group.set_metrics(metrics)
    group.set(status=status, detail=detail)
    group.flush()
    if progress:
        progress.end(status)
    return RunResult(ep.run_id, status, metrics, detail)
