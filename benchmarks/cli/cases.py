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
            "field": c.body.field.kind,
        }
        for c in cases
    ]
    fields = field_rows()
    if args.json:
        print(json.dumps({"cases": rows, "fields": fields}, indent=2))
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
    plugins = [f for f in fields if f["plugin"]]
    print(
        "fields a case may name: "
        + ", ".join(f["kind"] for f in fields if not f["plugin"])
        + (", and the plug-ins " + ", ".join(_plugin_text(f) for f in plugins) if plugins else "")
    )
    return 0


def _plugin_text(f: dict) -> str:
    if f.get("error"):
        return f"{f['kind']} (broken: {f['error']})"
    keys = ", ".join(f["keys"]) or "no keys"
    return f"{f['kind']} ({keys}; {'a gradient' if f['conservative'] else 'no gradient'})"


def field_rows() -> list[dict]:
    """The built-in fields and the installed plug-in fields (topdrift.fields), with their keys."""
    from topdrift.models.field_plugins import PluginFieldError, load, names
    from topdrift.models.field_spec import FIELD_KINDS

    rows = [{"kind": k, "plugin": False} for k in FIELD_KINDS]
    for name in names():
        try:
            plugin = load(name)
        except PluginFieldError as exc:
            rows.append({"kind": name, "plugin": True, "error": str(exc)})
            continue
        rows.append(
            {
                "kind": name,
                "plugin": True,
                "description": str(plugin.description),
                "keys": {k: str(v) for k, v in plugin.keys.items()},
                "conservative": bool(plugin.conservative),
            }
        )
    return rows
