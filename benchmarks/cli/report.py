"""`topdrift report FILE --out DIR [--case C ...]`: report.md and its figures in DIR. Reads the
results file only."""

from __future__ import annotations


def add_parser(sub) -> None:
    p = sub.add_parser(
        "report",
        help="write a Markdown report (report.md and PNG figures) of a results file",
        description="Per case: a table of the runs, the cheapest method per target error and "
        "the figures, written into DIR as report.md and PNG files.",
    )
    p.add_argument("file", metavar="FILE", help="HDF5 run store (e.g. results/runs.h5)")
    p.add_argument(
        "--out", required=True, metavar="DIR", help="directory for report.md and figures"
    )
    p.add_argument("--case", action="append", help="only this case; repeat for several")
    p.set_defaults(func=run)


def run(args) -> int:
    from pathlib import Path

    from topdrift.benchmarks.choose.report import write_report
    from topdrift.benchmarks.choose.selection import pick_case, require_runs
    from topdrift.benchmarks.errors import UserError
    from topdrift.benchmarks.store.format import STATUS_INCOMPLETE
    from topdrift.benchmarks.store.reader import load_records

    out_dir = Path(args.out)
    if out_dir.exists() and not out_dir.is_dir():
        raise UserError(f"--out '{out_dir}' exists and is not a directory")
    results = Path(args.file).resolve()
    if results.parent == out_dir.resolve() and (
        results.name == "report.md" or results.suffix.lower() == ".png"
    ):
        raise UserError(f"'{args.file}' would be overwritten by the report; choose another --out")
    records = [r for r in load_records(args.file) if r["status"] != STATUS_INCOMPLETE]
    require_runs(records, args.file)
    from topdrift.benchmarks.choose.analysis import cases as all_cases

    cases = (
        [pick_case(records, c, args.file) for c in args.case] if args.case else all_cases(records)
    )
    print(write_report(args.file, records, out_dir, cases))
    return 0
