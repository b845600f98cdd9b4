"""Which case and which runs a `plot` or `report` command works on, from its options.

Every refusal is a one-line UserError naming what is missing and what there is instead."""

from __future__ import annotations

import re

from topdrift.benchmarks.choose import analysis
from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.store.format import STATUS_INCOMPLETE, BadRunFile


def _listing(names: list[str], limit: int = 8) -> str:
    shown = ", ".join(names[:limit])
    return shown + (f", ... ({len(names)} in all)" if len(names) > limit else "")


def require_runs(records: list[dict], path: str) -> None:
    if not records:
        raise UserError(f"'{path}' holds no runs")


def pick_case(records: list[dict], case: str | None, path: str) -> str:
    """The case asked for, or the only case in the file."""
    require_runs(records, path)
    names = analysis.cases(records)
    if case is not None:
        if case not in names:
            raise UserError(f"no runs of case '{case}' in '{path}' (cases: {_listing(names)})")
        return case
    if len(names) == 1:
        return names[0]
    raise UserError(f"'{path}' holds several cases; choose one with --case ({_listing(names)})")


def pick_runs(
    records: list[dict], run_ids: list[str] | None, case: str | None, path: str
) -> tuple[str, list[dict]]:
    """(case, records) for the runs asked for by id (or a unique id prefix), or every run of the
    case. Runs given by id must share one case. records may include incomplete groups (so that
    asking for one says what is wrong with it); every run of a case leaves them out."""
    complete = [r for r in records if r.get("status") != STATUS_INCOMPLETE]
    require_runs(complete, path)
    if not run_ids:
        case = pick_case(complete, case, path)
        return case, analysis.case_records(complete, case)
    chosen = []
    for rid in run_ids:
        hits = [r for r in records if r["run_id"] == rid] or [
            r for r in records if r["run_id"].startswith(rid)
        ]
        if not hits:
            raise UserError(f"no run '{rid}' in '{path}'")
        if len(hits) > 1:
            raise UserError(f"run id '{rid}' is ambiguous in '{path}' ({len(hits)} runs start so)")
        if hits[0].get("status") == STATUS_INCOMPLETE:
            raise UserError(
                f"run {hits[0]['run_id']} in '{path}' is incomplete (no case or method yet: its "
                "writer has only begun it)"
            )
        chosen.append(hits[0])
    found = sorted({r["case"] for r in chosen if r.get("case") is not None})
    if len(found) > 1:
        raise UserError(
            f"the runs given belong to several cases ({', '.join(found)}); plot one case at a time"
        )
    if case is not None and found and found[0] != case:
        raise UserError(f"run {chosen[0]['run_id']} is of case '{found[0]}', not '{case}'")
    return (found[0] if found else "?"), chosen


def pick_error(records: list[dict], case: str, error: str | None) -> str:
    if error is None:
        return analysis.default_error(records, case)
    if error in ("axis", "attitude") and analysis.default_error(records, case) != "axis":
        raise UserError(
            f"case '{case}' has no ok run with an {error} error (no exact solution?); "
            "use --error energy"
        )
    return error


def slug(text: str) -> str:
    """A file-name-safe form of a case name or run id."""
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", text).strip("_") or "case"


def run_rank(record: dict) -> float:
    """Coarse to fine within a series: by the number of steps taken (cost), else by the step
    (larger first) or tolerance (looser first)."""
    m = record.get("metrics") or {}
    steps = m.get("steps")
    if isinstance(steps, (int, float)) and not isinstance(steps, bool):
        return float(steps)
    st = record.get("settings") or {}
    for k in ("step", "rtol"):
        v = st.get(k)
        if isinstance(v, (int, float)) and v > 0:
            return 1.0 / v
    return 0.0


def load_labelled(
    path: str, records: list[dict], chosen: list[dict], strict: bool = True
) -> list[dict]:
    """Sample series of the chosen runs, each with a label naming method and setting; runs
    without a single sample yet are left out. strict=False also leaves out runs whose datasets
    are missing (a group its writer has only begun), instead of refusing: for 'every run of a
    case', where the user named none of them."""
    from topdrift.benchmarks.choose import plots
    from topdrift.benchmarks.store.reader import open_reader, read_series

    cases = {r.get("case") for r in chosen}
    labels = analysis.series_labels([r for r in records if r.get("case") in cases])
    out = []
    with open_reader(path) as f:  # once for every run: the file's checks are not repeated
        for r in chosen:
            try:
                s = read_series(f, r["run_id"])
            except UserError as exc:
                if strict or isinstance(exc, BadRunFile):
                    raise
                continue
            if len(s["t"]) == 0:
                continue
            s["series"] = labels[analysis.series_key(r)]
            s["label"] = plots.run_label(s["series"], r)
            s["rank"] = run_rank(r)
            out.append(s)
    return out
