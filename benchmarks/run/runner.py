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

from topdrift.benchmarks.cases.schema import LARGEST, MAX_SAMPLES, SMALLEST
from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.metrics import Accumulator, finish
from topdrift.benchmarks.run.sampling import (
    N_SCALARS,
    S_ENERGY,
    S_NORM,
    S_P_PHI,
    S_P_PSI,
    record_sample,
)
from topdrift.benchmarks.store.checkpoint import CheckpointRefused
from topdrift.benchmarks.store.writer import CHUNK_ROWS, NoRoom, RunGroup, ensure_room, utc_now
from topdrift.integrators import (
    ST_DIVERGED,
    ST_NO_CONVERGENCE,
    ST_OK,
    ST_SINGULAR,
    ST_STEP_UNDERFLOW,
    STATUS_NAMES,
    Method,
    MethodRefused,
    Stepper,
    snapshot_kinds,
)
from topdrift.integrators import get as get_method
from topdrift.models import FORM_NAMES, FORM_SIZE, SingularAttitude, form_code
from topdrift.models.dynamics import singular

FLUSH_EVERY_S = 2.0
BATCH_ROWS = 4096
CHUNK_STEPS = 1 << 20  # steps per call inside a long fixed-step interval (see _advance)


@dataclass
class StopFlag:
    """Set by a signal handler; the runner looks at it after every sample."""

    signum: int = 0

    @property
    def requested(self) -> bool:
        return self.signum != 0


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


def _positive(name: str, v) -> float:
    try:
        v = float(v)
    except (TypeError, ValueError):
        raise UserError(f"{name}: expected a number, got {v!r}") from None
    if not (math.isfinite(v) and v > 0.0):
        raise UserError(f"{name}: must be a positive finite number, got {v!r}")
    if not SMALLEST <= v <= LARGEST:  # the range case files keep to (see case.py)
        raise UserError(
            f"{name}: {v:g} is outside the range topdrift computes with "
            f"({SMALLEST:g} to {LARGEST:g} in SI units)"
        )
    return v


def steps_per_interval(interval: float, step: float) -> int:
    """How many steps of about `step` fill one sample interval: the ratio rounded up, except that
    a ratio within 1e-9 of a whole number is that number (200 / 1e4 / 1e-5 is 2000.0000000000002
    in floating point, and means 2000 steps, not 2001)."""
    ratio = interval / step
    k = round(ratio)
    if k >= 1 and abs(ratio - k) <= 1e-9 * k:
        return k
    return max(1, math.ceil(ratio))


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
    horizon = _positive("--horizon", case.horizon if horizon is None else horizon)
    n = case.samples if samples is None else samples
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
        h_req = _positive("--step", step)
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
        r = _positive("--rtol", rtol)
        a = r * 1e-3 if atol is None else _positive("--atol", atol)
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
    )
    try:
        warm_up(plan)  # compiles, and lets start() refuse before any file exists
    except ArithmeticError as exc:
        # A kernel's own division by zero or overflow on this start (numba raises these): a
        # refusal naming it, not a traceback.
        raise MethodRefused(
            f"{method.name}: cannot start on {case.name}: {type(exc).__name__} in the first steps "
            f"({exc})"
        ) from None
    return plan


# The most steps one run may take: about 10 hours at 35 ns a step (the fastest kernels, see
# DESIGN.md), days for the others. A horizon that needs more is refused before anything runs,
# instead of keeping a machine busy for ever.
MAX_STEPS = 1e12


def fastest_rate(case) -> float:
    """The fastest angular rate of the case at its start (rad/s): the body's angular velocity
    |w| = |I^-1 m|, or the pendulum rate sqrt(M g |chi| / I_min) of the gravity torque, whichever
    is larger. An explicit method following a rotation or oscillation at rate w needs h w below
    a small constant (its stability interval on the imaginary axis, below 2 pi for every method
    here: common practice), and any method needs about one step per turn to resolve it."""
    body = case.body
    y = case.body_state()
    w = np.asarray(y[4:7], dtype=np.float64) / np.asarray(body.inertia, dtype=np.float64)
    spin = float(np.sqrt(np.sum(w * w)))
    lever = float(np.sqrt(np.sum(np.asarray(body.com, dtype=np.float64) ** 2)))
    swing = math.sqrt(body.mass * body.gravity * lever / min(body.inertia))
    return max(spin, swing)


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


