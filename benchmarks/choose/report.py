"""The Markdown report of a results file: per case a table of runs, the cheapest method per
target error and the figures, written as report.md and PNG files into one directory."""

from __future__ import annotations

import math
from datetime import UTC, datetime
from pathlib import Path

from topdrift.benchmarks.choose import analysis, plots
from topdrift.benchmarks.choose.selection import load_labelled, slug

_COST_WORDS = {"wall": "wall time", "evals": "evaluations", "force": "force evaluations"}
# Metrics of invariants, beside the invariant each measures: a cell of a quantity the run's
# method keeps by construction in its form is marked (KEPT_MARK), as its number is rounding.
_INVARIANT_METRICS = {
    "energy_rel_max": "energy",
    "p_phi_rel_max": "p_phi",
    "p_psi_rel_max": "p_psi",
}
KEPT_MARK = " (kept)"


def _num(v, fmt: str = ".2e") -> str:
    if v is None or isinstance(v, bool):
        return "-"
    if isinstance(v, int):
        return str(v)
    try:
        x = float(v)
    except (TypeError, ValueError):
        return _cell(v)
    return format(x, fmt) if math.isfinite(x) else str(x)


def _cell(text) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def _cost(v: float, cost: str) -> str:
    return f"{v:.3g}" if cost in ("evals", "force") else f"{v:.3g} s"


def _law_text(exponent, energy_err, why=None) -> str:
    law = analysis.drift_law(exponent)
    if law != analysis.LAW_UNKNOWN and analysis.at_roundoff(energy_err):
        return f"{law}, at round-off"
    if law == analysis.LAW_UNKNOWN and why:
        return f"unknown: {_cell(why)}"
    return law


def _kept_cell(metrics: dict, name: str, kept: tuple[str, ...]) -> str:
    text = _num(metrics.get(name))
    return text + KEPT_MARK if text != "-" and _INVARIANT_METRICS[name] in kept else text


def runs_table(records: list[dict], case: str) -> list[str]:
    recs = analysis.case_records(records, case)
    labels = analysis.series_labels(recs)
    kov = any((r.get("metrics") or {}).get("kovalevskaya_rel_max") is not None for r in recs)
    head = (
        "method",
        "setting",
        "status",
        "axis err (rad)",
        "attitude err (rad)",
        "energy err",
        "p_phi err",
        "p_psi err",
        *(("Kovalevskaya err",) if kov else ()),
        "steps",
        "evals",
        "force evals",
        "wall (s)",
        "ns/step",
        "drift exp.",
        "drift law",
    )
    lines = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]

    def order(r):
        m = r.get("metrics") or {}
        c = m.get("rhs_evals")
        return (labels[analysis.series_key(r)], c if isinstance(c, (int, float)) else math.inf)

    for r in sorted(recs, key=order):
        m = r.get("metrics") or {}
        exp = m.get("energy_drift_exponent")
        kept = analysis.kept_by_construction(r.get("method"), (r.get("settings") or {}).get("form"))

        row = (
            _cell(labels[analysis.series_key(r)]),
            _cell(analysis.knob_text(r.get("settings") or {})),
            _cell(r.get("status")) if r.get("status") == "ok" else f"**{_cell(r.get('status'))}**",
            _num(m.get("axis_angle_max")),
            _num(m.get("attitude_angle_max")),
            _kept_cell(m, "energy_rel_max", kept),
            _kept_cell(m, "p_phi_rel_max", kept),
            _kept_cell(m, "p_psi_rel_max", kept),
            *((_num(m.get("kovalevskaya_rel_max")),) if kov else ()),
            _num(m.get("steps")),
            _num(m.get("rhs_evals")),
            _num(m.get("force_evals")),
            _num(m.get("wall_s"), ".3g"),
            _num(m.get("ns_per_step"), ".3g"),
            _num(exp, ".2f"),
            _law_text(exp, m.get("energy_rel_max"), m.get("energy_drift_unknown")),
        )
        lines.append("| " + " | ".join(row) + " |")
    return lines


