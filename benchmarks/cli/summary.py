"""`topdrift summary FILE [--json]`: the runs in a results file and their metrics."""

from __future__ import annotations

import json


def add_parser(sub) -> None:
    p = sub.add_parser("summary", help="table of the runs in a results file and their metrics")
    p.add_argument("file", metavar="FILE", help="HDF5 run store (e.g. results/runs.h5)")
    p.add_argument("--json", action="store_true", help="print the runs as JSON")
    p.set_defaults(func=run)


def _setting(settings: dict) -> str:
    if not isinstance(settings, dict):
        return "?"
    if "step" in settings:
        return f"h={settings['step']:.4g}"
    if "rtol" in settings:
        return f"rtol={settings['rtol']:.3g},atol={settings.get('atol', float('nan')):.3g}"
    return "?"


def _num(v, fmt: str = ".2e") -> str:
    if v is None:
        return "-"
    if isinstance(v, int):
        return str(v)
    return format(v, fmt)


COLUMNS = (
    ("run", lambda r: r["run_id"][:8]),
    ("case", lambda r: r["case"]),
    ("method", lambda r: r["method"]),
    ("form", lambda r: r.get("form", "?")),
    ("setting", lambda r: _setting(r.get("settings"))),
    ("status", lambda r: r["status"]),
    ("steps", lambda r: _num(r["metrics"].get("steps"))),
    ("forces", lambda r: _num(r["metrics"].get("force_evals"))),
    ("dE/E", lambda r: _num(r["metrics"].get("energy_rel_max"))),
    ("dp_phi", lambda r: _num(r["metrics"].get("p_phi_rel_max"))),
    ("dp_psi", lambda r: _num(r["metrics"].get("p_psi_rel_max"))),
    ("dK/K", lambda r: _num(r["metrics"].get("kovalevskaya_rel_max"))),
    ("axis", lambda r: _num(r["metrics"].get("axis_angle_max"))),
    ("attitude", lambda r: _num(r["metrics"].get("attitude_angle_max"))),
    ("drift", lambda r: _num(r["metrics"].get("energy_drift_exponent"), ".2f")),
    ("wall s", lambda r: _num(r["metrics"].get("wall_s"), ".3g")),
    ("ns/step", lambda r: _num(r["metrics"].get("ns_per_step"), ".1f")),
    ("t_fail", lambda r: _num(r["metrics"].get("t_fail"), ".4g")),
)


def print_table(rows: list[dict]) -> None:
    """One line per run: identity, setting, status and the headline metrics."""
    table = [tuple(name for name, _ in COLUMNS)]
    for r in rows:
        metrics = r.get("metrics") if isinstance(r.get("metrics"), dict) else {}
        r = dict(r, metrics=metrics)
        table.append(tuple(str(get(r)) for _, get in COLUMNS))
    widths = [max(len(row[k]) for row in table) for k in range(len(table[0]))]
    for row in table:
        print("  ".join(c.ljust(w) for c, w in zip(row, widths, strict=True)).rstrip())


def run(args) -> int:
    import sys

    from topdrift.benchmarks.store.reader import list_runs, open_reader
    from topdrift.benchmarks.store.replacement import waiting

    with open_reader(args.file) as f:
        runs = list_runs(f)
        pending = waiting(f)
    if pending:  # a `run --force` that was stopped: its stored run is listed as it was
        sys.stderr.write(
            f"topdrift: {args.file}: {len(pending)} unfinished --force replacement(s) kept "
            f"beside their stored runs ({', '.join(r[:8] for r in pending)}); `topdrift run` "
            "of the same run with --resume continues one, with --force starts it again\n"
        )
    rows = [
        {
            "run_id": r["run_id"],
            "case": r.get("case", "?"),
            "method": r.get("method", "?"),
            "form": r.get("form", "?"),
            "settings": r.get("settings", {}),
            "horizon": r.get("horizon"),
            "samples": r.get("samples"),
            "samples_stored": r["samples_stored"],
            "status": r.get("status", "?"),
            "detail": r.get("detail", ""),
            "created": r.get("created"),
            "metrics": r.get("metrics") if isinstance(r.get("metrics"), dict) else {},
        }
        for r in runs
    ]
    if args.json:
        print(json.dumps({"file": str(args.file), "runs": rows}, indent=2))
    elif not rows:
        print(f"{args.file}: no runs")
    else:
        print_table(rows)
    return 0
