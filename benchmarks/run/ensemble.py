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

from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.loop import (
    RUN_STATUS,
    Outcome,
    SampledRun,
    close_run,
    sample_loop,
)
from topdrift.benchmarks.run.perturbed import perturbed_starts
from topdrift.benchmarks.run.runner import (
    FLUSH_EVERY_S,
    RunPlan,
    RunResult,
    StopFlag,
    make_run_id,
    run_attrs,
)
from topdrift.benchmarks.run.sampling import S_ENERGY, S_P_PHI, S_P_PSI, SampleBuffers
from topdrift.benchmarks.store.failures import ensure_room
from topdrift.benchmarks.store.format import FAILED, OK
from topdrift.benchmarks.store.writer import RunGroup
from topdrift.integrators import C_EVALS, C_STEPS, ST_OK, ST_SINGULAR
from topdrift.integrators.ensemble import EnsembleStepper

MAX_MEMBERS = 100_000
BATCH = 256  # samples buffered between writes (each holds every member's invariants and axis)


@dataclass
class EnsemblePlan:
    base: RunPlan
    members: int
    spread: float
    seed: int
    run_id: str
    starts: np.ndarray  # members x state size, in the plan's form

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
    return EnsemblePlan(plan, members, spread, seed, run_id, Y0)


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


# The ensemble group's datasets: name -> shape of one sample's row, for m members.
def _ensemble_rows(m: int) -> dict[str, tuple[int, ...]]:
    return {
        "ensemble/energy": (m,),
        "ensemble/p_phi": (m,),
        "ensemble/p_psi": (m,),
        "ensemble/axis": (m, 3),
        "ensemble/axis_spread": (),
    }


# The invariants followed for every member: name -> column of the sample block.
_FOLLOWED = {"energy": S_ENERGY, "p_phi": S_P_PHI, "p_psi": S_P_PSI}


