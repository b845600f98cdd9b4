"""Recommendation: for each candidate method, the cheapest setting that meets a target error
over a horizon, found by bisection on a log scale, verified by a fresh run, ranked by wall time.

The error is the largest angle between the computed and the true figure axis over the samples
(metric "axis"), the largest rotation angle between the computed and the true attitude, spin
phase included (metric "attitude"), or the largest relative energy error (metric "energy"). For
a case without an exact solution the true axis and attitude are the case's extended-precision
reference (run/case_reference.py: a double-double Taylor integration of no candidate's family,
with its own error estimate), and the result says so; a target below that reference's verified
accuracy is refused, and an achieved error below it is marked as not resolved.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from topdrift.benchmarks.cases.time_scales import fastest_period
from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.case_reference import case_reference
from topdrift.benchmarks.run.in_memory import run_in_memory
from topdrift.benchmarks.run.metrics import attitude_angle
from topdrift.benchmarks.run.runner import plan_run, samples_for_horizon, steps_per_interval
from topdrift.benchmarks.stopping import Interrupted
from topdrift.integrators import MethodRefused
from topdrift.integrators import get as get_method
from topdrift.models.quaternion import figure_axis

DEFAULT_CANDIDATES = (
    "rk4",
    "rk45",
    "dop853",
    "gbs",
    # the series method: first on looping-nutation at 1e-10 and 1e-12 in the body form (README)
    "taylor-adaptive",
    "leapfrog",
    "leapfrog-s4",
    "leapfrog-s4-axes",
    "leapfrog-kl6",
    # effective order 6 from a 6-stage kernel: ahead of leapfrog-kl6 and -y6 on looping-nutation
    # (100 s, 1e-8) and chaotic-asymmetric (2 s, 1e-8) with few samples (CHANGELOG)
    "leapfrog-proc6",
    # variable steps, Euler form only: on pole-passage (--form euler, 1e-6) 153523 kicks
    # against leapfrog-kl6's 1342000, second to dop853 (docs/variable-steps.md); refused, with
    # its reason, where the Euler form is not the form asked for
    "leapfrog-kl6-sundman",
    "leapfrog-kl8",
    "gauss4",
    "gauss6",
    "midpoint",
    "engine-euler",
    "engine-semi-implicit",
    "engine-implicit-gyro",
    "lie-rkmk4",
    "rattle",
    "lie-galpha",
)
METRICS = ("axis", "attitude", "energy")
# The trajectory metrics (against the exact solution, or else the case's reference) by run metric.
TRAJECTORY_METRICS = {"axis": "axis_angle_max", "attitude": "attitude_angle_max"}
# The run planned to learn whether the case has an exact solution (its notes say why not).
PROBE = {"method": "dop853", "form": "body", "rtol": 1e-10, "atol": 1e-12}
BISECTIONS = 5  # halvings of the log interval between a failing and a passing setting
VERIFY_RUNS = 3  # fresh runs of a chosen setting, while they take under VERIFY_BUDGET_S in all
VERIFY_BUDGET_S = 0.5
MAX_STEPS = 5e7  # a fixed step needing more steps than this over the horizon is not tried
STALL_BELOW = 1e-6  # errors this small that stop falling with the step are round-off


@dataclass
class Trial:
    setting: float  # the step, or rtol
    achieved: float  # inf when the run did not end ok
    wall_s: float
    rhs_evals: int
    status: str
    settings: dict
    force_evals: int = 0  # torque evaluations (a splitting's kicks; every rhs otherwise)


@dataclass
class Choice:
    method: str
    form: str
    trial: Trial | None = None
    tried: list[Trial] = field(default_factory=list)
    reason: str = ""  # why no setting was found
    verified: Trial | None = None
    capped: bool = False  # the step stopped at the sample interval, not at the target


def _quaternions(run) -> np.ndarray:
    with run.open() as f:
        return f["runs"][run.run_id]["quaternion"][()]


def _axes(run) -> np.ndarray:
    return np.array([figure_axis(*row) for row in _quaternions(run)])


def _angle(a: np.ndarray, b: np.ndarray) -> float:
    c = np.einsum("ij,ij->i", a, b)
    s = np.linalg.norm(np.cross(a, b), axis=1)
    return float(np.max(np.arctan2(s, c)))


class Picker:
    def __init__(
        self,
        case,
        target: float,
        metric: str,
        horizon: float,
        samples: int,
        report: Callable[[str], None],
        quiet: bool = False,
    ):
        if metric not in METRICS:
            raise UserError(f"--metric: expected axis, attitude or energy, got {metric!r}")
        # None: no target (a fixed loop rate ranks by error alone, choose/loop_rate.py).
        if target is not None and not (
            isinstance(target, float) and math.isfinite(target) and target > 0.0
        ):
            raise UserError(f"--target: must be a positive finite number, got {target!r}")
        self.case = case
        self.target = target
        self.metric = metric
        self.horizon = horizon
        self.samples = samples
        self.report = report
        self.quiet = quiet  # no progress line while a reference builds
        self.reference_axes = None
        self.reference_quaternions = None
        self.reference_note = None
        self.reference_accuracy = None  # the reference's verified accuracy (dict), if one is used
        self.reference_family = None  # its method family: no candidate of it is judged by it
        self._trials: dict[tuple[str, str, float], Trial] = {}
        if metric in TRAJECTORY_METRICS:
            self._reference()

    def _reference(self) -> None:
        """The extended-precision reference, when the case has no exact solution to measure the
        axis against (not a Lagrange top, or one whose exact solution is refused: a degenerate
        start); a target below its verified accuracy is refused before any candidate runs."""
        r = PROBE
        plan = plan_run(
            self.case,
            r["method"],
            rtol=r["rtol"],
            atol=r["atol"],
            form=r["form"],
            horizon=self.horizon,
            samples=self.samples,
        )
        if plan.exact is not None:
            return
        why = next((n for n in plan.notes if n.startswith("no exact solution")), None)
        ref = case_reference(self.case, self.horizon, self.samples, quiet=self.quiet)
        self.reference_axes = ref.axes()
        self.reference_quaternions = np.ascontiguousarray(ref.states[:, :4])
        self.reference_accuracy = dict(ref.accuracy)
        self.reference_family = ref.family
        if ref.exact:  # the exact motion at high precision, where the runs carry none
            self.reference_note = (
                f"{self.case.name}: the {self.metric} error is measured against its exact "
                f"motion ({ref.method}), {ref.accuracy_text()}"
            )
        else:
            self.reference_note = (
                f"{why or 'no exact solution'} for {self.case.name}: the {self.metric} error is "
                f"measured against its {ref.label} ({ref.method}), "
                f"{ref.accuracy_text()}"
            )
        acc = ref.accuracy[self.metric]
        what = "figure axis" if self.metric == "axis" else "attitude"
        if self.target is not None and self.target < acc:
            raise UserError(
                f"--target {self.target:g}: below this case's verified reference accuracy of "
                f"{acc:.2g} rad ({what} over {self.horizon:g} s): no error that small can "
                "be measured; ask for a target of at least that"
            )
        self.report(self.reference_note)

    def unresolved(self, achieved: float) -> bool:
        """An achieved axis or attitude error below the reference's verified accuracy: the
        measurement says only that the error is about that accuracy or less."""
        acc = self.reference_accuracy
        return acc is not None and self.metric in acc and achieved < acc[self.metric]

    def divisor_step(self, value: float) -> float:
        """The step the runner will use for a requested `value` (the sample interval over a
        whole number of steps), nudged up by ulps until the runner maps it to itself: passing
        the result to `topdrift run --step` reproduces the run exactly (same run id)."""
        interval = self.horizon / (self.samples - 1)
        per = steps_per_interval(interval, value)
        h = interval / per
        while steps_per_interval(interval, h) > per:
            h = math.nextafter(h, math.inf)
        return h

    def trial(self, method: str, form: str, value: float) -> Trial:
        """One run at one setting (a step is first moved to the step the runner will use);
        the same setting is run once. Raises MethodRefused for a setting the method refuses."""
        control = get_method(method).info.control
        if control == "step":
            value = self.divisor_step(value)
        key = (method, form, value)
        if key not in self._trials:
            self._trials[key] = self._run_trial(method, form, control, value)
        return self._trials[key]

    def fresh(self, method: str, form: str, value: float) -> Trial:
        """A new run of a setting already chosen (its cost and error are what the ranking
        shows), never the memo of an earlier trial."""
        return self._run_trial(method, form, get_method(method).info.control, value)

    def _run_trial(self, method: str, form: str, control: str, value: float) -> Trial:
        kw = {"step": value} if control == "step" else {"rtol": value}
        plan = plan_run(
            self.case, method, form=form, horizon=self.horizon, samples=self.samples, **kw
        )
        run = run_in_memory(plan)
        m = run.metrics
        if run.status != "ok":
            achieved = math.inf
        elif self.metric == "energy":
            achieved = m.get("energy_rel_max")
        elif self.reference_axes is None:
            achieved = m.get(TRAJECTORY_METRICS[self.metric])
        elif self.metric == "attitude":
            achieved = float(np.max(attitude_angle(_quaternions(run), self.reference_quaternions)))
        else:
            achieved = _angle(_axes(run), self.reference_axes)
        if achieved is None or not math.isfinite(achieved):
            achieved = math.inf
        return Trial(
            value,
            float(achieved),
            float(m.get("wall_s") or math.nan),
            int(m.get("rhs_evals") or 0),
            run.status,
            dict(plan.settings),
            int(m.get("force_evals") or 0),
        )

    def search(self, method: str, form: str | None) -> Choice:
        m = get_method(method)
        try:
            form = form or m.default_form(self.case.body)
            m.check(
                self.case.body,
                form,
                {"step": 1.0} if m.info.control == "step" else {"rtol": 1e-6, "atol": 1e-9},
            )
        except MethodRefused as exc:
            return Choice(method, form or "?", reason=str(exc))
        if self.reference_family and m.info.family == self.reference_family:
            return Choice(
                method,
                form,
                reason=f"of the reference's own family ({m.info.family}): it would be judged "
                "against itself",
            )
        if self.metric == "energy" and "energy" in m.info.kept_in(form):
            # Its energy error is rounding at any setting: the cheapest setting "meeting" an
            # energy target would say nothing about the method. Ranked by --metric axis.
            return Choice(
                method,
                form,
                reason=f"keeps the energy by construction in the {form} form (its error is "
                "round-off at any setting): not ranked by energy; rank it with --metric axis",
            )
        choice = Choice(method, form)
        step = m.info.control == "step"
        interval = self.horizon / (self.samples - 1)

        refused = []

        def run(v: float) -> Trial | None:
            try:
                t = self.trial(method, form, v)
            except MethodRefused as exc:  # e.g. an rtol below what the method accepts
                refused.append(str(exc))
                return None
            if not any(x is t for x in choice.tried):  # a bisection may land on a known step
                choice.tried.append(t)
            return t

        if step:
            v = min(fastest_period(self.case) / 8.0, interval)
            cheaper, dearer, floor = 4.0, 0.25, self.horizon / MAX_STEPS
        else:
            v, cheaper, dearer, floor = 1e-3, 10.0, 0.1, 1e-14
        stalls, stalled = 0, False
        first = run(v)
        if first is None:
            return Choice(method, form, reason=refused[0])
        passing, failing = (first, None) if first.achieved <= self.target else (None, first)
        # Walk towards the boundary: cheaper while passing, dearer while failing.
        for _ in range(3 if passing else 40):
            if passing:
                nv = passing.setting * cheaper
                if step and passing.setting >= interval * (1.0 - 1e-12):
                    choice.capped = True
                    break  # no step can be longer than the sample interval
                if step:
                    nv = min(nv, interval)
                t = run(nv)
                if t is None:
                    break
                if t.achieved <= self.target:
                    passing = t
                else:
                    failing = t
                    break
            else:
                nv = failing.setting * dearer
                if nv < floor:
                    break
                t = run(nv)
                if t is None:
                    break
                if t.achieved <= self.target:
                    passing = t
                    break
                # A quarter step cuts the error of an order-p method by 4^p >= 16; two in a row
                # that do not even halve a small error mean round-off has the last word, and
                # finer steps would only cost more (up to MAX_STEPS a run).
                small = t.achieved < STALL_BELOW and math.isfinite(failing.achieved)
                stalls = stalls + 1 if small and t.achieved > 0.5 * failing.achieved else 0
                failing = t
                if step and stalls >= 2:
                    stalled = True
                    break
        if passing is None:
            choice.reason = (
                f"target not reached down to {'step' if step else 'rtol'} {failing.setting:.3g} "
                f"(best achieved {min(t.achieved for t in choice.tried):.3g})"
            )
            if stalled:
                choice.reason += "; the error stopped falling with the step (round-off)"
            if refused:
                choice.reason += f"; {refused[0]}"
            return choice
        if failing is not None:
            for _ in range(BISECTIONS):
                mid = math.sqrt(passing.setting * failing.setting)
                t = run(mid)
                if t is None:
                    break
                if t.achieved <= self.target:
                    passing = t
                else:
                    failing = t
        choice.trial = passing
        return choice


def _choose(picker: Picker, name: str, form: str | None, target: float, report) -> Choice:
    """One candidate: its search, then fresh runs of the chosen setting."""
    c = picker.search(name, form)
    if c.trial is not None:
        # Fresh runs of the chosen setting: their cost and error are what the ranking shows.
        # A short run's wall time is mostly noise (caches, the scheduler), so a short one is
        # timed up to VERIFY_RUNS times and the quickest counts; the numbers are the same.
        c.verified = picker.fresh(name, c.form, c.trial.setting)
        spent = c.verified.wall_s
        for _ in range(VERIFY_RUNS - 1):
            if not spent < VERIFY_BUDGET_S:
                break
            again = picker.fresh(name, c.form, c.trial.setting)
            spent += again.wall_s
            if again.achieved != c.verified.achieved:
                raise RuntimeError(f"{name}: two runs of one setting differ")
            if again.wall_s < c.verified.wall_s:
                c.verified = again
        if c.verified.achieved > target:
            c.reason = (
                f"fresh run at the chosen setting missed the target ({c.verified.achieved:.3g})"
            )
    report(
        f"{name} ({c.form}): "
        + (
            f"setting {c.trial.setting:.4g}, {c.verified.wall_s:.3g} s"
            if c.trial is not None and not c.reason
            else c.reason
        )
    )
    return c


def pick(
    case,
    target: float,
    *,
    metric: str = "axis",
    horizon: float | None = None,
    samples: int | None = None,
    methods=None,
    form: str | None = None,
    report: Callable[[str], None] = lambda s: None,
    quiet: bool = False,
) -> dict:
    horizon = case.horizon if horizon is None else horizon
    if samples is None:
        # The horizon rule of every command (runner.samples_at_interval): a shorter or longer
        # horizon keeps the case's sample interval; a fixed step can be no longer than the
        # interval, so squeezing the case's samples into a short horizon would cap every step
        # far below what the target allows.
        samples = samples_for_horizon(case, horizon)
    methods = list(methods or DEFAULT_CANDIDATES)
    for name in methods:
        get_method(name)  # unknown names fail before any work
    picker = Picker(case, target, metric, horizon, samples, report, quiet)
    choices: list[Choice] = []
    try:
        for name in methods:
            choices.append(_choose(picker, name, form, target, report))
    except Interrupted as exc:
        raise exc.saying(
            f"{len(choices)} of {len(methods)} candidate methods searched, "
            f"{len(methods) - len(choices)} left; nothing written"
        ) from None
    ok = [c for c in choices if c.verified is not None and not c.reason]
    ok.sort(key=lambda c: (c.verified.wall_s, c.verified.rhs_evals))
    ranking = []
    for c in ok:
        v = c.verified
        # The values to pass to `topdrift run`: they reproduce this very run (same run id).
        settings = (
            {"step": v.settings["step_requested"]}
            if "step" in v.settings
            else {"rtol": v.settings["rtol"], "atol": v.settings["atol"]}
        )
        ranking.append(
            {
                "method": c.method,
                "form": c.form,
                "settings": settings,
                "wall_s": v.wall_s,
                "rhs_evals": v.rhs_evals,
                "force_evals": v.force_evals,
                "achieved": v.achieved,
                "margin": target / v.achieved if v.achieved > 0 else None,
                "trials": len(c.tried),
                "capped": c.capped,
                "unresolved": picker.unresolved(v.achieved),
            }
        )
    return {
        "case": case.name,
        "target": target,
        "metric": metric,
        "horizon": horizon,
        "samples": samples,
        "reference": picker.reference_note,
        "reference_accuracy": picker.reference_accuracy,
        "ranking": ranking,
        "unreached": [
            {"method": c.method, "form": c.form, "reason": c.reason} for c in choices if c not in ok
        ],
    }
