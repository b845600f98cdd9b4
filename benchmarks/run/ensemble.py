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
    STOPPED,
    Outcome,
    SampledRun,
    close_run,
    sample_loop,
)
from topdrift.benchmarks.run.perturbed import perturbed_starts
from topdrift.benchmarks.run.runner import (
    FLUSH_EVERY_S,
    MAX_STEPS,
    RunPlan,
    RunResult,
    StopFlag,
    make_run_id,
    run_attrs,
)
from topdrift.benchmarks.run.sampling import S_ENERGY, S_KOV, S_P_PHI, S_P_PSI, SampleBuffers
from topdrift.benchmarks.store.failures import ensure_room
from topdrift.benchmarks.store.format import FAILED, OK, RUNS
from topdrift.benchmarks.store.writer import RunGroup
from topdrift.integrators import C_EVALS, C_FORCE_EVALS, C_STEPS, ST_OK, ST_SINGULAR
from topdrift.integrators.ensemble import EnsembleStepper
from topdrift.models import FORM_EULER

MAX_MEMBERS = 100_000
BATCH = 256  # samples buffered between writes (each holds every member's invariants and axis),
BATCH_BYTES = 64 << 20  # fewer where BATCH of them would pass this many bytes (batch_rows)
MEMBER_BYTES = 48  # energy, p_phi, p_psi and the figure axis of one member at one sample
# Steps over all members together: the budget of one run (runner.MAX_STEPS).
MAX_MEMBER_STEPS = MAX_STEPS
# Member-samples: 48 bytes of ensemble datasets each; 10^9 of them are 48 GB before compression.
MAX_MEMBER_SAMPLES = 1e9
# Member-steps per call of the ensemble kernel: a compiled kernel hears no signal until it
# returns, so a long sample interval is advanced in pieces of whole steps, fixed by the step
# count (never by the clock). The states do not depend on the pieces; a splitting's count of
# sub-flow evaluations includes one closing half-step per piece, as in a single run.
CHUNK_MEMBER_STEPS = 1 << 20
# Members recorded between two looks at the stop flag: recording is one compiled call per
# member, and 10^5 members take about a second.
RECORD_PIECE = 4096


