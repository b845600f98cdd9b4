"""Every method under its short name: the built-in families, then outside methods that plug in
through the entry-point group `topdrift.integrators` (or call `register`)."""

from __future__ import annotations

import importlib
import sys
from importlib.metadata import entry_points

from .base import Method, MethodInfo

ENTRY_POINT_GROUP = "topdrift.integrators"

# Each module defines METHODS, a list of Method instances.
_BUILTIN_MODULES = (
    "topdrift.integrators.rk.fixed",
    "topdrift.integrators.rk.adaptive",
    "topdrift.integrators.splitting.methods",
    "topdrift.integrators.gauss.methods",
    "topdrift.integrators.reference.scipy_methods",
)

_methods: dict[str, Method] = {}
_loaded = False


class UnknownMethod(KeyError):
    def __str__(self) -> str:  # KeyError quotes its message; a user wants the sentence
        return str(self.args[0])


def register(method: Method, *, replace: bool = False) -> Method:
    if not isinstance(method, Method) or not isinstance(getattr(method, "info", None), MethodInfo):
        raise TypeError(f"not a topdrift Method: {method!r}")
    name = method.info.name
    if name in _methods and not replace and _methods[name] is not method:
        raise ValueError(f"a method named {name!r} is registered already")
    _methods[name] = method
    return method


def unregister(name: str) -> Method | None:
    """Take the method registered under `name` out of the registry (a script's or a test's own
    method, registered for a while); returns it, or None when the name held none."""
    _ensure_loaded()
    return _methods.pop(name, None)


def _load_plugins() -> None:
    for ep in entry_points(group=ENTRY_POINT_GROUP):
        try:
            obj = ep.load()
            if callable(obj) and not isinstance(obj, Method):
                obj = obj()
            items = [obj] if isinstance(obj, Method) else list(obj)
            for m in items:
                register(m)
        except Exception as exc:  # a broken plug-in must not take the built-in methods down
            print(
                f"topdrift: warning: plug-in {ep.name!r} ({ep.value}) not loaded: {exc}",
                file=sys.stderr,
            )


def _ensure_loaded() -> None:
    global _loaded
    if _loaded:
        return
    _loaded = True
    for modname in _BUILTIN_MODULES:
        for m in importlib.import_module(modname).METHODS:
            register(m)
    _load_plugins()


def all_methods() -> list[Method]:
    _ensure_loaded()
    return list(_methods.values())


def get(name: str) -> Method:
    _ensure_loaded()
    try:
        return _methods[name]
    except KeyError:
        known = ", ".join(sorted(_methods))
        raise UnknownMethod(f"unknown method {name!r}; known methods: {known}") from None
