"""Every method under its short name: the built-in families, then outside methods that plug in
through the entry-point group `topdrift.integrators` (or call `register`)."""

from __future__ import annotations

import importlib
import sys
from importlib.metadata import entry_points

from .base import Method, MethodInfo

# The entry-point group a plug-in package publishes its methods under (docs/plugins.md): each
# entry point names a Method, a list of Methods, or a function returning either. Loaded once,
# after the built-in families, the first time the registry is asked for a method.
ENTRY_POINT_GROUP = "topdrift.integrators"

# Each module defines METHODS, a list of Method instances.
_BUILTIN_MODULES = (
    "topdrift.integrators.rk.fixed",
    "topdrift.integrators.rk.adaptive",
    "topdrift.integrators.splitting.methods",
    "topdrift.integrators.splitting.processed",
    "topdrift.integrators.splitting.sundman",
    "topdrift.integrators.splitting.sundman_sym",
    "topdrift.integrators.gauss.methods",
    "topdrift.integrators.engine.methods",
    "topdrift.integrators.taylor.methods",
    "topdrift.integrators.extrapolation.methods",
    "topdrift.integrators.liegroup.methods",
    "topdrift.integrators.constrained.methods",
    "topdrift.integrators.galpha.methods",
    "topdrift.integrators.reference.scipy_methods",
)

_methods: dict[str, Method] = {}
_builtin: set[str] = set()
# Where each plug-in method came from: (distribution name, version), taken from its entry point
# when it was loaded from one. Looked up lazily for methods passed to register() by hand.
_origins: dict[str, tuple[str | None, str | None]] = {}
_loaded = False


class UnknownMethod(KeyError):
    """No method of that name is registered; the message lists the known ones."""

    def __str__(self) -> str:  # KeyError quotes its message; a user wants the sentence
        return str(self.args[0])


def register(method: Method, *, replace: bool = False) -> Method:
    """Add `method` under its info.name, for this process, and return it. Refuses (TypeError)
    anything but a Method with a MethodInfo, and (ValueError) a name already taken by another
    method unless replace=True. Commands and sweeps then run it like a built-in method."""
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
            dist = getattr(ep, "dist", None)
            for m in items:
                register(m)
                if dist is not None:
                    _origins[m.info.name] = (dist.name, dist.version)
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
            _builtin.add(m.info.name)
    _load_plugins()


def origin(name: str) -> dict | None:
    """None for a built-in method; for a plug-in, {"package": distribution name, "version"}
    (either may be None when no installed distribution owns the method's module). A method
    that replaced a built-in one under its name counts as a plug-in."""
    m = get(name)
    if name in _builtin and type(m).__module__.startswith("topdrift."):
        return None
    if name not in _origins:
        _origins[name] = _owner(type(m).__module__)
    package, version = _origins[name]
    return {"package": package, "version": version}


def _owner(module: str) -> tuple[str | None, str | None]:
    from importlib.metadata import PackageNotFoundError, packages_distributions, version

    names = packages_distributions().get(module.split(".")[0]) or []
    for dist in names:
        try:
            return dist, version(dist)
        except PackageNotFoundError:
            continue
    return None, None


def all_methods() -> list[Method]:
    """Every registered method: the built-in families in their order, then the plug-ins, then
    those registered by hand. Loads the plug-ins the first time; a plug-in that fails to load is
    reported on stderr and left out."""
    _ensure_loaded()
    return list(_methods.values())


def get(name: str) -> Method:
    """The method registered under `name`; UnknownMethod (one line listing the known names)
    when there is none."""
    _ensure_loaded()
    try:
        return _methods[name]
    except KeyError:
        known = ", ".join(sorted(_methods))
        raise UnknownMethod(f"unknown method {name!r}; known methods: {known}") from None
