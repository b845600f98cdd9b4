"""`topdrift demo`: the built-in demo. The demo wheel (a bicycle-wheel gyroscope, spin far above
precession) run through one method of each family at one setting each, stored in
results/demo.h5, and compared against the exact solution side by side."""

from __future__ import annotations

import json
from pathlib import Path

# (method, form, setting): one of each family, settings chosen so that each run takes well under
# a second here; the point is the comparison, not the cheapest run (see `topdrift pick`).
LINEUP = (
    ("dop853", "body", {"rtol": 1e-10, "atol": 1e-12}),
    ("rk45", "body", {"rtol": 1e-8, "atol": 1e-11}),
    ("rk4", "body", {"step": 1e-3}),
    ("leapfrog", "euler", {"step": 1e-3}),
    ("leapfrog", "body", {"step": 1e-3}),
    ("leapfrog-kl6", "euler", {"step": 1e-2}),
    ("gauss6", "body", {"step": 1e-2}),
)
DEFAULT_OUT = Path("results") / "demo.h5"


def add_parser(sub) -> None:
    p = sub.add_parser(
        "demo",
        help="run the demo wheel through one method of each family and compare them",
        description="Describe the demo wheel (a bicycle-wheel gyroscope on a pivot), run it "
        "through one method of each family over the case's horizon, store the runs in "
        "results/demo.h5 (runs already there are reused) and print the comparison against the "
        "exact solution.",
    )
    p.add_argument("--out", metavar="FILE", help=f"results file (default {DEFAULT_OUT})")
    p.add_argument("--horizon", type=float, help="end time T (s); default from the case")
    p.add_argument("--json", action="store_true", help="print the runs as JSON")
    p.set_defaults(func=run)


def run(args) -> int:
    from topdrift.benchmarks.cases.description import summarise
    from topdrift.benchmarks.cases.library import DEMO_CASE, load_case
    from topdrift.benchmarks.cli.describe import render
    from topdrift.benchmarks.cli.summary import print_table
    from topdrift.benchmarks.run.runner import execute, plan_run
    from topdrift.benchmarks.store.format import FINAL_STATUSES
    from topdrift.benchmarks.store.reader import existing_status, list_runs, open_reader
    from topdrift.benchmarks.store.writer import open_writer

    case = load_case(DEMO_CASE)
    out = Path(args.out) if args.out else DEFAULT_OUT
    plans = [plan_run(case, m, form=f, horizon=args.horizon, **s) for m, f, s in LINEUP]
    if not args.json:
        print(render(summarise(case)))
        print()
        print(f"Running the demo wheel through {len(plans)} methods into {out} ...", flush=True)
    todo = [p for p in plans if existing_status(out, p.run_id)[0] not in FINAL_STATUSES]
    if todo:
        f = open_writer(out)
        try:
            for p in todo:
                r = execute(p, f)
                if not args.json:
                    print(f"  {p.method.name} ({p.form}): {r.status}", flush=True)
        finally:
            f.close()
    ids = [p.run_id for p in plans]
    with open_reader(out) as f:
        by_id = {r["run_id"]: r for r in list_runs(f)}
    rows = [by_id[i] for i in ids]
    if args.json:
        print(json.dumps({"case": case.name, "file": str(out), "runs": rows}, indent=2))
        return 0 if all(r["status"] == "ok" for r in rows) else 1
    print()
    print_table(rows)
    print()
    print("axis: largest angle between the computed and the exact figure axis (rad); dE/E, dp_phi,")
    print("dp_psi: largest drift of the invariants; drift: growth exponent of the energy error")
    print("(about 0 bounded, 1 linear). Next: `topdrift pick demo-wheel --target 1e-6` for the")
    print(f"cheapest method at a target, `topdrift report {out} --out report/` for figures.")
    return 0 if all(r["status"] == "ok" for r in rows) else 1
