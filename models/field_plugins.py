"""Plug-in fields: the entry-point group `topdrift.fields`, read without importing numba.

A plug-in field is an object at an entry point of that group (docs/fields.md has the contract
and a worked example). topdrift gives each entry point a field code, 2, 3, ... in the order of
the names (0 and 1 are uniform gravity and the gravity gradient), and writes a small dispatch
module (`dispatch_source`) that the compiled kernels call through, since a compiled kernel
cannot call Python: models/plugin_dispatch.py imports it. The digest of the kernel cache
(kernel_cache.py) takes that module's text and the plug-ins' source files in, so that
installing, removing or editing a plug-in compiles the kernels again instead of reusing machine
code that called another plug-in.

This module is read by kernel_cache.py before any kernel is decorated: it imports nothing of
numba, and it finds the plug-ins' files without importing them (importlib.util.find_spec on the
top-level name only).
"""

from __future__ import annotations

import importlib.util
import math
from functools import cache, lru_cache
from importlib.metadata import entry_points
from pathlib import Path

GROUP = "topdrift.fields"
FIRST_CODE = 2  # after uniform gravity (0) and the gravity gradient (1)
BUILT_IN_KINDS = ("uniform-gravity", "gravity-gradient")
N_CONSTANTS = 8  # the generic parameter slots P_FIELD_C0.. (models/body.py)
INVARIANT_CHOICES = frozenset({"p_phi", "p_psi"})
REQUIRED = ("name", "description", "keys", "params", "torque", "conservative", "keeps")


class PluginFieldError(ValueError):
    """A plug-in field that breaks the contract; the message names the plug-in and what."""


@lru_cache(maxsize=1)
def discovered() -> tuple[tuple[str, str], ...]:
    """(name, "module:attribute") of every entry point of the group, sorted by name; a name a
    built-in field has, or one given twice, is left out (loaded() says why)."""
    seen: dict[str, str] = {}
    for ep in sorted(entry_points(group=GROUP), key=lambda e: (e.name, e.value)):
        if ep.name in BUILT_IN_KINDS or ep.name in seen:
            continue
        seen[ep.name] = ep.value
    return tuple(seen.items())


def codes() -> dict[str, int]:
    """Field code of each plug-in field by name."""
    return {name: FIRST_CODE + i for i, (name, _) in enumerate(discovered())}


def names() -> tuple[str, ...]:
    return tuple(name for name, _ in discovered())


def _module_files(module: str) -> list[Path]:
    """The .py files of the plug-in's top-level package (or its one module), found without
    importing it: a change in any of them may change machine code a kernel inlines."""
    try:
        spec = importlib.util.find_spec(module.split(".")[0])
    except (ImportError, ValueError):
        return []
    if spec is None:
        return []
    if spec.submodule_search_locations:
        files = []
        for loc in spec.submodule_search_locations:
            files += sorted(Path(loc).rglob("*.py"))
        return files
    return [Path(spec.origin)] if spec.origin and spec.origin.endswith(".py") else []


def source_digest_bytes() -> bytes:
    """What the kernel-cache digest takes in for the plug-ins: the dispatch module's text and
    the names and contents of the plug-ins' source files."""
    parts = [dispatch_source().encode()]
    for name, value in discovered():
        for path in _module_files(value.partition(":")[0]):
            try:
                parts += [name.encode(), str(path).encode(), path.read_bytes()]
            except OSError:
                parts.append(f"{name}: unreadable {path}".encode())
    return b"\0".join(parts)


def dispatch_source() -> str:
    """The text of the dispatch module: one branch per plug-in field on p[P_FIELD]; with no
    plug-ins, zero torque and zero potential (never called: no field code reaches them)."""
    lines = [
        '"""Written by topdrift.models.plugin_dispatch from the topdrift.fields entry points:',
        'do not edit (its text is part of the kernel-cache digest)."""',
        "",
        "from numba import njit",
        "",
        "from topdrift.models.body import P_FIELD",
        "from topdrift.models.field_plugins import loaded_or_none",
        "",
        "",
        "@njit(cache=True)",
        "def no_torque(p, q0, q1, q2, q3, m1, m2, m3):",
        "    return 0.0, 0.0, 0.0",
        "",
        "",
        "@njit(cache=True)",
        "def no_potential(p, q0, q1, q2, q3):",
        "    return 0.0",
        "",
        "",
    ]
    for i, (name, _) in enumerate(discovered()):
        lines += [
            f"_plugin_{i} = loaded_or_none({name!r})",
            f"_torque_{i} = no_torque if _plugin_{i} is None else _plugin_{i}.torque",
            f"_potential_{i} = (",
            f"    no_potential if _plugin_{i} is None or _plugin_{i}.potential is None",
            f"    else _plugin_{i}.potential",
            ")",
        ]
    lines += ["", "", '@njit(cache=True, inline="always")']
    lines.append("def plugin_torque(p, q0, q1, q2, q3, m1, m2, m3):")
    lines.append("    code = p[P_FIELD]")
    for i, _ in enumerate(discovered()):
        lines += [
            f"    if code == {float(FIRST_CODE + i)!r}:",
            f"        return _torque_{i}(p, q0, q1, q2, q3, m1, m2, m3)",
        ]
    lines += ["    return 0.0, 0.0, 0.0", "", "", '@njit(cache=True, inline="always")']
    lines.append("def plugin_potential(p, q0, q1, q2, q3):")
    lines.append("    code = p[P_FIELD]")
    for i, _ in enumerate(discovered()):
        lines += [
            f"    if code == {float(FIRST_CODE + i)!r}:",
            f"        return _potential_{i}(p, q0, q1, q2, q3)",
        ]
    lines += ["    return 0.0", ""]
    return "\n".join(lines)


