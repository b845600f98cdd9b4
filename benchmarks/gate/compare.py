"""The regression gate: a rerun of a baseline's grid compared with the baseline, rule by rule.

Rules (docs/gate.md states them for users):

- status is part of the contract: every cell of the baseline must be in the rerun with the same
  status. A cell that ran ok and now refuses, fails to start, fails, diverges or raises, or is
  missing from the rerun's grid, is a regression named with its reason ("was ok, now refused:
  ..."), and is compared no further. Missing cells can be accepted by name (a method or case
  removed on purpose); the report lists what was accepted.
- errors (the invariant and trajectory maxima): a regression when now > F * max(baseline, floor).
  The floor stands for round-off: an error of 1e-16 that becomes 3e-16 is the same error. An
  improvement when baseline > floor and now < baseline / F.
- counts: steps and right-hand-side evaluations must match within a relative tolerance R, either
  way (fewer steps at the same tolerance means a changed error estimate, not a free lunch);
  rejected steps within R times the baseline's steps, since they are a fraction of all steps.
- timings (each method's time per step over the reference workload's, timed beside it round by
  round): compared only between machines with the same fingerprint (machine.py), unless asked.
  The change is the ratio of the medians; its 95 % interval comes from the rounds of both sides
  (shift_interval.py). A regression when the whole interval lies above 1 + B, an improvement
  when it lies below 1 / (1 + B), within the band when it lies inside; an interval that reaches
  past an edge of the band is "not measurable here" (the machine is too noisy to tell) and
  neither passes nor fails.
- runs new in the rerun, and methods new since the baseline, are reported, not failed. A changed
  run id (the case file or a setting behind the same key changed), changed versions, plug-in
  versions and machine are reported next to the differences.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

from topdrift.benchmarks.errors import UserError

# The metric names come from the baseline format, which imports nothing of the runner: every
# `topdrift` command imports this module for the defaults of its parser, and the measuring code
# (the runner, the sweep) would cost about 0.1 s of each process's start-up (-X importtime).
from topdrift.benchmarks.gate.baseline_file import (
    ERROR_METRICS,
    OPTIONAL_COUNT_METRICS,
    OPTIONAL_ERROR_METRICS,
)

DEFAULT_ERROR_FACTOR = 1.5
DEFAULT_ERROR_FLOOR = 1e-13
DEFAULT_STEPS_TOLERANCE = 0.02
# Between the two timing targets of the gate: a clean rerun within +-10 %, a 1.3x slowdown caught.
DEFAULT_TIME_BAND = 0.15
CONFIDENCE = 0.95

REGRESSION = "regression"
IMPROVEMENT = "improvement"
NOTE = "note"

# Timing verdicts (not findings: a timing within the band, or one the machine is too noisy to
# judge, is neither a regression nor an improvement, but every compared timing gets one).
T_OK = "ok"
T_SLOWER = "slower"
T_FASTER = "faster"
T_UNMEASURABLE = "not measurable"

# How far a method's ratio to the reference workload can move with the machine's state, per unit
# of the movement of the reference workload's two kernels against each other. The two (a scalar
# loop and a stages loop, reference_workload.py) respond differently to what shares the core,
# so their ratio is a witness of the machine's state that needs no code change to move. Measured
# (benchmarks/timing/gate_stability.py, 6 clean gates over 50 minutes on a loaded AMD EPYC
# family 25 model 17, unchanged code against a baseline recorded hours before): where the
# scalar / stages ratio stayed within 0.5 % of the baseline's the worst timing moved 1.6-3.2 %;
# where it moved 5.1, 6.5 and 11.5 % the worst timing moved 11, 16 and 26 % with tight rounds
# (the last a false alarm): 2.1-2.4 times the witness, in logarithms. So each timing's interval
# is widened by MIX_FACTOR times the witness's movement either way.
MIX_FACTOR = 3.0

# The parts of the reference record that define the unit: timings in another unit are not
# compared.
UNIT_KEYS = ("kernel", "version", "clock", "scalar_steps", "stages_steps")


@dataclass(frozen=True)
class Thresholds:
    error_factor: float = DEFAULT_ERROR_FACTOR
    error_floor: float = DEFAULT_ERROR_FLOOR
    steps_tolerance: float = DEFAULT_STEPS_TOLERANCE
    time_band: float = DEFAULT_TIME_BAND

    def check(self) -> None:
        if not (math.isfinite(self.error_factor) and self.error_factor >= 1.0):
            raise UserError(f"--error-factor: need a number >= 1, got {self.error_factor!r}")
        if not (math.isfinite(self.error_floor) and self.error_floor >= 0.0):
            raise UserError(f"--error-floor: need a number >= 0, got {self.error_floor!r}")
        if not (math.isfinite(self.steps_tolerance) and self.steps_tolerance >= 0.0):
            raise UserError(f"--steps-tolerance: need a number >= 0, got {self.steps_tolerance!r}")
        if not (math.isfinite(self.time_band) and self.time_band >= 0.0):
            raise UserError(f"--time-band: need a number >= 0, got {self.time_band!r}")


@dataclass
class Finding:
    kind: str  # REGRESSION, IMPROVEMENT or NOTE
    run: str  # run key, or "timing METHOD FORM"
    metric: str
    baseline: object
    now: object
    change: str  # how it changed, in words a table can hold


@dataclass
class TimingVerdict:
    timing: str  # "METHOD FORM"
    baseline: float  # ns_per_step_norm, the median ratio to the reference
    now: float
    change: float  # now / baseline
    low: float | None  # the 95 % interval of the change, as factors; None: too few rounds
    high: float | None
    verdict: str  # T_OK, T_SLOWER, T_FASTER or T_UNMEASURABLE
    why: str = ""

    def words(self) -> str:
        span = ""
        if self.low is not None:
            span = f" (95 % interval {self.low - 1.0:+.0%} .. {self.high - 1.0:+.0%})"
        return f"{self.change - 1.0:+.1%}{span}"


@dataclass
class GateResult:
    findings: list[Finding] = field(default_factory=list)
    missing_runs: list[str] = field(default_factory=list)
    new_runs: list[str] = field(default_factory=list)
    missing_timings: list[str] = field(default_factory=list)
    new_timings: list[str] = field(default_factory=list)
    new_methods: dict[str, int] = field(default_factory=dict)  # method -> runs in the rerun
    # metric -> runs whose rerun measures it where the baseline run has no such key (a baseline
    # recorded before the metric existed): reported, not gated
    new_metrics: dict[str, int] = field(default_factory=dict)
    accepted: list[str] = field(default_factory=list)  # missing cells accepted by name
    accept_names: list[str] = field(default_factory=list)
    timing_verdicts: list[TimingVerdict] = field(default_factory=list)
    version_changes: list[tuple[str, str | None, str | None]] = field(default_factory=list)
    machine_changes: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    runs_compared: int = 0
    timings_compared: int = 0
    # the reference workload's ns per step (scalar, stages), baseline and now: how the machine
    # itself moved, for reading beside the timing verdicts
    reference_ns: dict[str, list[float]] = field(default_factory=dict)

    @property
    def regressions(self) -> list[Finding]:
        return [f for f in self.findings if f.kind == REGRESSION]

    @property
    def improvements(self) -> list[Finding]:
        return [f for f in self.findings if f.kind == IMPROVEMENT]

    @property
    def unmeasurable(self) -> list[TimingVerdict]:
        return [v for v in self.timing_verdicts if v.verdict == T_UNMEASURABLE]

    @property
    def failed(self) -> bool:
        return bool(self.regressions)

    def verdict(self) -> str:
        r = self.regressions
        n_runs = len({f.run for f in r})
        scope = f"{self.runs_compared} runs and {self.timings_compared} timings compared"
        extra = []
        if self.improvements:
            extra.append(f"{len(self.improvements)} improvement(s)")
        if self.unmeasurable:
            extra.append(f"{len(self.unmeasurable)} timing(s) not measurable here")
        if self.missing_runs or self.missing_timings:
            extra.append(f"{len(self.missing_runs) + len(self.missing_timings)} missing")
        if self.accepted:
            extra.append(f"{len(self.accepted)} accepted as missing")
        if self.new_runs or self.new_timings:
            extra.append(f"{len(self.new_runs) + len(self.new_timings)} new")
        tail = "; ".join([scope, *extra])
        if r:
            return f"gate: FAIL: {len(r)} regression(s) in {n_runs} run(s) ({tail})"
        return f"gate: pass: no regressions ({tail})"

    def as_json(self) -> dict:
        return {
            "verdict": "fail" if self.failed else "pass",
            "summary": self.verdict(),
            "findings": [asdict(f) for f in self.findings],
            "timings": [asdict(v) for v in self.timing_verdicts],
            "missing_runs": self.missing_runs,
            "new_runs": self.new_runs,
            "missing_timings": self.missing_timings,
            "new_timings": self.new_timings,
            "new_methods": self.new_methods,
            "new_metrics": self.new_metrics,
            "accepted_missing": self.accepted,
            "version_changes": [
                {"name": n, "baseline": a, "now": b} for n, a, b in self.version_changes
            ],
            "machine_changes": self.machine_changes,
            "reference_ns": self.reference_ns,
            "notes": self.notes,
            "runs_compared": self.runs_compared,
            "timings_compared": self.timings_compared,
        }


def _g(v) -> str:
    if v is None:
        return "-"
    if isinstance(v, bool) or isinstance(v, str):
        return str(v)
    if isinstance(v, int):
        return str(v)
    return f"{v:.3g}"


def _compare_error(run: str, name: str, a, b, t: Thresholds, out: list[Finding]) -> None:
    if a is None and b is None:
        return
    if a is None:
        out.append(Finding(NOTE, run, name, a, b, "now measured"))
        return
    if b is None:
        out.append(Finding(REGRESSION, run, name, a, b, "no longer measured"))
        return
    a, b = float(a), float(b)
    if math.isnan(b) and not math.isnan(a):
        out.append(Finding(REGRESSION, run, name, a, b, "now NaN"))
        return
    ref = max(a, t.error_floor)
    if b > t.error_factor * ref:
        ratio = b / ref if ref > 0 else math.inf
        if a < t.error_floor:  # the baseline was at round-off: measure from the floor
            change = f"x{ratio:.3g} over the round-off floor {t.error_floor:g}"
        else:
            change = f"x{ratio:.3g} (limit x{t.error_factor:g})"
        out.append(Finding(REGRESSION, run, name, a, b, change))
    elif a > t.error_floor and b < a / t.error_factor:
        ratio = b / a
        out.append(Finding(IMPROVEMENT, run, name, a, b, f"x{ratio:.3g}"))


def _compare_count(run: str, name: str, a, b, allowed: float, t: Thresholds, out) -> None:
    if a is None or b is None:
        if a != b:
            out.append(Finding(REGRESSION, run, name, a, b, "count missing"))
        return
    if abs(b - a) > allowed:
        rel = (b - a) / a if a else math.inf
        out.append(
            Finding(REGRESSION, run, name, a, b, f"{rel:+.2%} (tolerance {t.steps_tolerance:.2%})")
        )


def _accepts(names, *labels) -> bool:
    return any(label in names for label in labels)


def _status_change(a: str, b: str, detail) -> str:
    why = f": {detail}" if detail else ""
    return f"was {a}, now {b}{why}"


def _unstarted_for(key: str, rec: dict, unstarted: list[dict]) -> dict | None:
    """The reason a baseline cell did not start in the rerun: its own refusal, else a refusal
    of its method on its case before any form was chosen."""
    for u in unstarted:
        if u["key"] == key:
            return u
    for u in unstarted:
        if u["key"] is None and u["case"] == rec["case"] and u["method"] == rec["method"]:
            return u
    return None


def compare_runs(
    base: dict,
    now: dict,
    t: Thresholds,
    result: GateResult,
    unstarted: list[dict] | None = None,
    accept: tuple[str, ...] = (),
) -> None:
    out = result.findings
    unstarted = unstarted or []
    for key, a in base.items():
        b = now.get(key)
        if b is None:
            u = _unstarted_for(key, a, unstarted)
            if u is not None:
                change = _status_change(a["status"], u["status"], u["detail"])
                out.append(Finding(REGRESSION, key, "status", a["status"], u["status"], change))
            elif _accepts(accept, a["method"], a["case"], key):
                result.accepted.append(key)
            else:
                result.missing_runs.append(key)
                change = f"was {a['status']}, now missing: not in the rerun's grid"
                out.append(Finding(REGRESSION, key, "status", a["status"], None, change))
            continue
        result.runs_compared += 1
        if a["run_id"] != b["run_id"]:
            out.append(
                Finding(NOTE, key, "run_id", a["run_id"], b["run_id"], "case or setting changed")
            )
        if a["status"] != b["status"]:
            change = _status_change(a["status"], b["status"], b.get("detail"))
            out.append(Finding(REGRESSION, key, "status", a["status"], b["status"], change))
            continue
        for name in ERROR_METRICS:
            _compare_error(key, name, a.get(name), b.get(name), t, out)
        # Keys a baseline of an older topdrift lacks are compared only where it has them.
        for name in OPTIONAL_ERROR_METRICS:
            if name in a:
                _compare_error(key, name, a[name], b.get(name), t, out)
            elif b.get(name) is not None:
                result.new_metrics[name] = result.new_metrics.get(name, 0) + 1
        counts = ("steps", "rhs_evals") + tuple(n for n in OPTIONAL_COUNT_METRICS if n in a)
        for name in counts:
            allowed = t.steps_tolerance * abs(a[name]) if a[name] is not None else 0.0
            _compare_count(key, name, a[name], b.get(name), allowed, t, out)
        allowed = t.steps_tolerance * (a["steps"] or 0)
        _compare_count(key, "rejected", a["rejected"], b["rejected"], allowed, t, out)
    result.new_runs.extend(k for k in now if k not in base)
    known = {a["method"] for a in base.values()}
    for b in now.values():
        if b["method"] not in known:
            result.new_methods[b["method"]] = result.new_methods.get(b["method"], 0) + 1


def same_unit(base_ref: dict | None, now_ref: dict | None) -> bool:
    if base_ref is None or now_ref is None:
        return False
    return all(base_ref[k] == now_ref[k] for k in UNIT_KEYS)


def machine_drift(base_ref: dict | None, now_ref: dict | None) -> float:
    """|log| of how far the reference workload's two kernels moved against each other since the
    baseline (0 when either side lacks them): the machine's state, witnessed (MIX_FACTOR)."""
    try:
        was = base_ref["scalar_ns"] / base_ref["stages_ns"]
        now = now_ref["scalar_ns"] / now_ref["stages_ns"]
    except (KeyError, TypeError, ZeroDivisionError):
        return 0.0
    if not (math.isfinite(was) and math.isfinite(now) and was > 0.0 and now > 0.0):
        return 0.0
    return abs(math.log(now / was))


