"""The long-horizon runner: one case, one method, one setting, sampled at uniform times.

A run advances its stepper from sample to sample (t_k = k T / (n - 1), t = 0 and T included), so
memory stays constant however many steps the horizon takes; dense output between steps is the
adaptive stepper's job, and for fixed-step methods the step is rounded down to divide the sample
interval. Samples are buffered and written in batches, each batch followed by a checkpoint
(stepper snapshot, sample index, metric accumulators, time spent), so that `resume` continues a
killed or interrupted run to the same bits as one that never stopped.
"""

from __future__ import annotations

import functools
import hashlib
import json
import math
import time
from dataclasses import dataclass, field

import numpy as np

from topdrift.benchmarks.cases.numbers import positive
from topdrift.benchmarks.cases.schema import MAX_SAMPLES
from topdrift.benchmarks.cases.time_scales import Timescales, fastest_rate, timescales
from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.loop import (
    STOPPED,
    Outcome,
    SampledRun,
    close_run,
    failure_time,
    sample_loop,
    stepper_outcome,
)
from topdrift.benchmarks.run.metrics import Accumulator, finish
from topdrift.benchmarks.run.sampling import N_SCALARS, S_ENERGY, SampleBuffers
from topdrift.benchmarks.stopping import StopFlag
from topdrift.benchmarks.store.checkpoint import GROUP as CHECKPOINT_GROUP
from topdrift.benchmarks.store.checkpoint import entry_layout
from topdrift.benchmarks.store.failures import NoRoom, damage_is_an_error, ensure_room
from topdrift.benchmarks.store.format import (
    CHUNK_ROWS,
    DIVERGED,
    EXACT_DATASETS,
    EXACT_TURNS_DATASET,
    FAILED,
    INTERRUPTED,
    OK,
    RUNNING,
    RUNS,
    SAMPLE_DATASETS,
    STATE_DATASET,
    first_line,
)
from topdrift.benchmarks.store.reader import check_run_samples
from topdrift.benchmarks.store.writer import (
    RunGroup,
    utc_now,
)
from topdrift.integrators import (
    C_STEPS,
    ST_OK,
    Method,
    MethodRefused,
    Stepper,
    whole_steps,
)
from topdrift.integrators import get as get_method
from topdrift.models import FORM_EULER, FORM_NAMES, FORM_SIZE, SingularAttitude, form_code
from topdrift.models.dynamics import singular

FLUSH_EVERY_S = 2.0
BATCH_ROWS = 4096
CHUNK_STEPS = 1 << 20  # steps per call inside a long fixed-step interval (see _Run._advance_to)


@dataclass
class RunPlan:
    """Everything a run needs, validated before any file is touched."""

    case: object
    method: Method
    form: str
    horizon: float
    samples: int
    settings: dict  # stored with the run: requested and used values
    stepper_settings: dict  # what the stepper is given
    y0: np.ndarray | None  # start state in `form`; None when it cannot be written in it
    params: np.ndarray
    exact: object | None
    run_id: str
    notes: list[str] = field(default_factory=list)
    start_singular: str = ""  # why the start has no state in this form (the pole)
    scales: Timescales | None = None  # the case's fastest and slowest periods

    @property
    def form_code(self) -> int:
        return form_code(self.form)

    @property
    def label(self) -> str:
        return f"{self.case.name} {self.method.name} {self.run_id[:8]}"

    def sample_time(self, k: int) -> float:
        if k == self.samples - 1:
            return self.horizon
        return self.horizon * k / (self.samples - 1)


@dataclass
class RunResult:
    run_id: str
    status: str
    metrics: dict
    detail: str = ""
    samples_stored: int | None = None  # how many samples the run's group holds


class StartFailed(MethodRefused):
    """The method's kernel raised (a division by zero, an overflow) in the first steps of a run:
    refused like any run that cannot start, so `topdrift run` says why in one line and exits 2,
    but told apart from a refusal by the method's own checks. A sweep skips it like a refusal;
    the regression gate calls a cell that ran before and now ends here "failed", not "refused"."""


