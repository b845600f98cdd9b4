"""What a set of stored runs says: work-precision frontiers, drift laws, the cheapest method.

Everything here is a pure function of run records, the dicts that `load_records(path)` returns
(keys case, method, settings, status, metrics, run_id). Only runs with status `ok` and a finite
error and cost enter a frontier; other runs are skipped there and marked in the report.

A *series* is one method with its fixed settings (everything in `settings` except the knob that a
sweep turns: the step, or rtol and atol). The form and the horizon are part of the series:
leapfrog on the Euler angles and leapfrog on the body form are two series (the reader adds the
run's form and horizon attributes to its settings). Along a series the knob trades cost for
error.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from topdrift.benchmarks.store.format import STATUS_OK

# Settings that a sweep turns (and what follows from them: the runner rounds the requested step
# to a whole number of steps per sample interval); every other setting names the series.
KNOBS = ("step", "step_requested", "steps_per_sample", "rtol", "atol")

# Error metrics: key -> (metric name, axis label, unit).
ERRORS = {
    "axis": ("axis_angle_max", "max figure-axis angle from exact", "rad"),
    "attitude": ("attitude_angle_max", "max attitude (rotation) angle from exact", "rad"),
    "energy": ("energy_rel_max", "max |E - E0| / |E0|", "1"),
}
# The invariant an error metric measures, where it measures one: a method that keeps it by
# construction in a form has an error of round-off there, and a ranking by it says nothing.
ERROR_INVARIANT = {"energy": "energy"}
# Cost metrics: key -> (metric name, axis label, unit).
COSTS = {
    "wall": ("wall_s", "wall time", "s"),
    "cpu": ("cpu_s", "CPU time", "s"),  # steadier than wall time on a shared machine
    "evals": ("rhs_evals", "evaluations (right-hand sides or sub-flows)", "count"),
    # What molecular-dynamics and force-field codes count: the torque evaluations (a
    # splitting's kicks, every right-hand side of the other methods), not the free flows.
    "force": ("force_evals", "force (torque) evaluations", "count"),
}

# Drift law from the exponent p of the energy error's growth, |dE| ~ t^p. The ideal values are
# 0 (bounded, as for a symplectic method far from round-off), 1/2 (a random walk, as round-off
# accumulates) and 1 (linear drift, as for a non-symplectic method); the thresholds are the
# midpoints between them. Above 1.5 the growth is closer to quadratic than to linear.
BOUNDED_BELOW = 0.25
RANDOM_WALK_BELOW = 0.75
LINEAR_BELOW = 1.5

# An energy error below 100 machine epsilons is rounding, whatever law its growth follows:
# the report says so beside the law (a margin of our choosing, stated where it is used).
ROUNDOFF_LEVEL = 100.0 * 2.0**-52

LAW_BOUNDED = "bounded"
LAW_RANDOM_WALK = "random walk"
LAW_LINEAR = "linear"
LAW_FASTER = "faster than linear"
LAW_UNKNOWN = "unknown"


@dataclass(frozen=True)
class Point:
    """One run on a work-precision diagram."""

    cost: float
    error: float
    run_id: str
    series: tuple = field(compare=False)
    settings: dict = field(compare=False, hash=False)


def _finite(x) -> float | None:
    if x is None or isinstance(x, bool):
        return None
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def cases(records: list[dict]) -> list[str]:
    return sorted({r["case"] for r in records if r.get("case") is not None})


def case_records(records: list[dict], case: str) -> list[dict]:
    return [r for r in records if r.get("case") == case]


def series_key(record: dict) -> tuple:
    fixed = tuple(
        sorted((k, str(v)) for k, v in (record.get("settings") or {}).items() if k not in KNOBS)
    )
    return (record["method"], fixed)


def series_labels(records: list[dict]) -> dict[tuple, str]:
    """A short label per series: the method, plus those fixed settings (in brackets) that differ
    between the series of that method; a setting shared by all of them says nothing."""
    keys = sorted({series_key(r) for r in records if r.get("method") is not None})
    by_method: dict[str, list[tuple]] = {}
    for k in keys:
        by_method.setdefault(k[0], []).append(k)
    labels = {}
    for method, ks in by_method.items():
        names = sorted({name for k in ks for name, _ in k[1]})
        varying = [n for n in names if len({dict(k[1]).get(n) for k in ks}) > 1]
        for k in ks:
            d = dict(k[1])
            extra = ", ".join(d[n] if n == "form" else f"{n}={_g(d[n])}" for n in varying if n in d)
            labels[k] = f"{method} [{extra}]" if extra else method
    return labels


def knob_text(settings: dict) -> str:
    """The swept setting of a run, e.g. 'h=0.001' or 'rtol=1e-08, atol=1e-10'."""
    s = settings or {}
    if "step" in s:
        return f"h={_g(s['step'])}"
    parts = [f"{k}={_g(s[k])}" for k in ("rtol", "atol") if k in s]
    return ", ".join(parts) or "-"


def _g(v) -> str:
    x = _finite(v)
    return f"{x:.3g}" if x is not None else str(v)


def work_points(
    records: list[dict], case: str, error: str = "axis", cost: str = "wall"
) -> dict[tuple, list[Point]]:
    """Per series, the (cost, error) points of the case's ok runs, sorted by cost then error.

    Runs without the metric (axis error where the case has no exact solution), with a negative
    or non-finite error, or a cost that is not positive are left out."""
    e_name = ERRORS[error][0]
    c_name = COSTS[cost][0]
    out: dict[tuple, list[Point]] = {}
    for r in case_records(records, case):
        if r.get("status") != STATUS_OK:
            continue
        m = r.get("metrics") or {}
        e, c = _finite(m.get(e_name)), _finite(m.get(c_name))
        if e is None or c is None or e < 0.0 or c <= 0.0:
            continue
        key = series_key(r)
        out.setdefault(key, []).append(Point(c, e, r["run_id"], key, r.get("settings") or {}))
    for pts in out.values():
        pts.sort(key=lambda p: (p.cost, p.error))
    return out


def pareto(points: list[Point]) -> list[Point]:
    """The points no other point dominates (no other is at most as costly and at most as wrong,
    and better in one), by cost ascending; the errors then strictly decrease. Of exact
    duplicates the first is kept."""
    front: list[Point] = []
    best = math.inf
    for p in sorted(points, key=lambda p: (p.cost, p.error)):
        if p.error < best:
            front.append(p)
            best = p.error
    return front


@dataclass
class Frontiers:
    case: str
    error: str
    cost: str
    points: dict[tuple, list[Point]]  # every usable point, per series
    per_series: dict[tuple, list[Point]]  # each series' Pareto set
    overall: list[Point]  # the Pareto set across all series
    labels: dict[tuple, str]


def frontiers(records: list[dict], case: str, error: str = "axis", cost: str = "wall") -> Frontiers:
    pts = work_points(records, case, error, cost)
    per = {k: pareto(v) for k, v in pts.items()}
    overall = pareto([p for v in pts.values() for p in v])
    labels = series_labels(case_records(records, case))
    return Frontiers(case, error, cost, pts, per, overall, labels)


def cost_to_reach(front: list[Point], target: float) -> tuple[float, str] | None:
    """The cost at which a series' Pareto front reaches error `target`, or None if no run of it
    does.

    Between two front points the cost is interpolated linearly in log(cost) against log(error),
    a straight line on the work-precision diagram (exact for a method of fixed order in its
    asymptotic range, where error ~ cost^-order). Returns (cost, how) with how one of
    'interpolated', 'at run' (a run has exactly that error) and 'at most' (the cheapest run
    already beats the target, or the next run's error is 0 so that the log-log line is
    undefined: its cost is an upper bound; no extrapolation below the cheapest run). An
    interpolation between runs more than a decade of cost apart says so: 'interpolated over
    2.3 decades'."""
    if not front or front[-1].error > target:
        return None
    if front[0].error <= target:
        return front[0].cost, ("at run" if front[0].error == target else "at most")
    for a, b in zip(front, front[1:], strict=False):
        if a.error > target >= b.error:
            if b.error == target:
                return b.cost, "at run"
            if b.error == 0.0:
                return b.cost, "at most"
            s = (math.log(target) - math.log(a.error)) / (math.log(b.error) - math.log(a.error))
            cost = math.exp(math.log(a.cost) + s * (math.log(b.cost) - math.log(a.cost)))
            gap = math.log10(b.cost / a.cost)
            # Across a wide gap the straight line is a guess (the method may leave its asymptotic
            # range, or reach round-off, in between): say how wide.
            return cost, ("interpolated" if gap <= 1.0 else f"interpolated over {gap:.1f} decades")
    return None  # unreachable: the front's errors decrease to front[-1].error <= target


