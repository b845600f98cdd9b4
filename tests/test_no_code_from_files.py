"""No module of the project can turn file contents into code: a scan of the syntax trees (ast, not
text search) of every module under models/, integrators/ and benchmarks/.

Refused: importing a deserialiser that builds arbitrary objects (pickle and its relatives,
marshal, shelve), calling eval, exec, compile or __import__, and passing allow_pickle anything but
False (numpy.load). Imports by a computed name are allowed only where the names come from the
module's own constants (the command modules, the built-in method families); entry-point
plug-ins are installed packages, named by their distribution's metadata, not by a file a user
is handed. A sweep on a Dask cluster moves work with Dask's own transport (pickle by design,
see the README); no module here calls it directly.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
PACKAGES = ("models", "integrators", "benchmarks")

DESERIALISERS = {"pickle", "_pickle", "cPickle", "marshal", "shelve", "dill", "cloudpickle"}
DESERIALISERS |= {"joblib", "copyreg", "jsonpickle"}
CODE_BUILTINS = {"eval", "exec", "compile", "__import__"}

# (file, the constant its computed import names come from): reviewed call sites.
COMPUTED_IMPORTS = {
    "benchmarks/cli/entry.py": "COMMANDS",
    "integrators/registry.py": "_BUILTIN_MODULES",
}


def modules() -> list[Path]:
    out = sorted(p for pkg in PACKAGES for p in (ROOT / pkg).rglob("*.py"))
    assert len(out) > 50  # the scan sees the project, not an empty folder
    return out


def problems(path: Path) -> list[str]:
    tree = ast.parse(path.read_text(), filename=str(path))
    rel = path.relative_to(ROOT).as_posix()
    found = []
    for node in ast.walk(tree):
        where = f"{rel}:{getattr(node, 'lineno', '?')}"
        if isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.split(".")[0] in DESERIALISERS:
                    found.append(f"{where}: imports {alias.name}")
        elif isinstance(node, ast.ImportFrom):
            if (node.module or "").split(".")[0] in DESERIALISERS:
                found.append(f"{where}: imports from {node.module}")
        elif isinstance(node, ast.Call):
            f = node.func
            name = (
                f.id if isinstance(f, ast.Name) else f.attr if isinstance(f, ast.Attribute) else ""
            )
            if isinstance(f, ast.Name) and name in CODE_BUILTINS:
                found.append(f"{where}: calls {name}")
            if isinstance(f, ast.Attribute) and name in CODE_BUILTINS:
                base = f.value.id if isinstance(f.value, ast.Name) else ""
                if base in ("builtins", "__builtins__"):
                    found.append(f"{where}: calls {base}.{name}")
            for kw in node.keywords:
                if kw.arg == "allow_pickle" and not (
                    isinstance(kw.value, ast.Constant) and kw.value.value is False
                ):
                    found.append(f"{where}: allow_pickle={ast.unparse(kw.value)}")
            if name == "import_module" and COMPUTED_IMPORTS.get(rel) is None:
                found.append(f"{where}: import_module outside the reviewed call sites")
    return found


@pytest.mark.parametrize("path", modules(), ids=lambda p: p.relative_to(ROOT).as_posix())
def test_no_module_turns_file_contents_into_code(path):
    assert problems(path) == []


def test_computed_imports_take_their_names_from_module_constants():
    for rel, constant in COMPUTED_IMPORTS.items():
        tree = ast.parse((ROOT / rel).read_text())
        consts = {
            t.id: node.value
            for node in tree.body
            if isinstance(node, ast.Assign)
            for t in node.targets
            if isinstance(t, ast.Name)
        }
        value = consts.get(constant)
        assert isinstance(value, ast.Tuple), (rel, constant)
        assert all(isinstance(e, ast.Constant) and isinstance(e.value, str) for e in value.elts)
        # Each import_module call sits in a loop over that constant.
        loops = [
            n
            for n in ast.walk(tree)
            if isinstance(n, ast.For) and isinstance(n.iter, ast.Name) and n.iter.id == constant
        ]
        calls = [
            c
            for c in ast.walk(tree)
            if isinstance(c, ast.Call)
            and isinstance(c.func, ast.Attribute)
            and c.func.attr == "import_module"
        ]
        assert calls, rel
        in_loops = {id(c) for loop in loops for c in ast.walk(loop)}
        assert all(id(c) in in_loops for c in calls), rel


def test_the_scan_finds_what_it_looks_for(tmp_path):
    # The scan itself can fail: each refused construct, written into a module, is reported.
    bad = tmp_path / "models" / "bad.py"
    bad.parent.mkdir()
    bad.write_text(
        "import pickle\nfrom marshal import loads\nimport numpy as np\n"
        "x = eval('1')\nexec('y = 2')\nnp.load('f.npy', allow_pickle=True)\n"
        "import importlib\nimportlib.import_module(x)\n__import__('os')\n"
    )
    import test_no_code_from_files as scan

    old = scan.ROOT
    scan.ROOT = tmp_path
    try:
        found = scan.problems(bad)
    finally:
        scan.ROOT = old
    assert len(found) == 7, found