def samples_at_interval(horizon: float, interval: float) -> int:
    """The horizon rule, one for every command: a horizon other than the case's keeps the
    sample interval, not the sample count, so that a fixed step that filled the case's interval
    fills the new one too (squeezing the case's samples into a shorter horizon would round every
    step down). The count is the nearest whole number of intervals, at least one; a horizon that
    is not a whole number of intervals gets a slightly different interval, and the step rounding
    then says so in the run's notes. An explicit sample count always wins over this rule."""
    if not (math.isfinite(horizon) and horizon > 0.0):
        raise UserError(f"--horizon: must be a positive finite number, got {horizon!r}")
    n = max(2, round(horizon / interval) + 1)
    if n > MAX_SAMPLES:
        raise UserError(
            f"--horizon {horizon:g} at a sample every {interval:g} s is {n:.3g} samples, more "
            f"than {MAX_SAMPLES}; give --samples"
        )
    return n


def samples_for_horizon(case, horizon: float) -> int:
    """The case's sample count over its own horizon, else the horizon rule (samples_at_interval)
    at the case's sample interval."""
    if horizon == case.horizon:
        return case.samples
    return samples_at_interval(horizon, case.horizon / (case.samples - 1))


def steps_per_interval(interval: float, step: float) -> int:
    """How many steps of about `step` fill one sample interval: the ratio rounded up, except that
    a ratio on the step grid by the contract's rule (whole_steps: within GRID_RTOL of a whole
    number) is that number (200 / 1e4 / 1e-5 is 2000.0000000000002 in floating point, and means
    2000 steps, not 2001)."""
    k = whole_steps(interval, step)
    if k is not None and k >= 1:
        return k
    return max(1, math.ceil(interval / step))


def start_state(case, form: str) -> np.ndarray:
    """The case's start state in `form` as a fresh C-contiguous float64 array.

    Raises SingularAttitude for a start on the vertical in the Euler form (see plan_run)."""
    theta = case.start.theta
    # theta = pi has sin(theta) = 1.2e-16, not 0, in floating point: the pole is tested by value.
    on_pole = theta <= 0.0 or theta >= math.pi or math.sin(theta) == 0.0
    if form == "euler" and case.body.lagrange_top and on_pole:
        pole = "upward" if theta < 1.0 else "downward"
        raise SingularAttitude(
            f"{case.name}: start.theta = {theta:.17g} rad is on the {pole} vertical, the pole of "
            "the Euler angles (sin(theta) = 0), where the Euler form is singular; run it in the "
            "body form (--form body)"
        )
    y = case.state(form)
    return np.ascontiguousarray(np.array(y, dtype=np.float64))


def make_run_id(
    case_toml: str, method: str, form: str, settings: dict, horizon: float, samples: int
) -> str:
    """A stable hash of what determines the run's numbers."""
    key = json.dumps(
        {
            "case_toml": case_toml,
            "method": method,
            "form": form,
            "settings": settings,
            "horizon": repr(float(horizon)),
            "samples": int(samples),
        },
        sort_keys=True,
    )
    return hashlib.sha256(key.encode()).hexdigest()[:16]


