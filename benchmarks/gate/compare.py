"""The regression gate: a rerun of a baseline's grid compared with the baseline, rule by rule.

Rules (the README section "Regression gate in CI" states them for users):

- status: must be the same. A run that changed status is compared no further.
- errors (the invariant and trajectory maxima): a regression when now > F * max(baseline, floor).
  The floor stands for round-off: an error of 1e-16 that becomes 3e-16 is the same error. An
  improvement when baseline > floor and now < baseline / F.
- counts: steps and right-hand-side evaluations must match within a relative tolerance R, either
  way (fewer steps at the same tolerance means a changed error estimate, not a free lunch);
  rejected steps within R times the baseline's steps, since they are a fraction of all steps.
- timings (the dedicated timing runs, normalised by the calibration loop): a regression when
  now > (1 + B) * baseline, an improvement when now < baseline / (1 + B).
- runs or timings in the baseline that the rerun lacks, or new ones, are reported, not failed:
  the grid is the sweep file's to change. A changed run id (the case file or a setting behind the
  same key changed) and changed versions are reported next to the differences.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

from topdrift.benchmarks.errors import UserError

# grid_measure (and through it the runner and the sweep) is imported where a comparison runs:
# every `topdrift` command imports this module for the defaults of its parser, and the chain
# costs about 0.1 s of each process's start-up (measured with -X importtime).
DEFAULT_ERROR_FACTOR = 1.5
DEFAULT_ERROR_FLOOR = 1e-13
DEFAULT_STEPS_TOLERANCE = 0.02
DEFAULT_TIME_BAND = 0.25

REGRESSION = "regression"
IMPROVEMENT = "improvement"
NOTE = "note"


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
class GateResult:
    findings: list[Finding] = field(default_factory=list)
    missing_runs: list[str] = field(default_factory=list)
    new_runs: list[str] = field(default_factory=list)
    missing_timings: list[str] = field(default_factory=list)
    new_timings: list[str] = field(default_factory=list)
    version_changes: list[tuple[str, str | None, str | None]] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    runs_compared: int = 0
    timings_compared: int = 0

    @property
    def regressions(self) -> list[Finding]:
        return [f for f in self.findings if f.kind == REGRESSION]

    @property
    def improvements(self) -> list[Finding]:
        return [f for f in self.findings if f.kind == IMPROVEMENT]

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
        if self.missing_runs or self.missing_timings:
            extra.append(f"{len(self.missing_runs) + len(self.missing_timings)} missing")
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
            "missing_runs": self.missing_runs,
            "new_runs": self.new_runs,
            "missing_timings": self.missing_timings,
            "new_timings": self.new_timings,
            "version_changes": [
                {"name": n, "baseline": a, "now": b} for n, a, b in self.version_changes
            ],
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


def compare_runs(base: dict, now: dict, t: Thresholds, result: GateResult) -> None:
    from topdrift.benchmarks.gate.measure import (
        ERROR_METRICS,
        OPTIONAL_COUNT_METRICS,
        OPTIONAL_ERROR_METRICS,
    )

    out = result.findings
    for key, a in base.items():
        b = now.get(key)
        if b is None:
            result.missing_runs.append(key)
            continue
        result.runs_compared += 1
        if a["run_id"] != b["run_id"]:
            out.append(
                Finding(NOTE, key, "run_id", a["run_id"], b["run_id"], "case or setting changed")
            )
        if a["status"] != b["status"]:
            why = f" ({b['detail']})" if b.get("detail") else ""
            out.append(
                Finding(REGRESSION, key, "status", a["status"], b["status"], f"changed{why}")
            )
            continue
        for name in ERROR_METRICS:
            _compare_error(key, name, a.get(name), b.get(name), t, out)
        # Keys a baseline of an older topdrift lacks are compared only where it has them.
        for name in OPTIONAL_ERROR_METRICS:
            if name in a:
                _compare_error(key, name, a[name], b.get(name), t, out)
        counts = ("steps", "rhs_evals") + tuple(n for n in OPTIONAL_COUNT_METRICS if n in a)
        for name in counts:
            allowed = t.steps_tolerance * abs(a[name]) if a[name] is not None else 0.0
            _compare_count(key, name, a[name], b.get(name), allowed, t, out)
        allowed = t.steps_tolerance * (a["steps"] or 0)
        _compare_count(key, "rejected", a["rejected"], b["rejected"], allowed, t, out)
    result.new_runs.extend(k for k in now if k not in base)


def compare_timings(
    base: dict, now: dict, base_cal: dict, now_cal: dict, t: Thresholds, result: GateResult
) -> None:
    result.new_timings.extend(k for k in now if k not in base)
    unit = ("kernel", "iterations", "clock")
    same_unit = all(base_cal[k] == now_cal[k] for k in unit)
    if not same_unit:
        was = ", ".join(str(base_cal[k]) for k in unit)
        now_ = ", ".join(str(now_cal[k]) for k in unit)
        result.notes.append(f"calibration changed ({was} -> {now_}): timings not compared")
    out = result.findings
    for tk, a in base.items():
        b = now.get(tk)
        label = f"timing {tk}"
        if b is None:
            result.missing_timings.append(tk)
            continue
        if not same_unit:
            continue
        result.timings_compared += 1
        if a["status"] != b["status"]:
            why = f" ({b['detail']})" if b.get("detail") else ""
            out.append(
                Finding(REGRESSION, label, "status", a["status"], b["status"], f"changed{why}")
            )
            continue
        x, y = a["ns_per_step_norm"], b["ns_per_step_norm"]
        if x is None or y is None:
            continue
        if a["steps"] != b["steps"]:
            result.notes.append(
                f"{label}: {b['steps']} steps now, {a['steps']} in the baseline: the per-step "
                "cost is compared, but the work is not the same"
            )
        ratio = y / x
        band = 1.0 + t.time_band
        change = f"{ratio - 1.0:+.0%} (band {t.time_band:.0%})"
        if ratio > band:
            out.append(Finding(REGRESSION, label, "ns_per_step_norm", x, y, f"slower {change}"))
        elif ratio < 1.0 / band:
            out.append(Finding(IMPROVEMENT, label, "ns_per_step_norm", x, y, f"faster {change}"))


def compare(baseline: dict, now: dict, t: Thresholds) -> GateResult:
    t.check()
    result = GateResult()
    compare_runs(baseline["runs"], now["runs"], t, result)
    compare_timings(
        baseline["timings"], now["timings"], baseline["calibration"], now["calibration"], t, result
    )
    va, vb = baseline["versions"], now["versions"]
    for name in va:
        if va.get(name) != vb.get(name):
            result.version_changes.append((name, va.get(name), vb.get(name)))
    if baseline["sweep"]["sha256"] != now["sweep"]["sha256"]:
        result.notes.append(
            f"sweep {baseline['sweep']['source']!r} changed since the baseline was recorded: "
            "new and missing runs may come from that"
        )
    return result


def version_lines(result: GateResult) -> list[str]:
    lines = []
    for name, a, b in result.version_changes:
        if name == "cpu":
            lines.append(f"cpu {a} -> {b}: timing changes may be explained by the other machine")
        else:
            lines.append(f"{name} {a} -> {b}: the change may be explained by a version change")
    return lines


def format_report(result: GateResult, header: str) -> str:
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
    for what, keys in (
        ("runs in the baseline, missing from the rerun", result.missing_runs),
        ("runs new in the rerun, not in the baseline", result.new_runs),
        ("timings in the baseline, missing from the rerun", result.missing_timings),
        ("timings new in the rerun, not in the baseline", result.new_timings),
    ):
        if keys:
            lines.append(f"{what} ({len(keys)}):")
            lines.extend(f"  {k}" for k in keys)
    lines.extend(result.notes)
    lines.append(result.verdict())
    return "\n".join(lines)