def judge_timing(tk: str, a: dict, b: dict, t: Thresholds, drift: float = 0.0) -> TimingVerdict:
    """One timing's verdict: the change of the median ratio, and whether the rounds of the two
    sides are tight enough for it to mean anything at this band (see the module note). `drift`
    (machine_drift) widens the interval by MIX_FACTOR times itself either way: what the rounds
    of one gate cannot see, a machine in another state than the baseline's."""
    from topdrift.benchmarks.gate.shift_interval import shift_interval

    x, y = a["ns_per_step_norm"], b["ns_per_step_norm"]
    change = y / x
    iv = shift_interval(
        [math.log(r) for r in b["per_round"]], [math.log(r) for r in a["per_round"]], CONFIDENCE
    )
    if iv is None:
        why = (
            f"too few rounds for a {CONFIDENCE:.0%} interval ({b['rounds']} now, "
            f"{a['rounds']} in the baseline; 4 each at least)"
        )
        return TimingVerdict(tk, x, y, change, None, None, T_UNMEASURABLE, why)
    _, lo, hi = iv
    widen = MIX_FACTOR * drift
    low, high = change * math.exp(lo - widen), change * math.exp(hi + widen)
    top, bottom = 1.0 + t.time_band, 1.0 / (1.0 + t.time_band)
    if low > top:
        return TimingVerdict(tk, x, y, change, low, high, T_SLOWER)
    if high < bottom:
        return TimingVerdict(tk, x, y, change, low, high, T_FASTER)
    if bottom <= low and high <= top:
        return TimingVerdict(tk, x, y, change, low, high, T_OK)
    why = f"the interval reaches past the band of +-{t.time_band:.0%}: too noisy to tell"
    if widen > 0.01:
        why += f" (widened by {math.exp(widen) - 1.0:.0%} either way: the machine's state moved)"
    return TimingVerdict(tk, x, y, change, low, high, T_UNMEASURABLE, why)