class _Buffers:
    """Preallocated sample rows between flushes, plus the scratch arrays of record_sample."""

    def __init__(self, rows: int, width: int):
        self.state = np.zeros((rows, width))
        self.euler = np.zeros((rows, 3))
        self.quat = np.zeros((rows, 4))
        self.mom = np.zeros((rows, 3))
        self.axis = np.zeros((rows, 3))
        self.scal = np.zeros((rows, N_SCALARS))
        self.t = np.zeros(rows)
        self.ye = np.zeros(6)
        self.yb = np.zeros(7)
        self.inv = np.zeros(5)
        self.rows = rows

    def record(self, form: int, y: np.ndarray, p: np.ndarray, j: int) -> bool:
        return record_sample(
            form,
            y,
            p,
            j,
            self.state,
            self.euler,
            self.quat,
            self.mom,
            self.axis,
            self.scal,
            self.ye,
            self.yb,
            self.inv,
        )


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
    try:
        snapshot_kinds(w.snapshot())  # numbers only: a checkpoint can hold nothing else
    except TypeError as exc:
        raise MethodRefused(f"{plan.method.name}: {exc}") from None
    b = _Buffers(1, plan.y0.shape[0])
    b.record(plan.form_code, plan.y0, plan.params, 0)


def _exact_rows(top, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact (phi, theta, psi), folded like the computed ones, and the exact figure axis."""
    try:
        e = np.array(top.euler(t), dtype=np.float64).reshape(-1, 3)
        a = np.array(top.axis(t), dtype=np.float64).reshape(-1, 3)
    except Exception as exc:  # a reference that breaks must end the run loudly, not crash it
        raise ExactFailed(
            f"the exact solution failed for t in [{t[0]:.6g}, {t[-1]:.6g}]: "
            f"{type(exc).__name__}: {exc}"
        ) from None
    if not (np.all(np.isfinite(e)) and np.all(np.isfinite(a))):
        bad = t[~(np.all(np.isfinite(e), axis=1) & np.all(np.isfinite(a), axis=1))]
        raise ExactFailed(f"the exact solution is not finite at t = {bad[0]:.17g}")
    e[:, 0] = np.arctan2(np.sin(e[:, 0]), np.cos(e[:, 0]))
    e[:, 2] = np.arctan2(np.sin(e[:, 2]), np.cos(e[:, 2]))
    return e, a


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


class _Run:
    """The mutable part of a run in progress; its state() is the checkpoint."""

    def __init__(self, plan: RunPlan, group: RunGroup):
        self.plan = plan
        self.group = group
        self.k = 0  # next sample to take
        self.wall = 0.0
        self.cpu = 0.0  # CPU time of the same calls: on a shared machine, the steadier number
        self.stepper: Stepper | None = None
        self.acc: Accumulator | None = None

    def checkpoint(self) -> None:
        self.group.write_checkpoint(
            checkpoint_parts(self.k, self.wall, self.cpu, self.stepper, self.acc)
        )

    def restore(self) -> None:
        """Continue from the checkpoint, trusting nothing in it: it is read as this run would
        write it now (names, dtypes, shapes; store/checkpoint.py), the stepper checks its own
        snapshot (integrators/base.py, check_snapshot), and what ties it to this run is checked
        here: the sample it stopped at, its time, and the start sample's reference values.
        Nothing is written before every check has passed, so a refused resume leaves the file
        as it was."""
        p = self.plan
        fresh = p.method.start(
            p.form_code, p.params.copy(), 0.0, p.y0.copy(), dict(p.stepper_settings)
        )
        acc0 = start_accumulator(p)
        cp = self.group.read_checkpoint(checkpoint_parts(1, 0.0, 0.0, fresh, acc0))
        if cp is None:
            raise UserError(f"run {p.run_id}: no checkpoint to resume from; use --force")

        def refuse(what: str):
            raise CheckpointRefused(
                f"run {p.run_id}: checkpoint {what}; it cannot be resumed (--force runs it again)"
            )

        run = cp["run"]
        k = run["sample"]
        if not 1 <= k <= p.samples:
            refuse(f"run/sample is {k}, not a sample of this run (1 to {p.samples})")
        if run["t"] != p.sample_time(k - 1):
            refuse(f"run/t is {run['t']!r}, not the time of sample {k - 1}")
        for key in ("wall_s", "cpu_s"):
            if not (math.isfinite(run[key]) and run[key] >= 0.0):
                refuse(f"run/{key} is {run[key]!r}, not a time spent")
        if not np.all(np.isfinite(run["y"])) or singular(p.form_code, run["y"]):
            refuse("run/y is not a finite state of this form")
        try:
            fresh.check_snapshot(cp["stepper"])  # for plug-ins whose restore does not
            fresh.restore(cp["stepper"])
        except (ValueError, TypeError, KeyError, IndexError, ArithmeticError) as exc:
            refuse(f"stepper/: {exc}")  # MethodRefused is a ValueError
        fresh.counters[:] = run["counters"]
        if not (fresh.t == run["t"] and np.array_equal(fresh.y, run["y"])):
            raise UserError(f"run {p.run_id}: the stepper did not restore its checkpoint exactly")
        try:
            acc = Accumulator.from_state(cp["metrics"])
        except ValueError as exc:
            refuse(f"metrics/: {exc}")
        if acc.reference() != acc0.reference():
            refuse("metrics/ holds the reference values of another start, case or form")
        # Rows past the checkpoint are dropped; rows missing before it (a file damaged after
        # its last flush) would leave a gap that appending cannot mend.
        short = {name: ds.shape[0] for name, ds in self.group.datasets().items() if ds.shape[0] < k}
        if short:
            name, rows = next(iter(short.items()))
            raise UserError(
                f"run {p.run_id}: the checkpoint is at sample {k} but dataset '{name}' holds "
                f"{rows} rows; the file lost samples: use --force to run it again"
            )
        self.k = k
        self.wall = run["wall_s"]
        self.cpu = run["cpu_s"]
        self.stepper = fresh
        self.acc = acc
        self.group.truncate(self.k)


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
    """The reference values a run takes from its start sample (as _loop does at k = 0)."""
    b = _Buffers(1, FORM_SIZE[plan.form_code])
    b.record(plan.form_code, plan.y0, plan.params, 0)
    has_exact = plan.exact is not None
    return Accumulator.at_start(b.scal[0], b.mom[0], plan.params, has_exact, plan.form_code != 0)


def execute(
    plan: RunPlan,
    f,
    *,
    resume: bool = False,
    progress=None,
    stop: StopFlag | None = None,
    flush_every: float = FLUSH_EVERY_S,
) -> RunResult:
    """Run a plan into the open store f (creating or continuing its group)."""
    stop = stop or StopFlag()
    has_exact = plan.exact is not None
    width = FORM_SIZE[plan.form_code]
    if resume:
        group = RunGroup(f, plan.run_id)
        run = _Run(plan, group)
        run.restore()
        group.set(status="running")
        group.flush()
    else:
        group = RunGroup.create(f, plan.run_id, run_attrs(plan), width, has_exact, plan.samples)
        run = _Run(plan, group)
    if not resume:
        run.stepper = plan.method.start(
            plan.form_code, plan.params.copy(), 0.0, plan.y0.copy(), dict(plan.stepper_settings)
        )
    try:
        return _loop(plan, run, has_exact, progress, stop, flush_every)
    except NoRoom as exc:
        # Nothing of the batch was written: the run stops at its last checkpoint, marked
        # interrupted (a few bytes, within the margin kept), and --resume goes on from there.
        group.set(status="interrupted", detail=str(exc))
        group.flush()
        if progress:
            progress.end("interrupted")
        done = group.n_stored
        raise NoRoom(
            f"{exc}; run {plan.run_id} is interrupted with {done} of {plan.samples} samples "
            "stored: make room, then go on with --resume"
        ) from None


def _loop(plan, run: _Run, has_exact, progress, stop, flush_every) -> RunResult:
    form = plan.form_code
    p = plan.params
    n = plan.samples
    s = run.stepper
    buf = _Buffers(min(BATCH_ROWS, n), FORM_SIZE[form])
    j = 0
    status = "ok"
    detail = ""
    t_fail = None
    exact_failed = False
    last_flush = time.perf_counter()
    if progress:
        progress.begin(run.k, int(s.counters[0]))

    def flush() -> None:
        nonlocal j, last_flush
        # Checked before anything is written (see store.NoRoom). A flush writes the new rows
        # and rewrites the last, partly filled chunk of every dataset (compressed, perhaps at a
        # new place in the file), plus the checkpoint: rows + one chunk of rows, uncompressed,
        # bound it.
        row_bytes = 8 * (buf.state.shape[1] + 3 + 4 + 3 + 4 + (6 if has_exact else 0))
        rows = j + min(CHUNK_ROWS, n)
        ensure_room(run.group.f, rows * row_bytes + 64 * 1024, f"the samples up to {run.k}")
        if j:
            tb = buf.t[:j].copy()
            batch = {
                "t": tb,
                "state": buf.state[:j],
                "euler": buf.euler[:j],
                "quaternion": buf.quat[:j],
                "momentum": buf.mom[:j],
                "invariants/energy": buf.scal[:j, S_ENERGY],
                "invariants/p_phi": buf.scal[:j, S_P_PHI],
                "invariants/p_psi": buf.scal[:j, S_P_PSI],
                "invariants/norm": buf.scal[:j, S_NORM],
            }
            ee = ea = None
            if has_exact:
                ee, ea = _exact_rows(plan.exact, tb)  # raises ExactFailed
                batch["exact/euler"] = ee
                batch["exact/axis"] = ea
            run.acc.update(buf.scal[:j], buf.euler[:j], buf.axis[:j], ee, ea)
            run.group.append(batch)
        run.checkpoint()
        m = run.acc.maxima_dict()
        m["steps"] = int(s.counters[0])
        run.group.set_metrics(m)
        run.group.flush()
        j = 0
        last_flush = time.perf_counter()
        if progress:
            progress.flushed(run.k, int(s.counters[0]))

    if run.k == 0:
        buf.t[0] = 0.0
        if not buf.record(form, s.y, p, 0):
            raise UserError(f"{plan.case.name}: the start state is not finite")
        run.acc = Accumulator.at_start(buf.scal[0], buf.mom[0], p, has_exact, form != 0)
        j = 1
        run.k = 1
    while run.k < n:
        tk = plan.sample_time(run.k)
        try:
            st = _advance(plan, run, tk, stop, progress)
        except MethodRefused as exc:
            status, detail, t_fail = "failed", str(exc), float(run.stepper.t)
            break
        except ArithmeticError as exc:  # a kernel's own division by zero or overflow
            status, t_fail = "failed", float(run.stepper.t)
            detail = f"{type(exc).__name__} in the integrator after t = {t_fail:.17g} ({exc})"
            break
        s = run.stepper  # a stop inside a long interval rolls the stepper back to t_(k-1)
        if st is None:
            flush()
            return _interrupted(plan, run, progress)
        if st != ST_OK:
            t_fail = float(s.t_fail) if math.isfinite(s.t_fail) else float(s.t)
            if st == ST_SINGULAR:
                status = "singular"
            elif st == ST_DIVERGED:
                status = "diverged"
            else:
                status = "failed"
            detail = f"{STATUS_NAMES[st]} at t = {t_fail:.17g}"
            if st in _WHY:
                detail += f": {_WHY[st]}"
            break
        buf.t[j] = tk
        if not buf.record(form, s.y, p, j):
            status, t_fail = "diverged", tk
            detail = f"non-finite state at t = {tk:.17g}"
            break
        e_rel = abs(buf.scal[j, S_ENERGY] - run.acc.e0) / run.acc.e_scale
        j += 1
        run.k += 1
        if not e_rel <= 1.0:
            status, t_fail = "diverged", tk
            detail = f"relative energy error {e_rel:.3g} > 1 at t = {tk:.17g}"
            break
        if progress:
            progress.update(run.k, int(s.counters[0]))
        if run.k < n and (
            j == buf.rows or stop.requested or time.perf_counter() - last_flush >= flush_every
        ):
            try:
                flush()
            except ExactFailed as exc:
                status, detail, t_fail, exact_failed = "failed", str(exc), None, True
                break
            if stop.requested:
                return _interrupted(plan, run, progress)
    if not exact_failed:
        try:
            flush()
        except ExactFailed as exc:
            # The batch is dropped whole: every stored row has its exact counterpart.
            status, detail, t_fail = "failed", str(exc), None
    metrics = _final_metrics(run, t_fail)
    run.group.set_metrics(metrics)
    # The samples reach the disk before the final status is set: a write that fails (a full
    # disk, a file-size limit) raises here, and the run stays `running`, never `ok` and short.
    run.group.flush()
    run.group.set(status=status, detail=detail)
    run.group.flush()
    if progress:
        progress.end(status)
    return RunResult(plan.run_id, status, metrics, detail)


# What a stepper's failure status means, said in the run's detail after "<status> at t = ...".
_WHY = {
    ST_STEP_UNDERFLOW: "the adaptive step fell below 10 ulp of t (round-off) without meeting "
    "the tolerance; loosen --rtol/--atol or look for a singularity near that time",
    ST_NO_CONVERGENCE: "the implicit stages did not converge; take a smaller --step",
}


def _interrupted(plan: RunPlan, run: _Run, progress) -> RunResult:
    metrics = _final_metrics(run, None)
    run.group.set_metrics(metrics)
    run.group.set(status="interrupted")
    run.group.flush()
    if progress:
        progress.end("interrupted")
    return RunResult(plan.run_id, "interrupted", metrics)


def _advance(plan: RunPlan, run: _Run, tk: float, stop: StopFlag, progress) -> int | None:
    """Advance the stepper to the sample time tk, timing the calls; returns its status, or None
    when a stop was asked for inside a long interval (the stepper is then back at t_(k-1)).

    A fixed-step interval longer than CHUNK_STEPS steps is taken in pieces of CHUNK_STEPS, so
    that the progress bar moves and a signal is heard within a fraction of a second. The pieces
    are fixed by the step count, never by the clock, so that a run repeats its bits."""
    s = run.stepper
    per = plan.settings.get("steps_per_sample", 0)
    clock, cpu_clock = time.perf_counter, time.thread_time
    if per <= CHUNK_STEPS:
        c0, t0 = cpu_clock(), clock()
        try:
            return s.advance_to(tk)
        finally:
            run.wall += clock() - t0
            run.cpu += cpu_clock() - c0
    at_start = (s.snapshot(), run.wall, run.cpu)
    h = plan.stepper_settings["step"]
    t_prev = plan.sample_time(run.k - 1)
    done = 0
    while True:
        left = per - done
        target = tk if left <= CHUNK_STEPS else t_prev + (done + CHUNK_STEPS) * h
        c0, t0 = cpu_clock(), clock()
        st = s.advance_to(target)
        run.wall += clock() - t0
        run.cpu += cpu_clock() - c0
        if st != ST_OK or target == tk:
            return st
        done += CHUNK_STEPS
        if progress:
            progress.update(run.k - 1 + done / per, int(s.counters[0]))
        if stop.requested:
            # Back to the last sample: the checkpoint must describe a state at a sample time.
            p = plan
            fresh = p.method.start(
                p.form_code, p.params.copy(), 0.0, p.y0.copy(), dict(p.stepper_settings)
            )
            fresh.restore(at_start[0])
            run.stepper = fresh
            run.wall, run.cpu = at_start[1], at_start[2]
            return None


def _final_metrics(run: _Run, t_fail) -> dict:
    g = run.group.g
    t = g["t"][()]
    energy = g["invariants/energy"][()]
    return finish(run.acc, run.stepper.counters, run.wall, run.cpu, t, energy, t_fail)