def plan_run(
    case,
    method_name: str,
    *,
    step=None,
    rtol=None,
    atol=None,
    form=None,
    horizon=None,
    samples=None,
) -> RunPlan:
    """Validate a run and settle its settings; raises UserError or MethodRefused (exit 2)."""
    method = get_method(method_name)
    body = case.body
    horizon = positive("--horizon", case.horizon if horizon is None else horizon)
    n = samples_for_horizon(case, horizon) if samples is None else samples
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 2:
        raise UserError(f"--samples: need a whole number of at least 2 (t = 0 and T), got {n!r}")
    if n > MAX_SAMPLES:  # the case files' own limit
        raise UserError(f"--samples: at most {MAX_SAMPLES} (t = 0 and T included), got {n}")
    n = int(n)
    notes = []
    if form is None:
        form = method.default_form(body)
    elif form not in FORM_NAMES:
        raise UserError(f"--form: expected one of {', '.join(FORM_NAMES)}, got {form!r}")
    interval = horizon / (n - 1)
    if method.info.control == "step":
        if step is None:
            raise UserError(f"{method.name}: a fixed-step method needs --step")
        if rtol is not None or atol is not None:
            raise UserError(f"{method.name}: a fixed-step method takes --step, not --rtol/--atol")
        h_req = positive("--step", step)
        per = steps_per_interval(interval, h_req)
        h = interval / per
        settings = {"step": h, "step_requested": h_req, "steps_per_sample": per}
        stepper_settings = {"step": h}
        if h != h_req:
            notes.append(
                f"step rounded {'down' if h < h_req else 'up'} from {h_req:.17g} to {h:.17g} "
                f"so that {per} steps fill "
                f"each sample interval of {interval:.17g}"
            )
    else:
        if step is not None:
            raise UserError(f"{method.name}: an adaptive method takes --rtol [--atol], not --step")
        if rtol is None:
            raise UserError(f"{method.name}: an adaptive method needs --rtol")
        r = positive("--rtol", rtol)
        a = r * 1e-3 if atol is None else positive("--atol", atol)
        settings = {"rtol": r, "atol": a}
        stepper_settings = {"rtol": r, "atol": a}
    method.check(body, form, stepper_settings)
    params = body.params()
    start_singular = ""
    try:
        y0 = start_state(case, form)
    except SingularAttitude as exc:
        # The Euler form cannot hold a start at the pole. Refused up front, like any other run a
        # method cannot do: a stored run that ends at t = 0 says nothing a user could not be told.
        raise MethodRefused(str(exc)) from None
    if y0.shape != (FORM_SIZE[form_code(form)],):
        raise UserError(f"{case.name}: start state has shape {y0.shape} for the {form} form")
    _check_budget(case, method, horizon, n, settings)
    exact = None
    if body.lagrange_top:
        k = np.arange(min(n, BATCH_ROWS))
        probe = np.append(horizon * k / (n - 1), horizon)
        exact = _exact_solution(body, form, y0, notes, probe)
    run_id = make_run_id(case.toml_text, method.name, form, settings, horizon, n)
    scales = timescales(case)
    alias = aliasing_note(interval, scales)
    if alias:
        notes.append(alias)
    plan = RunPlan(
        case,
        method,
        form,
        horizon,
        n,
        settings,
        stepper_settings,
        y0,
        params,
        exact,
        run_id,
        notes,
        start_singular,
        scales,
    )
    try:
        warm_up(plan)  # compiles, and lets start() refuse before any file exists
    except ArithmeticError as exc:
        # A kernel's own division by zero or overflow on this start (numba raises these): a
        # refusal naming it, not a traceback.
        raise StartFailed(
            f"{method.name}: cannot start on {case.name}: {type(exc).__name__} in the first steps "
            f"({exc})"
        ) from None
    return plan


def aliasing_note(interval: float, scales: Timescales) -> str:
    """The note for samples too far apart to show the fastest motion (more than half its period:
    the sampling theorem, common practice), or "" when they are not."""
    if not interval > 0.5 * scales.fastest:
        return ""
    return (
        f"samples every {interval:.3g} s are more than half the fastest period "
        f"({scales.fastest:.3g} s, {scales.fastest_what}): that motion is aliased in every "
        "figure drawn from the samples; more --samples show it"
    )


# The most steps one run may take: about 10 hours at 35 ns a step (the fastest kernels, see
# DESIGN.md), days for the others. A horizon that needs more is refused before anything runs,
# instead of keeping a machine busy for ever.
MAX_STEPS = 1e12


def _check_budget(case, method, horizon: float, n: int, settings: dict) -> None:
    """Refuse a run that cannot finish in any reasonable time (see MAX_STEPS)."""
    if "steps_per_sample" in settings:
        steps = float(settings["steps_per_sample"]) * (n - 1)
        if steps > MAX_STEPS:
            raise UserError(
                f"--horizon {horizon:g} with --step {settings['step_requested']:g} is "
                f"{steps:.3g} steps, more than the {MAX_STEPS:.0e} a run may take; shorten the "
                "horizon or lengthen the step"
            )
        return
    turns = horizon * fastest_rate(case) / (2.0 * math.pi)
    if turns > MAX_STEPS:
        raise UserError(
            f"--horizon {horizon:g}: {case.name} turns {turns:.3g} times over the horizon at its "
            f"fastest rate, so an adaptive method would take more than the {MAX_STEPS:.0e} steps "
            "a run may take; shorten the horizon"
        )