def undecided_timings(base: dict, base_ref: dict | None, t: Thresholds):
    """The gate's test, for measure.measure_timings, of which timings of a rerun need more rounds:
    those judge_timing calls not measurable for want of tight rounds. A timing whose interval is
    wide because the machine's state moved (the drift widening alone reaches past the band) is
    left as it is: more rounds cannot narrow that."""

    def undecided(now: dict, now_ref: dict) -> set[str]:
        if not same_unit(base_ref, now_ref):
            return set()
        drift = machine_drift(base_ref, now_ref)
        if math.exp(MIX_FACTOR * drift) > 1.0 + t.time_band:
            return set()
        out = set()
        for tk, a in base.items():
            b = now.get(tk)
            if b is None or a["status"] != b["status"] or b["ns_per_step_norm"] is None:
                continue
            if a["ns_per_step_norm"] is None:
                continue
            if judge_timing(tk, a, b, t, drift).verdict == T_UNMEASURABLE:
                out.add(tk)
        return out

    return undecided


def compare_timings(
    base: dict,
    now: dict,
    base_ref: dict | None,
    now_ref: dict | None,
    t: Thresholds,
    result: GateResult,
    accept: tuple[str, ...] = (),
) -> None:
    result.new_timings.extend(k for k in now if k not in base)
    if not same_unit(base_ref, now_ref):
        was = ", ".join(str(base_ref[k]) for k in UNIT_KEYS) if base_ref else "none"
        now_ = ", ".join(str(now_ref[k]) for k in UNIT_KEYS) if now_ref else "none"
        result.notes.append(f"reference workload changed ({was} -> {now_}): timings not compared")
        return
    out = result.findings
    drift = machine_drift(base_ref, now_ref)
    if drift > 0.01:
        result.notes.append(
            f"the reference workload's two kernels moved {math.exp(drift) - 1.0:.1%} against each "
            f"other since the baseline: the machine is not in the baseline's state, and every "
            f"timing's interval is widened by {math.exp(MIX_FACTOR * drift) - 1.0:.0%} either way"
        )
    for tk, a in base.items():
        b = now.get(tk)
        label = f"timing {tk}"
        if b is None:
            if _accepts(accept, tk.split(" ")[0], tk, label):
                result.accepted.append(label)
                continue
            result.missing_timings.append(tk)
            change = f"was {a['status']}, now missing: its run {a['run']!r} did not run ok"
            out.append(Finding(REGRESSION, label, "status", a["status"], None, change))
            continue
        result.timings_compared += 1
        if a["status"] != b["status"]:
            change = _status_change(a["status"], b["status"], b.get("detail"))
            out.append(Finding(REGRESSION, label, "status", a["status"], b["status"], change))
            continue
        if a["ns_per_step_norm"] is None or b["ns_per_step_norm"] is None:
            continue
        if a["steps"] != b["steps"]:
            result.notes.append(
                f"{label}: {b['steps']} steps now, {a['steps']} in the baseline: the per-step "
                "cost is compared, but the work is not the same"
            )
        v = judge_timing(tk, a, b, t, drift)
        result.timing_verdicts.append(v)
        band = f"band {t.time_band:.0%}"
        x, y = v.baseline, v.now
        if v.verdict == T_SLOWER:
            out.append(
                Finding(REGRESSION, label, "ns_per_step_norm", x, y, f"slower {v.words()}, {band}")
            )
        elif v.verdict == T_FASTER:
            out.append(
                Finding(IMPROVEMENT, label, "ns_per_step_norm", x, y, f"faster {v.words()}, {band}")
            )


