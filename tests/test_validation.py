"""One validation for every family (integrators/validation.py): the same settings are refused the
same way by every built-in method, and a snapshot restores only into the method, form and
settings that made it, with every field checked."""

import numpy as np
import pytest

from topdrift.integrators import MethodRefused, SnapshotRefused, all_methods, get
from topdrift.integrators.validation import (
    Setting,
    check_settings,
    check_snapshot,
    snapshot_identity,
)
from topdrift.models import FORM_BODY, FORM_EULER, RigidBody, body_state

TOP = RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1))
Y0 = body_state(TOP, 0.3, 0.9, 0.2, 1.0, 0.5, 20.0)
BUILTIN = [m for m in all_methods() if m.info.family != "external"]


def good(m) -> dict:
    return {"step": 1e-3} if m.info.control == "step" else {"rtol": 1e-6, "atol": 1e-9}


def key(m) -> str:
    return "step" if m.info.control == "step" else "rtol"


@pytest.mark.parametrize("m", BUILTIN, ids=lambda m: m.name)
@pytest.mark.parametrize(
    "value,match",
    [
        (1, "must be a float, got int 1 \\(write 1.0"),
        (True, "must be a float, got bool"),
        ("1e-3", "must be a float, got str"),
        (-1e-3, "must be positive"),
        (0.0, "must be positive"),
        (float("nan"), "must be finite"),
        (float("inf"), "must be finite"),
        (None, "needs the setting"),
    ],
)
def test_every_family_refuses_a_bad_value_alike(m, value, match):
    settings = good(m)
    settings[key(m)] = value
    if value is None:
        del settings[key(m)]
    with pytest.raises(MethodRefused, match=f"{m.name}: .*{match}"):
        m.start(FORM_BODY, TOP.params(), 0.0, Y0, settings)
    with pytest.raises(MethodRefused, match=match):
        m.check(TOP, "body", settings)


@pytest.mark.parametrize("m", BUILTIN, ids=lambda m: m.name)
def test_every_family_names_an_unknown_key(m):
    settings = dict(good(m), stepsize=1e-3)
    with pytest.raises(MethodRefused, match="unknown setting 'stepsize'"):
        m.start(FORM_BODY, TOP.params(), 0.0, Y0, settings)


def test_counts_and_floors():
    with pytest.raises(MethodRefused, match="must be an integer, got float"):
        get("gauss4").start(FORM_BODY, TOP.params(), 0.0, Y0, {"step": 1e-3, "max_iterations": 5.0})
    with pytest.raises(MethodRefused, match="at least 2"):
        get("gauss4").start(FORM_BODY, TOP.params(), 0.0, Y0, {"step": 1e-3, "max_iterations": 1})
    spec = (Setting("x"), Setting("n", kind="count", required=False, default=3))
    assert check_settings("m", {"x": np.float32(0.5)}, spec) == {"x": 0.5, "n": 3}
    with pytest.raises(MethodRefused, match="mapping"):
        check_settings("m", [("x", 0.5)], spec)


# --- snapshots ------------------------------------------------------------------------------


def stepped(name, settings=None, form=FORM_BODY):
    m = get(name)
    st = m.start(form, TOP.params(), 0.0, Y0 if form == FORM_BODY else euler(), settings or good(m))
    assert st.advance_to(0.01) == 0
    return st


def euler():
    from topdrift.models import euler_state

    return euler_state(TOP, 0.3, 0.9, 0.2, 1.0, 0.5, 20.0)


# The steppers this branch checks itself (the scipy references' snapshot is rewritten elsewhere).
OURS = ["rk4", "rk4-kahan", "rk45", "dop853", "leapfrog", "leapfrog-kl8-kahan", "gauss4"]


def test_a_leapfrog_snapshot_is_refused_by_another_composition():
    snap = stepped("leapfrog").snapshot()
    with pytest.raises(SnapshotRefused, match="of method 'leapfrog', not of this stepper"):
        get("leapfrog-kl8").start(FORM_BODY, TOP.params(), 0.0, Y0, {"step": 1e-3}).restore(snap)
    with pytest.raises(SnapshotRefused, match="step = 0.001 there, 0.002 in this stepper"):
        get("leapfrog").start(FORM_BODY, TOP.params(), 0.0, Y0, {"step": 2e-3}).restore(snap)
    with pytest.raises(SnapshotRefused, match="state form"):
        stepped("leapfrog", form=FORM_EULER).restore(snap)


@pytest.mark.parametrize("name", OURS)
def test_damaged_snapshots_are_refused_and_change_nothing(name):
    st = stepped(name)
    snap = st.snapshot()
    other = stepped(name)
    other.advance_to(0.02)
    before = other.snapshot()
    array = next(k for k, v in snap.items() if isinstance(v, np.ndarray) and v.dtype == float)
    damaged = {
        "missing": {k: v for k, v in snap.items() if k != "t"},
        "extra": dict(snap, surprise=1.0),
        "dtype": dict(snap, **{array: snap[array].astype(np.float32)}),
        "shape": dict(snap, **{array: np.append(snap[array], 0.0)}),
        "nan": dict(snap, **{array: np.full_like(snap[array], np.nan)}),
        "inf t": dict(snap, t=float("inf")),
        "int as float": dict(snap, status=0.0),
        "bool": dict(snap, status=False),
        "not a snapshot": [1, 2],
    }
    for what, bad in damaged.items():
        with pytest.raises(SnapshotRefused, match="snapshot"):
            other.restore(bad)
        after = other.snapshot()
        for k in before:
            same = before[k] == after[k] if isinstance(before[k], str) else None
            if same is None:
                same = np.array_equal(np.asarray(before[k]), np.asarray(after[k]), equal_nan=True)
            assert same, (what, k)
    other.restore(snap)  # the undamaged one is taken
    assert other.t == st.t and np.array_equal(other.y, st.y)


def test_check_snapshot_fields_and_identity():
    settings = {"step": 0.5}
    snap = dict(snapshot_identity("m", 1, settings), t=1.0, a=np.zeros(2), n=3)
    fields = {"t": (float, ()), "a": (np.float64, (2,)), "n": (int, ())}
    check_snapshot(snap, method="m", form=1, settings=settings, fields=fields)
    with pytest.raises(SnapshotRefused, match="settings"):
        check_snapshot(snap, method="m", form=1, settings={"step": 0.25}, fields=fields)
    with pytest.raises(SnapshotRefused, match="must be an int"):
        check_snapshot(dict(snap, n=3.0), method="m", form=1, settings=settings, fields=fields)
