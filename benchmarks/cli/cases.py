"""`topdrift cases [--json]`: the case library shipped with topdrift."""

from __future__ import annotations

import json
import shutil
import textwrap


def add_parser(sub) -> None:
    p = sub.add_parser("cases", help="list the library cases and what each tests")
    p.add_argument("--json", action="store_true", help="print the JSON contract")
    p.set_defaults(func=run)


def run(args) -> int:
    from topdrift.benchmarks.cases.library import library_cases, library_dir

    cases = library_cases()
    rows = [
        {
            "name": c.name,
            "description": c.description,
            "path": str(c.path),
            "exact": c.body.lagrange_top,  # the exact solution applies
        }
        for c in cases
    ]
    if args.json:
        print(json.dumps({"cases": rows}, indent=2))
        return 0
    width = max(60, min(shutil.get_terminal_size((100, 24)).columns, 120))
    name_w = max((len(r["name"]) for r in rows), default=4)
    head = f"{'name'.ljust(name_w)}  exact  what it tests"
    print(head)
    indent = " " * (name_w + 9)
    for r in rows:
        lines = textwrap.wrap(r["description"], width - len(indent)) or [""]
        print(f"{r['name'].ljust(name_w)}  {'yes' if r['exact'] else 'no ':<5}  {lines[0]}")
        for line in lines[1:]:
            print(indent + line)
    print(f"\n{len(rows)} cases in {library_dir()}")
    return 0