class _EnsembleRun(SampledRun):
    """An ensemble in progress, as the sample loop drives it. A sample records every member
    (buffer row j is member j) and keeps member 0's rows as the run's own datasets; a batch is
    a list of such samples. The worst invariant errors and the axis spread are followed sample
    by sample, over the members still going."""

    def __init__(self, ep: EnsemblePlan):
        plan = ep.base
        self.plan = plan
        self.group: RunGroup | None = None  # created once the kernel is compiled
        self.samples = plan.samples
        self.rows = BATCH
        self.k = 0
        self.members = ep.members
        self.form, self.params = plan.form_code, plan.params
        h = plan.stepper_settings["step"]
        # Compile (or load) the parallel kernel on a throwaway copy before any clock starts.
        EnsembleStepper(plan.method, self.form, self.params, 0.0, ep.starts[:2], h).advance_to(
            2.0 * h
        )
        self.ens = EnsembleStepper(plan.method, self.form, self.params, 0.0, ep.starts, h)
        self.buf = SampleBuffers(ep.members, ep.starts.shape[1])
        self.wall = 0.0
        self.pending: list[dict] = []
        self.first: dict[str, np.ndarray] = {}
        self.scale: dict[str, np.ndarray] = {}
        self.worst = dict.fromkeys(_FOLLOWED, 0.0)
        self.spreads: list[float] = []
        self.alive = np.ones(ep.members, dtype=bool)

    def sample_time(self, k: int) -> float:
        return self.plan.sample_time(k)

    def steps(self) -> int:
        return int(self.ens.counters[0, C_STEPS])

    def take_start(self) -> int:
        self._take(self.plan.sample_time(0), start=True)
        self.k = 1
        return 1

    def advance(self, tk: float) -> Outcome | None:
        t0 = time.perf_counter()
        self.ens.advance_to(tk)
        self.wall += time.perf_counter() - t0
        return None  # a member that stops is told by check(), with its sample stored

    def record(self, j: int, tk: float) -> Outcome | None:
        self._take(tk, start=False)
        return None

    def check(self, j: int, tk: float) -> Outcome | None:
        if self.alive.all():
            return None
        codes = self.ens.status[~self.alive]
        code = ST_SINGULAR if np.any(codes == ST_SINGULAR) else int(codes[0])
        m = self.members
        detail = f"{int(np.count_nonzero(~self.alive))} of {m} members stopped by t = {tk:.17g}"
        return Outcome(RUN_STATUS.get(code, FAILED), detail, tk)

    def write(self, j: int) -> Outcome | None:
        if self.pending:
            batch = {k: np.concatenate([row[k] for row in self.pending]) for k in self.pending[0]}
            ensure_room(
                self.group.f,
                sum(v.nbytes for v in batch.values()) + 64 * 1024,
                f"the ensemble's samples up to {self.k}",
            )
            self.group.append(batch)
            self.pending.clear()
            self.group.flush()
        return None

    def _take(self, tk: float, start: bool) -> None:
        m, buf = self.members, self.buf
        for j in range(m):
            buf.record(self.form, self.ens.y[j], self.params, j)
        now = {name: buf.scal[:m, col].copy() for name, col in _FOLLOWED.items()}
        axes = buf.axis[:m].copy()
        if start:
            self.first = {name: v.copy() for name, v in now.items()}
            l0 = np.linalg.norm(buf.mom[:m], axis=1)
            l0[l0 == 0.0] = 1.0
            e0 = self.first["energy"]
            self.scale = {"energy": np.where(e0 == 0.0, 1.0, np.abs(e0)), "p_phi": l0, "p_psi": l0}
        self.alive = self.ens.status == ST_OK
        for name in _FOLLOWED:
            dev = np.abs(now[name] - self.first[name]) / self.scale[name]
            self.worst[name] = max(self.worst[name], float(np.max(np.where(self.alive, dev, 0.0))))
        spread = _axis_spread(axes[self.alive]) if self.alive.any() else math.nan
        self.spreads.append(spread)
        own = {k: v.copy() for k, v in buf.rows_of(0).items()}  # member 0: the run's datasets
        self.pending.append(
            {
                "t": np.array([tk]),
                **own,
                "ensemble/energy": now["energy"][None, :],
                "ensemble/p_phi": now["p_phi"][None, :],
                "ensemble/p_psi": now["p_psi"][None, :],
                "ensemble/axis": axes[None, :, :],
                "ensemble/axis_spread": np.array([spread]),
            }
        )

    def final_metrics(self, ep: EnsemblePlan, t_fail: float | None) -> dict:
        counters = self.ens.counters
        member_steps = int(counters[:, C_STEPS].sum())
        return {
            "energy_rel_max": self.worst["energy"],
            "p_phi_rel_max": self.worst["p_phi"],
            "p_psi_rel_max": self.worst["p_psi"],
            "axis_spread_final": self.spreads[-1],
            "axis_spread_max": float(np.nanmax(self.spreads)),
            "members": self.members,
            "spread": ep.spread,
            "steps": self.steps(),
            "member_steps": member_steps,
            "rhs_evals": int(counters[:, C_EVALS].sum()),
            "rejected": 0,
            "wall_s": self.wall,
            "ns_per_step": self.wall / member_steps * 1e9 if member_steps else None,
            "t_fail": t_fail,
        }


def execute_ensemble(
    ep: EnsemblePlan,
    f,
    *,
    progress=None,
    stop: StopFlag | None = None,
    flush_every: float = FLUSH_EVERY_S,
) -> RunResult:
    """Run an ensemble plan into the open store f, through the same sample loop as a single
    run; a stop ends it interrupted (it keeps no checkpoint)."""
    plan = ep.base
    stop = stop or StopFlag()
    attrs = run_attrs(plan)
    attrs.update(ensemble_members=ep.members, ensemble_spread=ep.spread, ensemble_seed=ep.seed)
    run = _EnsembleRun(ep)  # compiles the kernel before the group exists and any clock starts
    group = RunGroup.create(f, ep.run_id, attrs, ep.starts.shape[1], False, plan.samples)
    group.add_datasets(_ensemble_rows(ep.members), max(1, min(BATCH, plan.samples)))
    run.group = group
    end = sample_loop(run, progress=progress, stop=stop, flush_every=flush_every) or Outcome(OK)
    metrics = run.final_metrics(ep, end.t_fail)
    close_run(group, end.status, end.detail, metrics, progress)
    return RunResult(ep.run_id, end.status, metrics, end.detail)