def compare(
    baseline: dict,
    now: dict,
    t: Thresholds,
    *,
    unstarted: list[dict] | None = None,
    accept: tuple[str, ...] = (),
    timings: bool | None = None,
) -> GateResult:
    """`unstarted`: the rerun's cells that did not start (measure.grid_cells). `accept`: names
    (methods, cases, run keys) whose missing cells are accepted. `timings`: compare the timing
    half (True), not (False), or only when the machines' fingerprints are the same (None)."""
    from topdrift.benchmarks.gate.machine import differences

    t.check()
    result = GateResult(accept_names=list(accept))
    compare_runs(baseline["runs"], now["runs"], t, result, unstarted, tuple(accept))
    result.machine_changes = differences(baseline["machine"], now["machine"])
    for side, doc in (("baseline", baseline), ("now", now)):
        ref = doc.get("reference") or {}
        if "scalar_ns" in ref and "stages_ns" in ref:
            result.reference_ns[side] = [ref["scalar_ns"], ref["stages_ns"]]
    if timings is None:
        timings = not result.machine_changes
        if not timings:
            result.notes.append(
                "timings not comparable: the machine differs from the baseline's ("
                + "; ".join(result.machine_changes)
                + "); only the deterministic half was compared (--timings-anyway compares them)"
            )
    if timings:
        compare_timings(
            baseline["timings"],
            now["timings"],
            baseline["reference"],
            now["reference"],
            t,
            result,
            tuple(accept),
        )
    va, vb = baseline["versions"], now["versions"]
    for name in va:
        if va.get(name) != vb.get(name):
            result.version_changes.append((name, va.get(name), vb.get(name)))
    pa, pb = baseline.get("plugins", {}), now.get("plugins", {})
    for name in sorted(set(pa) | set(pb)):
        was, is_ = _plugin_words(pa.get(name)), _plugin_words(pb.get(name))
        if was != is_ and (
            name in pa or any(r["method"] == name for r in baseline["runs"].values())
        ):
            result.version_changes.append((f"plug-in {name}", was, is_))
    for name in accept:
        if not any(_matches(name, k) for k in result.accepted):
            result.notes.append(f"--accept-missing {name}: no missing cell of that name")
    if baseline["sweep"]["sha256"] != now["sweep"]["sha256"]:
        result.notes.append(
            f"sweep {baseline['sweep']['source']!r} changed since the baseline was recorded: "
            "new and missing runs may come from that"
        )
    return result


