"""`topdrift report FILE --out DIR [--case C ...] [--force]`: report.md and its figures in DIR.
Reads the results file only, and writes over no file in DIR that it did not write itself: its
own report.md starts with a marker line (choose/report.py), its figures carry topdrift's PNG
tag (choose/figure_files.py); anything else there is refused unless --force."""

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
    p.add_argument(
        "--force",
        action="store_true",
        help="write over files in DIR that topdrift did not write (report.md without its "
        "marker line, PNG files of another program)",
    )
    p.set_defaults(func=run)


def _check_outputs(out_dir, names, force: bool) -> None:
    """Refuse (one line, nothing written) a report that would write over a file it did not
    write: report.md without the marker line, or a figure name taken by another file."""
    from topdrift.benchmarks.choose.figure_files import check_figure_path
    from topdrift.benchmarks.choose.report import REPORT_FILE, is_own_report
    from topdrift.benchmarks.errors import UserError
    from topdrift.benchmarks.store.paths import kind

    for name in names:
        path = out_dir / name
        if name != REPORT_FILE:
            check_figure_path(path, "--out", force=force, force_option="--force")
            continue
        k = kind(path)
        if k not in (None, "missing"):
            raise UserError(f"--out: '{path}' is {k}; choose another --out")
        if k is None and not force and not is_own_report(path):
            raise UserError(
                f"--out: '{path}' exists and was not written by topdrift report (its "
                "first line is not the report's marker); choose another --out, or pass --force "
                "to replace it"
            )


def run(args) -> int:
    from pathlib import Path

    from topdrift.benchmarks.choose.report import REPORT_FILE, report_files, write_report
    from topdrift.benchmarks.choose.selection import pick_case, require_runs
    from topdrift.benchmarks.errors import UserError
    from topdrift.benchmarks.stopping import Interrupted
    from topdrift.benchmarks.store.format import STATUS_INCOMPLETE
    from topdrift.benchmarks.store.reader import load_records

    out_dir = Path(args.out)
    if out_dir.exists() and not out_dir.is_dir():
        raise UserError(f"--out '{out_dir}' exists and is not a directory")
    _check_outputs(out_dir, [REPORT_FILE], args.force)  # before the results file is read
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
    _check_outputs(out_dir, report_files(cases), args.force)
    try:
        written = write_report(args.file, records, out_dir, cases)
    except Interrupted as exc:
        raise exc.saying(
            f"{REPORT_FILE} not written (figures are written first; any drawn so far are in "
            f"{out_dir})"
        ) from None
    try:
        print(written)
    except Interrupted as exc:
        raise exc.saying(f"{written} written") from None
    return 0
