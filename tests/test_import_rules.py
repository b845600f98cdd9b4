"""The house rules for imports, read from the source with `ast` (nothing is imported or run):

- arrows point one way: cli -> gate, choose, sweep -> run -> store, cases -> integrators ->
  models (DESIGN.md, "The house"); rooms of one rank do not import each other, except where
  SIDEWAYS says why;
- no module imports another module's underscore names, neither `from m import _x` nor `m._x`;
- the format of a baseline file does not import the code that measures.

Every module of models/, integrators/ and benchmarks/ is read, imports inside functions too.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
SOURCE_ROOTS = ("models", "integrators", "benchmarks")

# A room imports rooms of lower rank, and itself. benchmarks' flat modules are rooms of their
# own: errors.py sits below every room of the suite, the pytest plugin beside the command line.
RANKS = {
    "models": 0,
    "integrators": 1,
    "benchmarks.errors": 2,
    "benchmarks.cases": 3,
    "benchmarks.store": 3,
    "benchmarks.run": 4,
    "benchmarks.gate": 5,
    "benchmarks.choose": 5,
    "benchmarks.sweep": 5,
    "benchmarks.cli": 6,
    "benchmarks.pytest_plugin": 6,
    "benchmarks.timing": 7,
    "benchmarks": 7,  # the package's own __init__
}

# Imports between rooms of one rank, each with its reason.
SIDEWAYS = {
    ("benchmarks.gate", "benchmarks.sweep"): "a baseline is measured by running the jobs of a "
    "sweep spec (the quick grid): the gate stands on the sweep",
}

# Modules that may import only these project modules (and the standard library).
ONLY = {
    # The baseline file format names its keys itself; measuring imports the format, not back.
    "topdrift.benchmarks.gate.baseline_file": {"topdrift.benchmarks.errors"},
}


def module_name(path: Path) -> str:
    rel = path.relative_to(ROOT).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(["topdrift", *parts])


def is_module(name: str) -> bool:
    """Whether a topdrift.* name is a module or package of the source tree."""
    parts = name.split(".")
    if parts[0] != "topdrift" or len(parts) < 2:
        return False
    base = ROOT.joinpath(*parts[1:])
    return base.with_suffix(".py").is_file() or (base / "__init__.py").is_file()


def room_of(name: str) -> str | None:
    parts = name.split(".")
    if parts[0] != "topdrift" or len(parts) < 2:
        return None
    if parts[1] == "benchmarks" and len(parts) > 2:
        return f"benchmarks.{parts[2]}"
    return parts[1]


def _absolute(node: ast.ImportFrom, module: str, is_package: bool) -> str:
    if not node.level:
        return node.module or ""
    base = module.split(".")
    if not is_package:
        base = base[:-1]
    base = base[: len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def imports_of(module: str, is_package: bool, tree: ast.AST):
    """(line, imported module, name or None, local binding) for every import in the tree; a
    `from package import module` counts as an import of that module."""
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                local = a.asname or a.name.split(".")[0]
                yield node.lineno, a.name, None, (local, a.name if a.asname else local)
        elif isinstance(node, ast.ImportFrom):
            src = _absolute(node, module, is_package)
            for a in node.names:
                local = a.asname or a.name
                if is_module(f"{src}.{a.name}"):
                    yield node.lineno, f"{src}.{a.name}", None, (local, f"{src}.{a.name}")
                else:
                    yield node.lineno, src, a.name, (local, None)


def violations(module: str, is_package: bool, source: str) -> list[str]:
    """Every breach of the rules in one module's source, as 'module:line: what'."""
    tree = ast.parse(source)
    out = []
    modules_bound: dict[str, str] = {}  # local name -> topdrift module it stands for
    here = room_of(module)
    for line, target, name, (local, bound) in imports_of(module, is_package, tree):
        if not target.startswith("topdrift."):
            continue
        if bound is not None:
            modules_bound[local] = bound if bound != local else target
        where = f"{module}:{line}"
        if name is not None and name.startswith("_") and not name.startswith("__"):
            if target != module:
                out.append(f"{where}: imports {target}.{name}, a private name of another module")
        last = target.rsplit(".", 1)[-1]
        if last.startswith("_") and not last.startswith("__"):
            out.append(f"{where}: imports the private module {target}")
        if module in ONLY and target not in ONLY[module]:
            out.append(f"{where}: {module} may import only {sorted(ONLY[module])}, not {target}")
        there = room_of(target)
        if there is None or there == here:
            continue
        for room in (here, there):
            if room not in RANKS:
                out.append(f"{where}: room {room} has no rank in RANKS; give it its place")
        if here in RANKS and there in RANKS:
            if RANKS[there] > RANKS[here]:
                out.append(f"{where}: {here} imports {target}: the arrow points back up")
            elif RANKS[there] == RANKS[here] and (here, there) not in SIDEWAYS:
                out.append(f"{where}: {here} imports its sibling {target}")
    for node in ast.walk(tree):
        if not isinstance(node, ast.Attribute) or not node.attr.startswith("_"):
            continue
        if node.attr.startswith("__"):
            continue
        chain = []
        base = node.value
        while isinstance(base, ast.Attribute):
            chain.append(base.attr)
            base = base.value
        if not isinstance(base, ast.Name) or base.id not in modules_bound:
            continue
        owner = ".".join([modules_bound[base.id], *reversed(chain)])
        if is_module(owner) and owner != module:
            out.append(f"{module}:{node.lineno}: uses {owner}.{node.attr}, a private name")
    return list(dict.fromkeys(out))  # one line per breach, not per name imported