def _plugin_words(p: dict | None) -> str:
    if p is None:
        return "built in"
    return f"{p['package'] or '(no package)'} {p['version'] or '(no version)'}"


def _matches(name: str, accepted_key: str) -> bool:
    words = accepted_key.removeprefix("timing ").split(" ")
    return name == accepted_key or name in words[:2] or accepted_key.endswith(name)


def version_lines(result: GateResult) -> list[str]:
    lines = []
    for name, a, b in result.version_changes:
        if name == "cpu":
            lines.append(f"cpu {a} -> {b}: timing changes may be explained by the other machine")
        else:
            lines.append(f"{name} {a} -> {b}: the change may be explained by a version change")
    if result.machine_changes:
        lines.append("machine: " + "; ".join(result.machine_changes))
    return lines


def timing_lines(result: GateResult, t: Thresholds) -> list[str]:
    if not result.timing_verdicts:
        return []
    lines = [
        f"timings (time per step over the reference workload's, now against the baseline; "
        f"band +-{t.time_band:.0%}):"
    ]
    w = max(len(v.timing) for v in result.timing_verdicts)
    label = {
        T_OK: "ok",
        T_SLOWER: "SLOWER",
        T_FASTER: "faster",
        T_UNMEASURABLE: "not measurable here",
    }
    for v in result.timing_verdicts:
        tail = f": {v.why}" if v.why else ""
        lines.append(
            f"  {v.timing.ljust(w)}  {v.baseline:.4g} -> {v.now:.4g}  {v.words()}  "
            f"{label[v.verdict]}{tail}"
        )
    return lines