def cheapest_table(records: list[dict], case: str, error: str) -> list[str]:
    frs = {c: analysis.frontiers(records, case, error, c) for c in ("wall", "force")}
    targets = sorted(
        set(analysis.default_targets(frs["wall"])) | set(analysis.default_targets(frs["force"])),
        reverse=True,
    )
    kept = analysis.kept_series(frs["wall"])
    note = []
    if kept:
        inv = analysis.ERROR_INVARIANT[error]
        note = [
            "",
            f"Not ranked by this error: {', '.join(_cell(k) for k in kept)}, which keep the "
            f"{inv} by construction in that form (to the bit or to round-off): their error is "
            "rounding, and a ranking by it would say nothing about them; they are ranked by "
            "the other errors.",
        ]
    if not targets:
        return ["No ok run has this error; nothing to rank."] + note
    picks = {
        c: {row["target"]: row for row in analysis.cheapest(fr, targets)} for c, fr in frs.items()
    }
    _, qty, unit = analysis.ERRORS[error]
    lines = [
        f"| target {_cell(qty)} ({unit}) | cheapest by wall time | cheapest by force "
        "evaluations | runner-up by wall time |",
        "|---|---|---|---|",
    ]
    for t in targets:
        cells = [f"{t:.3g}"]
        for c in ("wall", "force"):
            row = picks[c][t]
            if row["label"] is None:
                cells.append("none reaches it")
            else:
                cells.append(f"{_cell(row['label'])}: {_cost(row['cost'], c)} ({row['how']})")
        rank = picks["wall"][t]["ranking"]
        cells.append(f"{_cell(rank[1][0])}: {_cost(rank[1][1], 'wall')}" if len(rank) > 1 else "-")
        lines.append("| " + " | ".join(cells) + " |")
    return lines + note


def _series(path: str, records: list[dict], points: list) -> list[dict]:
    by_id = {r["run_id"]: r for r in records}
    return load_labelled(path, records, [by_id[p.run_id] for p in points])


def case_section(path: str, records: list[dict], case: str, out_dir: Path) -> list[str]:
    recs = analysis.case_records(records, case)
    statuses = {}
    for r in recs:
        statuses[r.get("status")] = statuses.get(r.get("status"), 0) + 1
    counts = ", ".join(f"{n} {s}" for s, n in sorted(statuses.items(), key=lambda x: str(x[0])))
    lines = [f"## Case `{case}`", "", f"{len(recs)} run(s): {counts}.", "", "### Runs", ""]
    lines += runs_table(records, case)
    lines += [
        "",
        "Errors are maxima over the run: axis err is the angle of the figure axis from "
        "the exact solution's, attitude err the rotation angle of the whole attitude from the "
        "exact one (spin phase included); energy err is |E - E0| / |E0|; the momentum errors are "
        "relative to |L0|, Kovalevskaya's integral to its start value. '-': the quantity is "
        "no invariant of this body (p_psi where the body is not a Lagrange top) or has no "
        f"reference. '{KEPT_MARK.strip()}': the method keeps that quantity by construction "
        "in that form (to the bit or to round-off), so its number measures rounding, not the "
        "method. Force evals count the torque evaluations (a splitting's kicks, every "
        "right-hand side of the other methods); evals add a splitting's free flows. The "
        "drift law classifies the exponent p of the energy error's "
        f"growth ~ t^p: bounded below {analysis.BOUNDED_BELOW}, random walk below "
        f"{analysis.RANDOM_WALK_BELOW}, linear below {analysis.LINEAR_BELOW}, faster "
        "than linear above; unknown, with the reason, where the horizon holds too few periods "
        'of the slowest motion or too few samples for a fit. "At round-off": '
        f"the energy error stays below {analysis.ROUNDOFF_LEVEL:.1e} (100 machine epsilons), "
        "where the law describes accumulated rounding, not the method's truncation "
        "error.",
        "",
    ]
    errors = ["energy"]
    if analysis.default_error(records, case) == "axis":
        # Run files written before the attitude metric existed have the axis error only.
        errors = ["axis", *(["attitude"] if analysis.has_error(records, case, "attitude") else [])]
        errors.append("energy")
    lines += [
        "### Cheapest method per target error",
        "",
        "Costs between two runs of a method are interpolated along its Pareto front, "
        'linearly in log(cost) against log(error); "at most": the method\'s cheapest run '
        "already beats the target, so its cost is an upper bound (no extrapolation below "
        "the cheapest run). Only runs with status ok count.",
        "",
    ]
    for e in errors:
        lines += [f"By {analysis.ERRORS[e][1]}:", ""] + cheapest_table(records, case, e) + [""]
    lines += ["### Figures", ""]
    figs = []
    for e in errors:
        name = figure_name(case, f"work-precision-{e}")
        plots.work_precision(records, case, out_dir / name, error=e)
        figs.append((name, f"work-precision, {analysis.ERRORS[e][1]}"))
    fr = analysis.frontiers(records, case, errors[0], "wall")
    reps = analysis.representatives(fr)
    runs = _series(path, records, reps)
    if runs:
        plots.drift(runs, case, out_dir / figure_name(case, "drift"))
        figs.append(
            (
                figure_name(case, "drift"),
                "invariant errors against time, the most accurate run of each method",
            )
        )
        if any(r["exact_euler"] is not None for r in runs):
            plots.theta(runs, case, out_dir / figure_name(case, "theta"))
            figs.append(
                (
                    figure_name(case, "theta"),
                    "theta against the exact solution, the most accurate run of each method",
                )
            )
        ranked = sorted(reps, key=lambda p: p.error)
        ends = [ranked[-1]] + ([ranked[0]] if len(ranked) > 1 else [])
        plots.axis_path(
            _series(path, records, ends), case, out_dir / figure_name(case, "axis-path")
        )
        figs.append(
            (
                figure_name(case, "axis-path"),
                "path of the figure axis seen from above, the "
                "least and the most accurate of those runs",
            )
        )
    else:
        lines += ["No ok run with samples: no time-series figures.", ""]
    for name, what in figs:
        lines += [f"![{case}: {what}]({name})", "", f"*{what}*", ""]
    return lines


