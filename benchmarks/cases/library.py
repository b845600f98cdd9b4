"""The case library shipped with topdrift (benchmarks/cases/*.toml), and finding a case by name
or path: a path that exists wins, otherwise the name of a library case."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from topdrift.benchmarks.cases.schema import Case, read_case
from topdrift.benchmarks.errors import UserError

DEMO_CASE = "demo-wheel"


def library_dir() -> Path:
    return Path(str(resources.files("topdrift.benchmarks") / "cases"))


def library_paths() -> dict[str, Path]:
    """Library case name (the file's stem) -> path, sorted by name."""
    folder = library_dir()
    if not folder.is_dir():
        return {}
    return {p.stem: p for p in sorted(folder.glob("*.toml"))}


def find_case(spec: str) -> tuple[Path, str]:
    """(path, label for messages) of a case given as a path or a library name."""
    path = Path(spec)
    if path.is_file():
        return path, spec
    known = library_paths()
    name = spec[:-5] if spec.endswith(".toml") and "/" not in spec else spec
    if name in known:
        return known[name], known[name].name
    listing = ", ".join(known) or "(none installed)"
    if path.exists():
        raise UserError(f"{spec}: not a file")
    raise UserError(f"{spec}: no such file and no library case of that name; known: {listing}")


def load_case(spec: str) -> Case:
    path, label = find_case(spec)
    return read_case(path, label)


def library_cases() -> list[Case]:
    return [read_case(p, p.name) for p in library_paths().values()]