_LOAD_ERRORS: dict[str, str] = {}


def _check(name: str, obj) -> None:
    missing = [a for a in REQUIRED if not hasattr(obj, a)]
    if missing:
        raise PluginFieldError(f"field plug-in {name!r}: lacks {', '.join(missing)}")
    if obj.name != name:
        raise PluginFieldError(
            f"field plug-in {name!r}: its name is {obj.name!r}, the entry point's is {name!r}"
        )
    if not isinstance(obj.keys, dict) or not all(isinstance(k, str) for k in obj.keys):
        raise PluginFieldError(f"field plug-in {name!r}: keys must be a dict of TOML key names")
    if "kind" in obj.keys:
        raise PluginFieldError(f"field plug-in {name!r}: 'kind' is topdrift's key, not a field's")
    if not isinstance(obj.conservative, bool):
        raise PluginFieldError(f"field plug-in {name!r}: conservative must be True or False")
    if obj.conservative and getattr(obj, "potential", None) is None:
        raise PluginFieldError(f"field plug-in {name!r}: a conservative field needs a potential")


@cache
def loaded_or_none(name: str):
    """The plug-in object of that name, checked against the contract, or None when it cannot be
    loaded or breaks the contract (load_error says why): one broken plug-in must not stop
    topdrift, only the cases that name it."""
    value = dict(discovered()).get(name)
    if value is None:
        _LOAD_ERRORS[name] = f"no entry point {name!r} in group {GROUP}"
        return None
    try:
        obj = next(e for e in entry_points(group=GROUP) if e.name == name).load()
        _check(name, obj)
    except PluginFieldError as exc:
        _LOAD_ERRORS[name] = str(exc)
        return None
    except Exception as exc:  # any import-time failure of a third party's package
        _LOAD_ERRORS[name] = f"field plug-in {name!r} ({value}) failed to load: {exc}"
        return None
    return obj


def load(name: str):
    """The plug-in object, or PluginFieldError with the reason it cannot be used."""
    obj = loaded_or_none(name)
    if obj is None:
        raise PluginFieldError(_LOAD_ERRORS.get(name, f"field plug-in {name!r}: not loaded"))
    return obj


def constants_of(name: str, table: dict) -> tuple[float, ...]:
    """The plug-in's params(table) checked: a tuple of at most N_CONSTANTS finite floats.
    Raises PluginFieldError (the plug-in is at fault) or lets its own ValueError through (the
    table is: its message names the key)."""
    obj = load(name)
    unknown = sorted(set(table) - set(obj.keys))
    if unknown:
        allowed = ", ".join(sorted(obj.keys)) or "none"
        raise ValueError(f"{unknown[0]}: not a key of the {name} field (its keys: {allowed})")
    values = obj.params(dict(table))
    try:
        values = tuple(float(v) for v in values)
    except (TypeError, ValueError) as exc:
        raise PluginFieldError(f"field plug-in {name!r}: params gave no floats ({exc})") from None
    if len(values) > N_CONSTANTS:
        raise PluginFieldError(
            f"field plug-in {name!r}: {len(values)} constants, at most {N_CONSTANTS} slots"
        )
    if not all(math.isfinite(v) for v in values):
        raise PluginFieldError(f"field plug-in {name!r}: params gave a constant not finite")
    return values


def kept_invariants(name: str, constants: tuple[float, ...]) -> frozenset[str]:
    """Which of p_phi and p_psi the field leaves invariant with these constants (energy is kept
    exactly when the field is conservative)."""
    obj = load(name)
    keeps = obj.keeps(constants) if callable(obj.keeps) else obj.keeps
    keeps = frozenset(keeps)
    if not keeps <= INVARIANT_CHOICES:
        bad = ", ".join(sorted(keeps - INVARIANT_CHOICES))
        raise PluginFieldError(f"field plug-in {name!r}: keeps names {bad}; choose p_phi, p_psi")
    return keeps


class PluginField:
    """A convenient holder of the contract (a plug-in may publish any object with these
    attributes): name, description, keys {TOML key: what it is, with its SI unit}, params(table)
    -> tuple of floats (raise ValueError "key: what is wrong"), torque and potential (compiled
    numba functions, potential None for a field that is no gradient), conservative, keeps (a
    set of "p_phi", "p_psi", or a function of the constants giving one)."""

    def __init__(self, name, description, keys, params, torque, potential, conservative, keeps=()):
        self.name = name
        self.description = description
        self.keys = dict(keys)
        self.params = params
        self.torque = torque
        self.potential = potential
        self.conservative = conservative
        self.keeps = keeps if callable(keeps) else frozenset(keeps)