def default_targets(fr: Frontiers) -> list[float]:
    """Whole decades of error from the worst to the best point of the overall front, each one
    that at least one series reaches. Errors within one decade give that single worst error.
    Series that keep the error's quantity by construction (kept_series) are left out: their
    round-off would set targets no ranked method is meant to reach."""
    inv = ERROR_INVARIANT.get(fr.error)
    overall = fr.overall
    if inv is not None:
        overall = pareto([p for k, v in fr.points.items() if not series_keeps(k, inv) for p in v])
    errs = [p.error for p in overall if p.error > 0.0]
    if not errs:
        return []
    hi, lo = max(errs), min(errs)
    k_hi, k_lo = math.floor(math.log10(hi)), math.ceil(math.log10(lo))
    targets = [10.0**k for k in range(k_hi, k_lo - 1, -1)]
    return targets or [hi]


def kept_by_construction(method: str, form) -> tuple[str, ...]:
    """What a registered method keeps by construction in a form, to the bit or to round-off
    (MethodInfo.kept_in); () for a method not installed here or a form not given."""
    if not method or not form:
        return ()
    from topdrift.integrators import UnknownMethod, get

    try:
        return get(method).info.kept_in(str(form))
    except UnknownMethod:
        return ()


def series_keeps(key: tuple, invariant: str) -> bool:
    """Whether a series' method keeps `invariant` by construction in the series' form."""
    form = dict(key[1]).get("form")
    return invariant in kept_by_construction(key[0], form)


