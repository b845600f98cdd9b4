"""The rows `topdrift run` reports: one per plan that was run or reused, from the run's result
or, for a reused run, from the stored one (a run a stop did not reach has no row)."""

from __future__ import annotations

from pathlib import Path

from topdrift.benchmarks.run.stored_runs import REUSE
from topdrift.benchmarks.store.reader import stored_result


def result_rows(plans, actions, results, out: Path, say=None) -> list[dict]:
    """The rows, in plan order; `say` gets a line for each reused run."""
    rows = []
    for i, (p, action) in enumerate(zip(plans, actions, strict=True)):
        r = results[i] if i < len(results) else None
        if action.kind == REUSE:
            status, metrics, detail = stored_result(out, p.run_id)
            if say is not None:
                say(
                    f"topdrift: {p.case.name} {p.method.name}: already in {out} as run "
                    f"{p.run_id} ({status}); reusing it (--force runs it again)"
                )
        elif r is None:
            continue  # not reached: stopped by a signal
        else:
            status, metrics, detail = r.status, r.metrics, r.detail
        rows.append(
            {
                "run_id": p.run_id,
                "case": p.case.name,
                "method": p.method.name,
                "form": p.form,
                "settings": p.settings,
                "status": status,
                "detail": detail,
                "notes": p.notes,
                "file": str(out),
                "metrics": metrics,
            }
        )
    return rows
