"""Sizing a sweep before anything is planned: how many runs its grid holds, how many steps its
fixed-step runs take and how much memory one run needs on a worker, each refused over a
documented limit (README, "Sweep files") with one line naming the sweep file and the key.

Counting needs the sweep file and the registry only (no case is read, nothing is planned), so a
grid of 10^9 points is refused in microseconds; planning one point costs about half a
millisecond (its exact solution is probed, its kernels warmed up), which is why this comes first.
"""

from __future__ import annotations

from dataclasses import dataclass

from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.runner import MAX_STEPS, samples_for_horizon
from topdrift.benchmarks.store.format import EXACT_DATASETS, SAMPLE_DATASETS
from topdrift.benchmarks.sweep.settings_ladder import step_ladder
from topdrift.integrators import UnknownMethod
from topdrift.integrators import get as get_method

# The most grid points one sweep may hold. Planning them takes about a minute, their jobs a
# few hundred MB; a larger study is several sweeps (into one file, if wanted: `--out`).
MAX_GRID_RUNS = 100_000
# The most steps the fixed-step runs of one sweep may take together: the budget of one run
# (runner.MAX_STEPS), about ten hours at 35 ns a step.
MAX_GRID_STEPS = MAX_STEPS
# The most memory one run's samples may take on a worker, uncompressed: a sweep computes each
# run into an in-memory HDF5 image and sends it whole to the process that writes the file.
MAX_RUN_BYTES = 1 << 30
# Bytes per sample of a run, every dataset included (the body form's 7-wide state, the exact
# solution, Kovalevskaya's integral): an upper bound whatever the form and case.
SAMPLE_BYTES = 8 * (sum(max(1, k) for k in SAMPLE_DATASETS.values()) + 7 + 1)
SAMPLE_BYTES += 8 * sum(EXACT_DATASETS.values())


@dataclass(frozen=True)
class MethodPoints:
    """The grid points one method contributes per case: its forms x its settings."""

    name: str
    control: str | None  # "step" or "tolerance", as MethodInfo.control; None: not registered
    forms: list[str] | None  # None: the method's own first form that fits the case
    ladder: list[float] | str  # the steps or rtols, or "auto"
    ladder_key: str  # the sweep-file key the ladder came from, for messages

    def count(self, rungs: int) -> int:
        if self.control is None:
            return 0  # an unknown method: one Skip per case, no grid point
        settings = rungs if self.ladder == "auto" else len(self.ladder)
        return (len(self.forms) if self.forms else 1) * settings


def method_points(spec, label: str, *, keep_unknown: bool = False) -> list[MethodPoints]:
    """Each method's forms and ladder, with the per-method overrides, checked for the kind of
    ladder the method takes. Raises UserError naming the key, and UnknownMethod for a name not
    registered (kept as a method of no points with `keep_unknown`, for the gate); reads no
    case."""
    out = []
    for name in spec.methods:
        try:
            method = get_method(name)
        except UnknownMethod:
            if not keep_unknown:
                raise
            out.append(MethodPoints(name, None, None, [], ""))
            continue
        own = spec.per_method.get(name, {})
        fixed = method.info.control == "step"
        wrong = "rtols" if fixed else "steps"
        if wrong in own:
            kind = "a fixed-step" if fixed else "an adaptive"
            raise UserError(
                f"{label}: method.{name}.{wrong}: {name} is {kind} method; "
                f"give {'steps' if fixed else 'rtols'}"
            )
        right = "steps" if fixed else "rtols"
        if right in own:
            ladder, key = own[right], f"method.{name}.{right}"
        else:
            ladder, key = (spec.steps if fixed else spec.rtols), right
        out.append(
            MethodPoints(name, method.info.control, own.get("forms") or spec.forms, ladder, key)
        )
    return out


def check_count(spec, label: str, methods: list[MethodPoints]) -> int:
    """The number of grid points (an upper bound: points a method refuses are counted), refused
    over MAX_GRID_RUNS."""
    per_case = sum(m.count(spec.rungs) for m in methods)
    total = len(spec.cases) * per_case
    if total > MAX_GRID_RUNS:
        raise UserError(
            f"{label}: cases x methods x forms x settings: the grid has {total:,} runs "
            f"({len(spec.cases):,} cases x {per_case:,} method settings), more than the "
            f"{MAX_GRID_RUNS:,} a sweep may hold; split it into smaller sweeps"
        )
    return total


def case_extent(spec, case, label: str) -> tuple[float, int]:
    """A case's horizon and sample count in the sweep: the sweep's own, else the horizon rule of
    every command (a sweep's horizon keeps the case's sample interval, runner.samples_for_horizon).
    A horizon that would need too many samples names the sweep file's key."""
    horizon = spec.horizon if spec.horizon is not None else case.horizon
    if spec.samples is not None:
        return horizon, spec.samples
    try:
        return horizon, samples_for_horizon(case, horizon)
    except UserError as exc:
        raise UserError(f"{label}: horizon: {case.name}: {exc}") from None


def check_work(spec, label: str, methods: list[MethodPoints], cases: list) -> None:
    """Steps and memory, from the loaded cases (their horizons, sample counts and start rates):
    a fixed step that would take more than a run's MAX_STEPS, a grid whose fixed-step runs take
    more than MAX_GRID_STEPS in all, or a run whose samples exceed MAX_RUN_BYTES is refused."""
    total = 0.0
    for case in cases:
        horizon, samples = case_extent(spec, case, label)
        need = float(samples) * SAMPLE_BYTES
        if need > MAX_RUN_BYTES:
            key = "samples" if spec.samples is not None else f"cases: {case.name}: samples"
            raise UserError(
                f"{label}: {key}: {samples} samples are {need / 1e6:.0f} MB in a worker's memory "
                f"per run, more than the {MAX_RUN_BYTES / 2**20:.0f} MiB a sweep run may take (a "
                f"sweep holds each run in memory until it is written); give fewer samples"
            )
        for m in methods:
            if m.control != "step":  # adaptive (steps unknown before the run), or unknown
                continue
            n_forms = len(m.forms) if m.forms else 1
            if m.ladder == "auto":
                order = get_method(m.name).info.order
                steps = [h for h in step_ladder(case, order, spec.rungs, horizon, spec.max_steps)]
                total += n_forms * sum(horizon / h for h in steps)
                continue
            for i, h in enumerate(m.ladder):
                n = horizon / h
                if n > MAX_STEPS:
                    raise UserError(
                        f"{label}: {m.ladder_key}[{i}]: a step of {h:g} s over {case.name}'s "
                        f"horizon of {horizon:g} s is {n:.3g} steps, more than the "
                        f"{MAX_STEPS:.0e} a run may take"
                    )
                total += n_forms * n
    if total > MAX_GRID_STEPS:
        raise UserError(
            f"{label}: the grid's fixed-step runs take {total:.3g} steps in all, more than the "
            f"{MAX_GRID_STEPS:.0e} a sweep may take; use fewer or longer steps, or split the sweep"
        )
