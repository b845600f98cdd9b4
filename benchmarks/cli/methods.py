"""`topdrift methods [--json]`: the registered integrators and what each claims."""

from __future__ import annotations

import json


def add_parser(sub) -> None:
    p = sub.add_parser("methods", help="list the integrators and their metadata")
    p.add_argument("--json", action="store_true", help="print the JSON contract")
    p.set_defaults(func=run)


def run(args) -> int:
    from topdrift.integrators import all_methods

    methods = all_methods()
    if args.json:
        print(json.dumps({"methods": [m.info.as_json() for m in methods]}, indent=2))
        return 0
    rows = [
        ("name", "family", "order", "sympl.", "forms", "control", "keeps", "~round-off", "comp.")
    ]
    for m in methods:
        i = m.info
        rows.append(
            (
                i.name,
                i.family,
                str(i.order),
                "yes" if i.symplectic else "no",
                ",".join(i.forms),
                i.control,
                ",".join(i.keeps) or "-",
                ",".join(i.keeps_roundoff) or "-",
                "yes" if i.compensated else "no",
            )
        )
    widths = [max(len(r[k]) for r in rows) for k in range(len(rows[0]))]
    for r in rows:
        print("  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip())
    return 0