REPORT_FILE = "report.md"
# The first line of every report.md topdrift writes: how `report` tells its own file (which it
# may write again) from a file of the user's (which it never writes over without --force). An
# HTML comment, so that it does not show where the Markdown is rendered.
REPORT_MARKER = "<!-- written by topdrift report; running it again replaces this file -->"
FIGURE_KINDS = ("work-precision-axis", "work-precision-energy", "drift", "theta", "axis-path")


def figure_name(case: str, kind: str) -> str:
    return f"{slug(case)}-{kind}.png"


def report_files(cases: list[str]) -> list[str]:
    """Every file a report of these cases may write in its directory, report.md first."""
    return [REPORT_FILE] + [figure_name(c, k) for c in cases for k in FIGURE_KINDS]


def is_own_report(path) -> bool:
    """A report.md that topdrift wrote: its first line is REPORT_MARKER."""
    try:
        with open(path, "rb") as fh:
            first = fh.readline(len(REPORT_MARKER) + 2)
    except OSError:
        return False
    return first.rstrip(b"\r\n") == REPORT_MARKER.encode()


def write_report(path: str, records: list[dict], out_dir: Path, cases: list[str]) -> Path:
    """Write report.md and its figures into out_dir (made if needed). The caller checks first
    that no file there is one topdrift must not write over (cli/report.py). Figures are written
    first and report.md last, each renamed into place when complete, so that a stop half way
    leaves the previous report.md or none, never a half-written one."""
    import os

    out_dir.mkdir(parents=True, exist_ok=True)
    lines = [
        REPORT_MARKER,
        "# topdrift report",
        "",
        f"Runs file: `{path}`, read {datetime.now(UTC).strftime('%Y-%m-%d %H:%M UTC')}; "
        f"{len(records)} runs, {len(cases)} case(s).",
        "",
    ]
    for case in cases:
        lines += case_section(path, records, case, out_dir)
    out = out_dir / REPORT_FILE
    tmp = out_dir / f".{REPORT_FILE}.{os.getpid()}.part"
    try:
        tmp.write_text("\n".join(lines).rstrip() + "\n", encoding="utf-8")
        os.replace(tmp, out)
    finally:
        if tmp.exists():
            tmp.unlink()
    return out