def _exact_solution(body, form: str, y0: np.ndarray, notes: list[str], probe: np.ndarray):
    try:
        from topdrift.models.exact import ExactUnavailable, LagrangeTop
    except ImportError:
        notes.append("no exact solution: topdrift.models.exact is not available")
        return None
    try:
        top = LagrangeTop.from_state(body, form, y0)
    except ExactUnavailable as exc:
        notes.append(f"no exact solution: {exc}")
        return None
    except ArithmeticError as exc:
        # The reference is a comparison, not the run: a start it cannot handle is said, not fatal.
        notes.append(f"no exact solution: {type(exc).__name__} while setting it up ({exc})")
        return None
    # Evaluate it once at the first batch of sample times and at T, so that a reference that
    # cannot be evaluated for this start is known before the run, not half way through it.
    try:
        _exact_rows(top, probe)
    except ExactFailed as exc:
        notes.append(f"no exact solution: {exc}")
        return None
    return top


class ExactFailed(RuntimeError):
    """The exact solution raised or returned non-finite values at some sample times."""


def warm_up(plan: RunPlan) -> None:
    """Compile every kernel the run calls, on throwaway copies, before any clock starts."""
    interval = plan.horizon / (plan.samples - 1)
    w = plan.method.start(
        plan.form_code, plan.params.copy(), 0.0, plan.y0.copy(), dict(plan.stepper_settings)
    )
    if "step" in plan.stepper_settings:
        h = plan.stepper_settings["step"]
        w.advance_to(2.0 * h)
    else:
        w.advance_to(interval * 1e-6)
    for key, value in w.snapshot().items():  # a checkpoint holds numbers and text only
        try:
            entry_layout(value)
        except TypeError as exc:
            raise MethodRefused(f"{plan.method.name}: snapshot entry {key!r}: {exc}") from None
    SampleBuffers(1, plan.y0.shape[0]).record(plan.form_code, plan.y0, plan.params, 0)