def kept_series(fr: Frontiers) -> list[str]:
    """Labels of the series whose method keeps the frontier's error quantity by construction in
    its form (see ERROR_INVARIANT), sorted: they are not ranked by that error."""
    inv = ERROR_INVARIANT.get(fr.error)
    if inv is None:
        return []
    return sorted(fr.labels.get(k, k[0]) for k in fr.per_series if series_keeps(k, inv))


def cheapest(fr: Frontiers, targets: list[float]) -> list[dict]:
    """For each target error: the series that reaches it at least cost, its cost and how that
    cost was found (see cost_to_reach), and every series that reaches it, cheapest first.
    A target no series reaches gets series None. Series whose method keeps the error's quantity
    by construction in their form (kept_series) are not ranked: their error is round-off."""
    out = []
    inv = ERROR_INVARIANT.get(fr.error)
    for target in targets:
        reach = []
        for key, front in fr.per_series.items():
            if inv is not None and series_keeps(key, inv):
                continue
            got = cost_to_reach(front, target)
            if got is not None:
                reach.append((got[0], fr.labels.get(key, key[0]), got[1], key))
        reach.sort(key=lambda x: (x[0], x[1]))
        row = {
            "target": target,
            "series": None,
            "label": None,
            "cost": None,
            "how": None,
            "ranking": [(lab, c, how) for c, lab, how, _ in reach],
        }
        if reach:
            c, lab, how, key = reach[0]
            row.update(series=key, label=lab, cost=c, how=how)
        out.append(row)
    return out


def drift_law(exponent) -> str:
    """The class of an energy drift exponent (see the thresholds above); 'unknown' when the
    exponent is missing, which the runner reports, with the reason (the metric
    energy_drift_unknown), when the horizon holds too few slow periods or samples for a fit."""
    p = _finite(exponent)
    if p is None:
        return LAW_UNKNOWN
    if p < BOUNDED_BELOW:
        return LAW_BOUNDED
    if p < RANDOM_WALK_BELOW:
        return LAW_RANDOM_WALK
    if p < LINEAR_BELOW:
        return LAW_LINEAR
    return LAW_FASTER


def at_roundoff(energy_err) -> bool:
    e = _finite(energy_err)
    return e is not None and e < ROUNDOFF_LEVEL


def drift_laws(records: list[dict]) -> dict[str, str]:
    return {
        r["run_id"]: drift_law((r.get("metrics") or {}).get("energy_drift_exponent"))
        for r in records
    }


def has_error(records: list[dict], case: str, error: str) -> bool:
    """Whether an ok run of the case has a finite value of the error metric (ERRORS key)."""
    name = ERRORS[error][0]
    return any(
        r.get("status") == STATUS_OK and _finite((r.get("metrics") or {}).get(name)) is not None
        for r in case_records(records, case)
    )


def default_error(records: list[dict], case: str) -> str:
    """The axis error where the case's ok runs have one (an exact solution exists), else
    energy."""
    for r in case_records(records, case):
        if (
            r.get("status") == STATUS_OK
            and _finite((r.get("metrics") or {}).get("axis_angle_max")) is not None
        ):
            return "axis"
    return "energy"


def representatives(fr: Frontiers) -> list[Point]:
    """The most accurate run of each series (the end of its front), in label order: one line
    per method in a figure that would be unreadable with every run."""
    reps = [front[-1] for front in fr.per_series.values() if front]
    return sorted(reps, key=lambda p: fr.labels.get(p.series, p.series[0]))