def format_report(result: GateResult, header: str, t: Thresholds | None = None) -> str:
    lines = [header, ""]
    rows = [("verdict", "run", "metric", "baseline", "now", "change")]
    label = {REGRESSION: "REGRESSION", IMPROVEMENT: "improved", NOTE: "note"}
    order = {REGRESSION: 0, IMPROVEMENT: 1, NOTE: 2}
    for f in sorted(result.findings, key=lambda f: order[f.kind]):
        rows.append((label[f.kind], f.run, f.metric, _g(f.baseline), _g(f.now), f.change))
    if len(rows) > 1:
        widths = [max(len(r[k]) for r in rows) for k in range(len(rows[0]) - 1)]
        for r in rows:
            cells = [c.ljust(w) for c, w in zip(r[:-1], widths, strict=True)] + [r[-1]]
            lines.append("  ".join(cells).rstrip())
    else:
        lines.append("no differences beyond the tolerances")
    if result.findings and result.version_changes:
        lines.append("")
    lines.extend(version_lines(result))
    lines.extend(timing_lines(result, t or Thresholds()))
    for what, keys in (
        ("runs in the baseline, missing from the rerun", result.missing_runs),
        ("runs new in the rerun, not in the baseline", result.new_runs),
        ("timings in the baseline, missing from the rerun", result.missing_timings),
        ("timings new in the rerun, not in the baseline", result.new_timings),
    ):
        if keys:
            lines.append(f"{what} ({len(keys)}):")
            lines.extend(f"  {k}" for k in keys)
    for m, n in result.new_methods.items():
        lines.append(f"method {m} is new since the baseline: {n} run(s), reported, not gated")
    for m, n in result.new_metrics.items():
        lines.append(
            f"metric {m} is new since the baseline: measured in {n} run(s), reported, not gated "
            "(record the baseline again to gate it)"
        )
    if result.accepted:
        names = " ".join(result.accept_names)
        lines.append(
            f"accepted as missing (--accept-missing {names}): {len(result.accepted)} cell(s):"
        )
        lines.extend(f"  {k}" for k in result.accepted)
    lines.extend(result.notes)
    lines.append(result.verdict())
    return "\n".join(lines)