def all_violations() -> list[str]:
    out = []
    for root in SOURCE_ROOTS:
        for path in sorted((ROOT / root).rglob("*.py")):
            out += violations(
                module_name(path), path.name == "__init__.py", path.read_text(encoding="utf-8")
            )
    return out


def test_the_source_keeps_the_import_rules():
    found = all_violations()
    assert not found, "\n".join(found)


def test_every_room_has_a_rank():
    rooms = set()
    for root in SOURCE_ROOTS:
        for path in (ROOT / root).rglob("*.py"):
            rooms.add(room_of(module_name(path)))
    assert rooms <= set(RANKS), sorted(rooms - set(RANKS))


# The checker itself, on sources written to break each rule once, so that a silent checker
# cannot pass the test above.
@pytest.mark.parametrize(
    "module, source, words",
    [
        (
            "topdrift.benchmarks.run.ensemble",
            "from topdrift.benchmarks.run.runner import _Buffers\n",
            "private name of another module",
        ),
        (
            "topdrift.benchmarks.run.ensemble",
            "def f():\n    from ..store.writer import _COMPRESSION\n",
            "private name of another module",
        ),
        (
            "topdrift.benchmarks.pytest_plugin",
            "from topdrift.integrators import registry as reg\nreg._methods.get('x')\n",
            "a private name",
        ),
        (
            "topdrift.benchmarks.cli.summary",
            "import topdrift.benchmarks.store.writer as w\nw._attr_str(None, 'x')\n",
            "a private name",
        ),
        (
            "topdrift.benchmarks.run.ensemble",
            "from topdrift.benchmarks.choose.roundoff import perturbed_starts\n",
            "points back up",
        ),
        ("topdrift.models.body", "import topdrift.integrators\n", "points back up"),
        (
            "topdrift.benchmarks.choose.recommend",
            "from topdrift.benchmarks.sweep.settings_ladder import step_ladder\n",
            "sibling",
        ),
        (
            "topdrift.benchmarks.gate.baseline_file",
            "from topdrift.benchmarks.gate.measure import ERROR_METRICS\n",
            "may import only",
        ),
        ("topdrift.benchmarks.widgets.x", "from topdrift.models import body\n", "no rank"),
    ],
)
def test_the_checker_sees_each_breach(module, source, words):
    found = violations(module, False, source)
    assert any(words in v for v in found), found


@pytest.mark.parametrize(
    "module, source",
    [
        # A module's own private names, the standard library's, and downward imports are fine.
        ("topdrift.benchmarks.run.runner", "import os\nos._exit\n"),
        ("topdrift.benchmarks.run.runner", "from topdrift.integrators import ST_OK\n"),
        ("topdrift.benchmarks.gate.measure", "from topdrift.benchmarks.sweep.spec import x\n"),
        ("topdrift.integrators.base", "from topdrift.models.dynamics import singular\n"),
    ],
)
def test_the_checker_lets_the_rules_be(module, source):
    assert violations(module, False, source) == []