def batch_rows(members: int) -> int:
    """Samples buffered between writes (and the chunk rows of the ensemble datasets): BATCH,
    fewer where BATCH samples of every member would pass BATCH_BYTES, so that memory stays
    bounded and one write (which a stop waits for) takes well under a second."""
    return max(1, min(BATCH, BATCH_BYTES // (MEMBER_BYTES * members)))


def check_size(plan: RunPlan, members: int) -> None:
    """Refuse, before any start is made, an ensemble over the limits above (one line)."""
    steps = float(plan.settings["steps_per_sample"]) * (plan.samples - 1)
    if members * steps > MAX_MEMBER_STEPS:
        raise UserError(
            f"--ensemble {members}: {members} members x {steps:.3g} steps is "
            f"{members * steps:.3g} member-steps, more than the {MAX_MEMBER_STEPS:.0e} a run may "
            "take; use fewer members, a longer step or a shorter horizon"
        )
    if members * plan.samples > MAX_MEMBER_SAMPLES:
        raise UserError(
            f"--ensemble {members}: {members} members x {plan.samples} samples is "
            f"{members * plan.samples:.3g} member-samples "
            f"({MEMBER_BYTES * 1e-9 * members * plan.samples:.3g} GB of ensemble datasets), "
            f"more than the {MAX_MEMBER_SAMPLES:.0e} a run may hold; use fewer members or "
            "fewer --samples"
        )


@dataclass
class EnsemblePlan:
    base: RunPlan
    members: int
    spread: float
    seed: int
    run_id: str
    starts: np.ndarray  # members x state size, in the plan's form
    lanes: bool = False  # members advanced in SIMD lanes (EnsembleStepper)

    @property
    def label(self) -> str:
        return f"{self.base.case.name} {self.base.method.name} x{self.members} {self.run_id[:8]}"


def plan_ensemble(
    plan: RunPlan, members: int, spread: float, lanes: bool | None = None
) -> EnsemblePlan:
    """`lanes`: as EnsembleStepper's (None: SIMD lanes where they apply, False: the method's own
    kernel member by member). Where lanes are taken the run's settings say so (`lanes`), so that
    the run id of a lane ensemble differs from that of the same ensemble member by member: their
    numbers differ by a few ulps per step."""
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
            f"{plan.method.name}: ensembles run on fixed-step methods (splittings, "
            f"Gauss-Legendre, the first-order engine schemes, the Lie-group methods, rattle)"
        )
    check_size(plan, members)
    # The stepper decides whether the lanes cover this method, form and body.
    two = np.stack([plan.y0, plan.y0])
    step = plan.stepper_settings["step"]
    probe = EnsembleStepper(plan.method, plan.form_code, plan.params, 0.0, two, step, lanes)
    settings = dict(plan.settings, ensemble=members, spread=spread)
    if probe.uses_lanes:
        settings["lanes"] = 1  # settings are numbers: 1 = members in SIMD lanes
    run_id = make_run_id(
        plan.case.toml_text, plan.method.name, plan.form, settings, plan.horizon, plan.samples
    )
    plan.settings = settings
    plan.run_id = run_id
    seed = int(run_id[:8], 16)
    # Build the stepper once here, so that a method without an ensemble kernel is refused
    # before any file is opened.
    Y0 = perturbed_starts(plan.case, plan.form, members, spread, seed)
    return EnsemblePlan(plan, members, spread, seed, run_id, Y0, probe.uses_lanes)


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

    def __init__(self, ep: EnsemblePlan, stop: StopFlag):
        plan = ep.base
        self.plan = plan
        self.stop = stop
        self.group: RunGroup | None = None  # created once the kernel is compiled
        self.samples = plan.samples
        self.rows = batch_rows(ep.members)
        self.k = 0
        self.members = ep.members
        self.form, self.params = plan.form_code, plan.params
        h = plan.stepper_settings["step"]
        # Compile (or load) the parallel kernel on a throwaway copy before any clock starts.
        lanes = ep.lanes
        EnsembleStepper(
            plan.method, self.form, self.params, 0.0, ep.starts[:2], h, lanes
        ).advance_to(2.0 * h)
        self.ens = EnsembleStepper(plan.method, self.form, self.params, 0.0, ep.starts, h, lanes)
        self.buf = SampleBuffers(ep.members, ep.starts.shape[1])
        self.wall = 0.0
        self.pending: list[dict] = []
        self.first: dict[str, np.ndarray] = {}
        self.scale: dict[str, np.ndarray] = {}
        body = plan.case.body
        self.p_psi = body.keeps_p_psi  # p_psi is an invariant of the body
        self.p_phi = body.keeps_p_phi  # p_phi one of uniform gravity (or a plug-in's) only
        self.energy = body.keeps_energy  # energy one unless the field is no gradient
        self.kovalevskaya = body.kovalevskaya  # and Kovalevskaya's integral is
        self.followed = dict(_FOLLOWED)
        if self.kovalevskaya:
            self.followed["kovalevskaya"] = S_KOV
        self.worst = dict.fromkeys(self.followed, 0.0)
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
        """Advance to tk in pieces of at most CHUNK_MEMBER_STEPS member-steps; STOPPED when a
        stop comes between two pieces (the run, which keeps no checkpoint, ends at its last
        sample). A member that stops is told by check(), with its sample stored."""
        plan = self.plan
        per = int(plan.settings["steps_per_sample"])
        piece = max(1, CHUNK_MEMBER_STEPS // self.members)
        h = plan.stepper_settings["step"]
        t_prev = plan.sample_time(self.k - 1)
        done = 0
        t0 = time.perf_counter()
        try:
            while per - done > piece:
                done += piece
                self.ens.advance_to(t_prev + done * h)
                if self.stop.requested:
                    return STOPPED
            self.ens.advance_to(tk)
        finally:
            self.wall += time.perf_counter() - t0
        return None

    def record(self, j: int, tk: float) -> Outcome | None:
        if not self._take(tk, start=False):
            return STOPPED  # the sample is dropped whole: the run ends at its last one
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

    def _take(self, tk: float, start: bool) -> bool:
        """Record every member's sample at tk; False when a stop came first (never at the
        start, which the metrics need)."""
        m, buf = self.members, self.buf
        for j in range(m):
            buf.record(self.form, self.ens.y[j], self.params, j, self.ens.turns[j])
            if not start and j % RECORD_PIECE == RECORD_PIECE - 1 and self.stop.requested:
                return False
        now = {name: buf.scal[:m, col].copy() for name, col in self.followed.items()}
        axes = buf.axis[:m].copy()
        if start:
            self.first = {name: v.copy() for name, v in now.items()}
            l0 = np.linalg.norm(buf.mom[:m], axis=1)
            l0[l0 == 0.0] = 1.0
            e0 = self.first["energy"]
            self.scale = {"energy": np.where(e0 == 0.0, 1.0, np.abs(e0)), "p_phi": l0, "p_psi": l0}
            if self.kovalevskaya:
                k0 = self.first["kovalevskaya"]
                self.scale["kovalevskaya"] = np.where(k0 == 0.0, 1.0, np.abs(k0))
        self.alive = self.ens.status == ST_OK
        for name in self.followed:
            dev = np.abs(now[name] - self.first[name]) / self.scale[name]
            self.worst[name] = max(self.worst[name], float(np.max(np.where(self.alive, dev, 0.0))))
        spread = _axis_spread(axes[self.alive]) if self.alive.any() else math.nan
        self.spreads.append(spread)
        # member 0: the run's datasets
        own = {k: v.copy() for k, v in buf.rows_of(0, kovalevskaya=self.kovalevskaya).items()}
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
        return True

    def final_metrics(self, ep: EnsemblePlan, t_fail: float | None) -> dict:
        counters = self.ens.counters
        member_steps = int(counters[:, C_STEPS].sum())
        return {
            "energy_rel_max": self.worst["energy"] if self.energy else None,
            # only invariants of the body are metrics (run/metrics.py)
            "p_phi_rel_max": self.worst["p_phi"] if self.p_phi else None,
            "p_psi_rel_max": self.worst["p_psi"] if self.p_psi else None,
            "kovalevskaya_rel_max": self.worst.get("kovalevskaya"),
            "axis_spread_final": self.spreads[-1],
            "axis_spread_max": float(np.nanmax(self.spreads)),
            "members": self.members,
            "spread": ep.spread,
            "steps": self.steps(),
            "member_steps": member_steps,
            "rhs_evals": int(counters[:, C_EVALS].sum()),
            "force_evals": int(counters[:, C_FORCE_EVALS].sum()),
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
    parent: str = RUNS,
) -> RunResult:
    """Run an ensemble plan into the open store f (its group under `parent`, as for
    runner.execute), through the same sample loop as a single run; a stop ends it
    interrupted (it keeps no checkpoint)."""
    plan = ep.base
    stop = stop or StopFlag()
    attrs = run_attrs(plan)
    attrs.update(ensemble_members=ep.members, ensemble_spread=ep.spread, ensemble_seed=ep.seed)
    run = _EnsembleRun(ep, stop)  # compiles the kernel before the group exists and any clock
    group = RunGroup.create(
        f,
        ep.run_id,
        attrs,
        ep.starts.shape[1],
        False,
        plan.samples,
        kovalevskaya=run.kovalevskaya,
        parent=parent,
        euler_form=plan.form_code == FORM_EULER,
    )
    group.add_datasets(_ensemble_rows(ep.members), max(1, min(run.rows, plan.samples)))
    run.group = group
    end = sample_loop(run, progress=progress, stop=stop, flush_every=flush_every) or Outcome(OK)
    metrics = run.final_metrics(ep, end.t_fail)
    close_run(group, end.status, end.detail, metrics, progress)
    return RunResult(ep.run_id, end.status, metrics, end.detail, group.n_stored)
