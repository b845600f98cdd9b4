"""The compiled side of the plug-in fields: the dispatch module that field_plugins.py writes,
imported from the kernel-cache folder of this code and these plug-ins, and its two functions
re-exported for models/fields.py:

    plugin_torque(p, q0, q1, q2, q3, m1, m2, m3) -> (t1, t2, t3)   body axes
    plugin_potential(p, q0, q1, q2, q3) -> V

each branching on p[P_FIELD] to the plug-in of that code. The module is a file (not built in
memory) because numba caches a kernel by its source file; its folder is the kernel-cache folder,
whose name is a digest that includes its text, so a file there never changes once written.
"""

from __future__ import annotations

import importlib.util
import os
import sys
import tempfile
from pathlib import Path

from . import kernel_cache
from .field_plugins import dispatch_source

MODULE_NAME = "topdrift_plugin_fields_dispatch"
FILE_NAME = "plugin_fields_dispatch.py"


def _folder() -> Path:
    if kernel_cache.FOLDER is not None:
        return kernel_cache.FOLDER
    # the cache switched off or unwritable: a folder of its own, named by the same digest
    return Path(tempfile.gettempdir()) / f"topdrift-fields-{kernel_cache.kernel_digest()}"


def _write(path: Path, text: str) -> None:
    """Write text unless the file already holds it; atomically, since sweep workers may start
    together."""
    try:
        if path.read_text() == text:
            return
    except OSError:
        pass
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=".dispatch-", suffix=".py")
    with os.fdopen(fd, "w") as f:
        f.write(text)
    os.replace(tmp, path)


def _import():
    if MODULE_NAME in sys.modules:
        return sys.modules[MODULE_NAME]
    path = _folder() / FILE_NAME
    _write(path, dispatch_source())
    spec = importlib.util.spec_from_file_location(MODULE_NAME, path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[MODULE_NAME] = module
    spec.loader.exec_module(module)
    return module


_dispatch = _import()
plugin_torque = _dispatch.plugin_torque
plugin_potential = _dispatch.plugin_potential
DISPATCH_PATH = Path(_dispatch.__file__)
