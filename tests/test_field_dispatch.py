"""The compiled dispatch to plug-in fields (models/field_plugins.py, plugin_dispatch.py), in this
process, where no plug-in field is installed: its generated text, its zero torque, and the
kernel-cache digest that takes its text and the plug-ins' sources in (so that installing or
editing a plug-in compiles the kernels again, never reusing machine code that called another)."""

from __future__ import annotations

import numpy as np

from topdrift.models import RigidBody, field_plugins, kernel_cache
from topdrift.models.body import N_FIELD_CONSTANTS, NPARAM, P_FIELD, P_FIELD_C0
from topdrift.models.field_spec import Field, FieldError
from topdrift.models.plugin_dispatch import DISPATCH_PATH, plugin_potential, plugin_torque


def test_no_plugins_here_and_the_dispatch_is_the_file_written():
    assert field_plugins.names() == ()
    assert DISPATCH_PATH.read_text() == field_plugins.dispatch_source()
    assert DISPATCH_PATH.parent.name.endswith(kernel_cache.kernel_digest())
    p = RigidBody(mass=1.0, inertia=(1.0, 1.0, 0.5), com=(0.0, 0.0, 0.1)).params()
    assert p.shape == (NPARAM,) and NPARAM == P_FIELD_C0 + N_FIELD_CONSTANTS
    assert np.all(p[P_FIELD_C0:] == 0.0)
    p[P_FIELD] = 2.0  # no plug-in has this code: the dispatch's fall-through
    assert plugin_torque(p, 1.0, 0.0, 0.0, 0.0, 1.0, 2.0, 3.0) == (0.0, 0.0, 0.0)
    assert plugin_potential(p, 1.0, 0.0, 0.0, 0.0) == 0.0


def test_an_installed_plugin_gets_a_branch_and_changes_the_digest(monkeypatch):
    before_text = field_plugins.dispatch_source()
    before = kernel_cache.kernel_digest()
    fake = (("a-field", "my_fields:A"), ("b-field", "my_fields:B"))
    monkeypatch.setattr(field_plugins, "discovered", lambda: fake)
    text = field_plugins.dispatch_source()
    assert text != before_text
    assert "if code == 2.0:" in text and "if code == 3.0:" in text  # by name: a then b
    assert "loaded_or_none('a-field')" in text
    assert field_plugins.codes() == {"a-field": 2, "b-field": 3}
    assert kernel_cache.kernel_digest() != before


def test_a_kind_nobody_provides_is_refused_naming_the_key():
    try:
        Field("magnetic-dipole")
    except FieldError as exc:
        assert str(exc).startswith("kind: ") and "magnetic-dipole" in str(exc)
    else:
        raise AssertionError("an unknown field kind was accepted")