def _exact_rows(top, t: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact (phi, theta, psi), folded like the computed ones, the whole turns of phi and psi
    (int64, n x 2) and the exact figure axis (from the exact solution's folded angles: no bit
    is lost to the unfolded ones)."""
    try:
        ang = top.folded(t)
        e = np.column_stack((ang.phi, ang.theta, ang.psi))
        turns = np.column_stack((ang.phi_turns, ang.psi_turns)).astype(np.int64)
        a = ang.axis()
    except Exception as exc:  # a reference that breaks must end the run loudly, not crash it
        raise ExactFailed(
            f"the exact solution failed for t in [{t[0]:.6g}, {t[-1]:.6g}]: "
            f"{type(exc).__name__}: {exc}"
        ) from None
    if not (np.all(np.isfinite(e)) and np.all(np.isfinite(a))):
        bad = t[~(np.all(np.isfinite(e), axis=1) & np.all(np.isfinite(a), axis=1))]
        raise ExactFailed(f"the exact solution is not finite at t = {bad[0]:.17g}")
    return e, a, turns


def versions() -> dict:
    """Library versions and the CPU model (a fresh dict each call)."""
    return dict(_versions())


@functools.cache
def _versions() -> dict:
    # Looked up once per process: package metadata reads take milliseconds.
    import platform
    import sys
    from importlib.metadata import PackageNotFoundError, version

    out = {"python": sys.version.split()[0]}
    for pkg in ("topdrift", "numpy", "scipy", "numba", "h5py"):
        try:
            out[pkg] = version(pkg)
        except PackageNotFoundError:
            out[pkg] = None
    cpu = platform.processor() or platform.machine()
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.startswith("model name"):
                    cpu = line.split(":", 1)[1].strip()
                    break
    except OSError:
        pass
    out["cpu"] = cpu
    return out


def run_attrs(plan: RunPlan) -> dict:
    c = plan.case
    return {
        "case": c.name,
        "case_toml": c.toml_text,
        "method": plan.method.name,
        "form": plan.form,
        "settings": json.dumps(plan.settings),
        "horizon": float(plan.horizon),
        "samples": int(plan.samples),
        "created": utc_now(),
        "versions": json.dumps(versions()),
        "notes": json.dumps(plan.notes),
    }


class _Run(SampledRun):
    """A single run in progress, as the sample loop drives it; its state() is the checkpoint.

    A batch holds BATCH_ROWS samples; each write appends them with the exact solution at their
    times, folds them into the metric accumulator and replaces the checkpoint."""

    def __init__(self, plan: RunPlan, group: RunGroup, stop: StopFlag, progress):
        self.plan = plan
        self.group = group
        self.stop = stop
        self.progress = progress
        self.samples = plan.samples
        self.has_exact = plan.exact is not None
        self.k = 0  # next sample to take
        self.wall = 0.0
        self.cpu = 0.0  # CPU time of the same calls: on a shared machine, the steadier number
        self.stepper: Stepper | None = None
        self.acc: Accumulator | None = None
        self.rows = min(BATCH_ROWS, plan.samples)
        self.buf = SampleBuffers(self.rows, FORM_SIZE[plan.form_code])

    def fresh_stepper(self) -> Stepper:
        p = self.plan
        return p.method.start(
            p.form_code, p.params.copy(), 0.0, p.y0.copy(), dict(p.stepper_settings)
        )

    def checkpoint(self) -> None:
        self.group.write_checkpoint(
            checkpoint_parts(self.k, self.wall, self.cpu, self.stepper, self.acc)
        )

    def _read_checkpoint_v1(self, template: dict) -> dict | None:
        """The checkpoint of a run in a version-1 group: in the layout of that version (no turn
        counts: zeros, the angles unfolded) or, failing that, in today's layout."""
        # Which of the two: by the name alone (links were refused when the file was opened);
        # the read then checks every entry as it checks any checkpoint.
        if self.group.g.get(f"{CHECKPOINT_GROUP}/stepper/turns", getlink=True) is not None:
            return self.group.read_checkpoint(template)
        without = {part: dict(entries) for part, entries in template.items()}
        turns = without["stepper"].pop("turns")
        cp = self.group.read_checkpoint(without)
        if cp is not None:
            cp["stepper"]["turns"] = np.zeros_like(turns)
        return cp

    def restore(self, truncate: bool = True) -> None:
        """Everything a resume reads, read and checked before anything is written: the
        checkpoint, the stored samples up to it (read through, so that a damaged chunk refuses
        the resume while the file is as it was), and only then the rows past it dropped
        (unless truncate is False: check_resume on a file open for reading)."""
        p = self.plan
        where = f"{self.group.f.filename}: run {p.run_id}"
        # Read as this run would write it now (names, dtypes, shapes; store/checkpoint.py):
        # nothing in the file decides what is read.
        template = checkpoint_parts(1, 0.0, 0.0, self.fresh_stepper(), start_accumulator(p))
        # A version-1 checkpoint predates the turn counts: its angles are unfolded, which is
        # the same state with no turns taken off (the kernels fold them at the next step).
        # A version-1 run resumed by this code and stopped again has a checkpoint of today's
        # layout, turns included: either of the two layouts is read, nothing else.
        old = not self.group.keeps_turns and "turns" in template["stepper"]
        with damage_is_an_error(self.group.f.filename):
            if old:
                cp = self._read_checkpoint_v1(template)
            else:
                cp = self.group.read_checkpoint(template)
        if cp is None:
            raise UserError(f"{where}: no checkpoint to resume from; use --force")
        try:
            self._restore_from(cp)
        except (KeyError, ValueError, TypeError, IndexError) as exc:
            # What a checkpoint of another method or layout, or a damaged one, gives.
            raise UserError(
                f"{where}: the checkpoint cannot be restored ({type(exc).__name__}: "
                f"{first_line(exc)}); use --force to run it again"
            ) from None
        self._check_rows()
        check_run_samples(self.group.f, p.run_id, self.group.parent)
        if p.exact is not None:
            # The attitude maximum is no part of the checkpoint (run/metrics.py, ATTITUDE_NAME):
            # taken again from the stored rows the accumulator saw, it ends bit for bit as an
            # uninterrupted run's, also for a checkpoint written before the metric existed.
            g = self.group.g
            with damage_is_an_error(self.group.f.filename):
                quat, exact_euler = g["quaternion"][: self.k], g["exact/euler"][: self.k]
            self.acc.attitude_from_rows(quat, exact_euler)
        if truncate:
            self.group.truncate(self.k)

    def _restore_from(self, cp: dict) -> None:
        """Take the checkpoint back, trusting nothing in it: the stepper checks its own
        snapshot (validation.check_snapshot), and what ties it to this run is checked here: the
        sample it stopped at, that sample's time, a state of this form, and the reference values
        of this run's start (bit for bit). Raises ValueError naming what is wrong."""
        p = self.plan
        run = cp["run"]
        k = run["sample"]
        if not 1 <= k <= p.samples:
            raise ValueError(f"run/sample is {k}, not a sample of this run (1 to {p.samples})")
        if run["t"] != p.sample_time(k - 1):
            raise ValueError(f"run/t is {run['t']!r}, not the time of sample {k - 1}")
        for key in ("wall_s", "cpu_s"):
            if not (math.isfinite(run[key]) and run[key] >= 0.0):
                raise ValueError(f"run/{key} is {run[key]!r}, not a time spent")
        if not np.all(np.isfinite(run["y"])) or singular(p.form_code, run["y"]):
            raise ValueError("run/y is not a finite state of this form")
        stepper = self.fresh_stepper()
        stepper.restore(cp["stepper"])  # SnapshotRefused (a ValueError) names the field
        stepper.counters[:] = run["counters"]
        if not (stepper.t == run["t"] and np.array_equal(stepper.y, run["y"])):
            raise ValueError("the stepper did not restore its checkpoint exactly")
        acc = Accumulator.from_state(cp["metrics"])
        if acc.reference() != start_accumulator(p).reference():
            raise ValueError("metrics/ holds the reference values of another start, case or form")
        self.k, self.wall, self.cpu = k, run["wall_s"], run["cpu_s"]
        self.stepper, self.acc = stepper, acc

    def _check_rows(self) -> None:
        p = self.plan
        where = f"{self.group.f.filename}: run {p.run_id}"
        present = self.group.datasets()
        needed = [*SAMPLE_DATASETS, STATE_DATASET, *(EXACT_DATASETS if p.exact is not None else ())]
        missing = [name for name in needed if name not in present]
        if p.exact is None and any(name in present for name in EXACT_DATASETS):
            raise UserError(f"{where}: holds exact-solution datasets its case does not have")
        if missing:
            raise UserError(
                f"{where}: dataset '{missing[0]}' is missing; the file lost samples: use --force "
                "to run it again"
            )
        # Rows past the checkpoint are dropped; rows missing before it (a file damaged after
        # its last flush) would leave a gap that appending cannot mend.
        short = {
            name: ds.shape[0] for name, ds in self.group.datasets().items() if ds.shape[0] < self.k
        }
        if short:
            name, rows = next(iter(short.items()))
            raise UserError(
                f"{where}: the checkpoint is at sample {self.k} but dataset '{name}' holds "
                f"{rows} rows; the file lost samples: use --force to run it again"
            )

    # The loop's side of a single run (see loop.SampledRun).

    def sample_time(self, k: int) -> float:
        return self.plan.sample_time(k)

    def steps(self) -> int:
        return int(self.stepper.counters[C_STEPS])

    def take_start(self) -> int:
        if self.k > 0:
            return 0
        form, s, buf = self.plan.form_code, self.stepper, self.buf
        buf.t[0] = 0.0
        if not buf.record(form, s.y, self.plan.params, 0, s.turns):
            raise UserError(f"{self.plan.case.name}: the start state is not finite")
        body = self.plan.case.body
        self.acc = Accumulator.at_start(
            buf.scal[0],
            buf.mom[0],
            self.plan.params,
            self.has_exact,
            form != FORM_EULER,
            has_p_psi=body.keeps_p_psi,
            has_kovalevskaya=body.kovalevskaya,
            has_p_phi=body.keeps_p_phi,
            has_energy=body.keeps_energy,
        )
        self.k = 1
        return 1

    def advance(self, tk: float) -> Outcome | None:
        try:
            st = self._advance_to(tk)
        except MethodRefused as exc:
            return Outcome(FAILED, str(exc), float(self.stepper.t))
        except ArithmeticError as exc:  # a kernel's own division by zero or overflow
            t = float(self.stepper.t)
            return Outcome(FAILED, f"{type(exc).__name__} in the integrator after t = {t:.17g}", t)
        if st is None:
            return STOPPED
        if st != ST_OK:
            s = self.stepper
            return stepper_outcome(st, failure_time(s.t_fail, s.t))
        return None

    def record(self, j: int, tk: float) -> Outcome | None:
        self.buf.t[j] = tk
        s = self.stepper
        if not self.buf.record(self.plan.form_code, s.y, self.plan.params, j, s.turns):
            return Outcome(DIVERGED, f"non-finite state at t = {tk:.17g}", tk)
        return None

    def check(self, j: int, tk: float) -> Outcome | None:
        e_rel = abs(self.buf.scal[j, S_ENERGY] - self.acc.e0) / self.acc.e_scale
        if not self.acc.has_energy:
            return None  # a field that is no gradient: energy leaves freely (record() checks NaN)
        if not e_rel <= 1.0:
            return Outcome(DIVERGED, f"relative energy error {e_rel:.3g} > 1 at t = {tk:.17g}", tk)
        return None

    def write(self, j: int) -> Outcome | None:
        buf = self.buf
        # Checked before anything is written (see store.NoRoom). A write appends the new rows
        # and rewrites the last, partly filled chunk of every dataset (compressed, perhaps at a
        # new place in the file), plus the checkpoint: rows + one chunk of rows, uncompressed,
        # bound it.
        row_bytes = 8 * (buf.state.shape[1] + 5 + 4 + 3 + N_SCALARS + (8 if self.has_exact else 0))
        rows = j + min(CHUNK_ROWS, self.samples)
        ensure_room(self.group.f, rows * row_bytes + 64 * 1024, f"the samples up to {self.k}")
        if j:
            tb = buf.t[:j].copy()
            batch = {"t": tb, **buf.rows_of(0, j, kovalevskaya=self.acc.has_kovalevskaya)}
            ee = ea = et = None
            if self.has_exact:
                try:
                    ee, ea, et = _exact_rows(self.plan.exact, tb)
                except ExactFailed as exc:
                    # The batch is dropped whole: every stored row has its exact counterpart.
                    return Outcome(FAILED, str(exc))
                batch["exact/euler"] = ee
                batch["exact/axis"] = ea
                batch[EXACT_TURNS_DATASET] = et
            # Turns of the computed angles are known in the Euler form only (the body form has
            # them modulo 2 pi, from the quaternion): its errors then compare angles wrapped.
            turns = buf.turns[:j] if self.plan.form_code == FORM_EULER else None
            self.acc.update(
                buf.scal[:j], buf.euler[:j], buf.axis[:j], ee, ea, turns, et, buf.quat[:j]
            )
            self.group.append(batch)
        self.checkpoint()
        m = self.acc.maxima_dict()
        m["steps"] = self.steps()
        self.group.set_metrics(m)
        self.group.flush()
        return None

    def _advance_to(self, tk: float) -> int | None:
        """Advance the stepper to the sample time tk, timing the calls; returns its status, or
        None when a stop was asked for inside a long interval (the stepper is then back at
        t_(k-1)).

        A fixed-step interval longer than CHUNK_STEPS steps is taken in pieces of CHUNK_STEPS,
        so that the progress bar moves and a signal is heard within a fraction of a second. The
        pieces are fixed by the step count, never by the clock, so that a run repeats its
        bits."""
        plan, s = self.plan, self.stepper
        per = plan.settings.get("steps_per_sample", 0)
        if per <= CHUNK_STEPS:
            return self._timed(s, tk)
        at_start = (s.snapshot(), self.wall, self.cpu)
        h = plan.stepper_settings["step"]
        t_prev = plan.sample_time(self.k - 1)
        done = 0
        while True:
            left = per - done
            target = tk if left <= CHUNK_STEPS else t_prev + (done + CHUNK_STEPS) * h
            st = self._timed(s, target)
            if st != ST_OK or target == tk:
                return st
            done += CHUNK_STEPS
            if self.progress:
                self.progress.update(self.k - 1 + done / per, self.steps())
            if self.stop.requested:
                # Back to the last sample: the checkpoint must describe a state at a sample time.
                fresh = self.fresh_stepper()
                fresh.restore(at_start[0])
                self.stepper = fresh
                self.wall, self.cpu = at_start[1], at_start[2]
                return None

    def _timed(self, s: Stepper, t: float) -> int:
        c0, t0 = time.thread_time(), time.perf_counter()
        try:
            return s.advance_to(t)
        finally:
            self.wall += time.perf_counter() - t0
            self.cpu += time.thread_time() - c0

    def final_metrics(self, t_fail) -> dict:
        g = self.group.g
        t = g["t"][()]
        energy = g["invariants/energy"][()]
        acc, counters = self.acc, self.stepper.counters
        return finish(acc, counters, self.wall, self.cpu, t, energy, t_fail, self.plan.scales)


def checkpoint_parts(k: int, wall: float, cpu: float, stepper: Stepper, acc: Accumulator) -> dict:
    """What a checkpoint holds, by part (the writer's input and, from a fresh stepper, the
    reader's template)."""
    return {
        "run": {
            "sample": int(k),
            "wall_s": float(wall),
            "cpu_s": float(cpu),
            "t": float(stepper.t),
            "y": np.array(stepper.y, dtype=np.float64),
            "counters": np.array(stepper.counters, dtype=np.int64),
        },
        "stepper": stepper.snapshot(),
        "metrics": acc.state(),
    }


def start_accumulator(plan: RunPlan) -> Accumulator:
    """The reference values a run takes from its start sample (as take_start does)."""
    b = SampleBuffers(1, FORM_SIZE[plan.form_code])
    b.record(plan.form_code, plan.y0, plan.params, 0)
    has_norm = plan.form_code != FORM_EULER
    body = plan.case.body
    return Accumulator.at_start(
        b.scal[0],
        b.mom[0],
        plan.params,
        plan.exact is not None,
        has_norm,
        has_p_phi=body.keeps_p_phi,
        has_energy=body.keeps_energy,
    )


def check_resume(plan: RunPlan, f, parent: str = RUNS) -> None:
    """Every check a resume of plan makes (its checkpoint restores exactly, the stored samples
    up to it are all there and readable), on a file open for reading, for the run under /runs
    or under `parent`. The command line calls this before it opens the file for writing, so
    that a refused resume leaves the file byte for byte as it was (HDF5 may write into a file it
    only opens for writing)."""
    _Run(plan, RunGroup(f, plan.run_id, parent), StopFlag(), None).restore(truncate=False)


def execute(
    plan: RunPlan,
    f,
    *,
    resume: bool = False,
    progress=None,
    stop: StopFlag | None = None,
    flush_every: float = FLUSH_EVERY_S,
    parent: str = RUNS,
) -> RunResult:
    """Run a plan into the open store f (creating or continuing its group under `parent`:
    /runs, or /replacing for a run that is to replace a stored one, store/replacement.py)."""
    stop = stop or StopFlag()
    width = FORM_SIZE[plan.form_code]
    if resume:
        group = RunGroup(f, plan.run_id, parent)
        run = _Run(plan, group, stop, progress)
        run.restore()
        group.set(status=RUNNING)
        group.flush()
    else:
        has_exact = plan.exact is not None
        group = RunGroup.create(
            f,
            plan.run_id,
            run_attrs(plan),
            width,
            has_exact,
            plan.samples,
            kovalevskaya=plan.case.body.kovalevskaya,
            parent=parent,
            euler_form=plan.form_code == FORM_EULER,
        )
        run = _Run(plan, group, stop, progress)
        run.stepper = run.fresh_stepper()
    try:
        end = sample_loop(run, progress=progress, stop=stop, flush_every=flush_every)
    except NoRoom as exc:
        # Nothing of the batch was written: the run stops at its last checkpoint, marked
        # interrupted (a few bytes, within the margin kept), and --resume goes on from there.
        group.set(status=INTERRUPTED, detail=str(exc))
        group.flush()
        if progress:
            progress.end(INTERRUPTED)
        done = group.n_stored
        raise NoRoom(
            f"{exc}; run {plan.run_id} is interrupted with {done} of {plan.samples} samples "
            "stored: make room, then go on with --resume"
        ) from None
    end = end or Outcome(OK)
    metrics = run.final_metrics(end.t_fail)
    close_run(group, end.status, end.detail, metrics, progress)
    return RunResult(plan.run_id, end.status, metrics, end.detail, group.n_stored)
