"""Snapshots are numbers with named fields, and restore() takes back only what its stepper
writes.

Every built-in method's snapshot holds float64 and int64 numbers and arrays and short texts
only, with the same names, kinds and shapes fresh as after any number of steps (the run-file
reader takes a fresh stepper's snapshot as the template of what it may read); restore() refuses
what differs (validation.check_snapshot), and a status that is not one.
The scipy references: the whitelist of solver state (integrators/reference/scipy_methods.py)
covers every attribute the installed scipy's RK45, DOP853 and Radau hold; a scipy that held more
would not be resumed; Radau's LAPACK pivots are range-checked; LSODA is never resumed.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from tiny_cases import TOP_TOML
from tiny_cases import write_case as write

from topdrift.benchmarks.cases.schema import parse_case
from topdrift.benchmarks.cli import entry as cli
from topdrift.benchmarks.run import runner
from topdrift.benchmarks.store.checkpoint import entry_layout
from topdrift.integrators import (
    STATUS_NAMES,
    Method,
    MethodRefused,
    Stepper,
    all_methods,
    get,
    validation,
)
from topdrift.integrators.reference import scipy_methods
from topdrift.models import FORM_BODY, FORM_EULER, RigidBody, body_state, euler_state

LAGRANGE = RigidBody(mass=1.0, inertia=(1.0, 1.0, 0.6), com=(0.0, 0.0, 0.1))
START = (0.0, 0.6, 0.0, 0.3, 0.5, 5.0)
BUILTIN_FAMILIES = (
    "explicit-rk",
    "adaptive-rk",
    "splitting",
    "gauss-legendre",
    "first-order-engine",
    "taylor",
    "extrapolation",
    "lie-group-rk",
    "constrained",
    "generalized-alpha",
    "reference",
)


def started(method, form):
    y0 = euler_state(LAGRANGE, *START) if form == FORM_EULER else body_state(LAGRANGE, *START)
    s = {"step": 0.01} if method.info.control == "step" else {"rtol": 1e-7, "atol": 1e-10}
    return method.start(form, LAGRANGE.params(), 0.0, y0, s)


BUILTIN = [m for m in all_methods() if m.info.family in BUILTIN_FAMILIES]


@pytest.mark.parametrize(
    "method,form",
    [
        (m, code)
        for m in BUILTIN
        for code, name in ((FORM_EULER, "euler"), (FORM_BODY, "body"))
        if name in m.info.forms  # the engine schemes run in the body form only
    ],
    ids=lambda x: x.name if hasattr(x, "name") else ("euler", "body")[x],
)
def test_snapshots_are_numbers_of_fixed_layout(method, form):
    st = started(method, form)
    fresh = {k: entry_layout(v) for k, v in st.snapshot().items()}
    for t in (0.05, 0.37, 1.0):
        st.advance_to(t)  # on the 0.01 step grid
        snap = st.snapshot()
        assert {k: entry_layout(v) for k, v in snap.items()} == fresh
        if not method.resume_refusal():  # LSODA refuses every snapshot (tested below)
            started(method, form).restore(snap)  # its own snapshot passes


def test_the_status_codes_are_the_contracts():
    assert validation.STATUS_CODES == len(STATUS_NAMES)


def _one_stepper(name="leapfrog"):
    return started(get(name), FORM_BODY)


@pytest.mark.parametrize(
    ("change", "words"),
    [
        (lambda s: s.update(y=s["y"].astype(np.float32)), "dtype float32"),
        (lambda s: s.update(y=np.append(s["y"], 1.0)), "shape"),
        (lambda s: s.update(y=np.array(list(s["y"]), dtype=object)), "dtype object"),
        (lambda s: s.update(t="0.5"), "'t' must be a float"),
        (lambda s: s.update(status=True), "'status' must be an int"),
        (lambda s: s.update(status=17), "no status"),
        (lambda s: s.pop("counters"), "no field 'counters'"),
        (lambda s: s.update(solver_state=np.zeros(3, dtype=np.uint8)), "'solver_state'"),
        (lambda s: s.update(y=np.full(7, np.inf)), "'y' is not finite"),
        (lambda s: s.update(method="leapfrog-s4"), "of method 'leapfrog-s4'"),
    ],
)
def test_restore_refuses_what_the_stepper_does_not_write(change, words):
    st = _one_stepper()
    st.advance_to(0.1)
    snap = st.snapshot()
    change(snap)
    fresh = _one_stepper()
    before = fresh.snapshot()
    with pytest.raises(MethodRefused, match=words):
        fresh.restore(snap)
    after = fresh.snapshot()  # a refused restore changes nothing
    assert before.keys() == after.keys()
    for k in before:  # bit for bit, NaN (t_fail while ok) included
        a, b = np.asarray(before[k]), np.asarray(after[k])
        assert a.dtype == b.dtype and a.tobytes() == b.tobytes(), k


@pytest.mark.parametrize("class_name", ["RK45", "DOP853", "Radau"])
def test_the_whitelist_is_the_installed_scipys_whole_state(class_name):
    # Every attribute a stepped solver holds is either whitelisted state or set by the
    # constructor from the settings, and every whitelisted one exists.
    assert scipy_methods.unknown_state(class_name) == ""


def test_a_scipy_that_holds_more_state_is_not_resumed(tmp_path, capsys, monkeypatch):
    # As if a scipy release had added an attribute that topdrift does not know: the method says
    # why it cannot resume, and the command runs the interrupted run again from the start.
    fixed = dict(scipy_methods.FIXED)
    fixed["RK45"] = tuple(a for a in fixed["RK45"] if a != "error_exponent")
    monkeypatch.setattr(scipy_methods, "FIXED", fixed)
    monkeypatch.setattr(scipy_methods, "_unknown_state", {})
    why = get("scipy-rk45").resume_refusal()
    assert "error_exponent" in why
    st = started(get("scipy-rk45"), FORM_BODY)
    st.advance_to(0.2)
    with pytest.raises(MethodRefused, match="cannot resume"):
        started(get("scipy-rk45"), FORM_BODY).restore(st.snapshot())
    case = write(tmp_path, "top.toml", TOP_TOML)
    out = tmp_path / "r.h5"
    args = ["run", str(case), "--method", "scipy-rk45", "--rtol", "1e-6", "--out", str(out)]
    plan = runner.plan_run(parse_case(case.read_text(), str(case)), "scipy-rk45", rtol=1e-6)
    from test_crafted_checkpoint import _StopAt

    stop = runner.StopFlag()
    from topdrift.benchmarks.store.writer import open_writer

    f = open_writer(out)
    try:
        runner.execute(plan, f, stop=stop, progress=_StopAt(stop, 4), flush_every=0.0)
    finally:
        f.close()
    capsys.readouterr()
    assert cli.main([*args, "--resume"]) == 0
    err = capsys.readouterr().err
    assert "not resumed" in err and "error_exponent" in err and "from the start" in err


def _radau_snapshot():
    st = started(get("scipy-radau"), FORM_BODY)
    st.advance_to(0.3)
    snap = st.snapshot()
    assert snap["solver_LU_real_set"] == 1  # the factors are part of this state
    return snap


@pytest.mark.parametrize("bad", [7, -1, 10**8])
def test_radau_pivots_outside_the_matrix_are_refused(bad):
    # scipy's lu_solve passes pivots to LAPACK unchecked; one out of range writes outside the
    # matrix (measured: heap corruption for 7 on a 7x7, a crash for 1e8).
    snap = _radau_snapshot()
    piv = snap["solver_LU_real_piv"].copy()
    piv[3] = bad
    snap["solver_LU_real_piv"] = piv
    with pytest.raises(MethodRefused, match="pivots outside the matrix"):
        started(get("scipy-radau"), FORM_BODY).restore(snap)


def test_radau_inconsistent_times_are_refused():
    snap = _radau_snapshot()
    snap["solver_t_old"] = snap["solver_t"] + 1.0  # a last step that ends before it starts
    with pytest.raises(MethodRefused, match="consistent"):
        started(get("scipy-radau"), FORM_BODY).restore(snap)


def test_lsoda_is_never_resumed():
    st = started(get("scipy-lsoda"), FORM_BODY)
    st.advance_to(0.3)
    snap = st.snapshot()
    assert not any(k.startswith("solver_") for k in snap)  # its C state is never written
    assert "LSODA" in get("scipy-lsoda").resume_refusal()
    with pytest.raises(MethodRefused, match="cannot resume"):
        started(get("scipy-lsoda"), FORM_BODY).restore(snap)


@dataclasses.dataclass
class _Labelled(Stepper):
    def advance_to(self, t_end):
        self.t = t_end
        return 0

    def snapshot(self):
        return {"t": self.t, "y": self.y.copy(), "label": ["a", "list"]}

    def restore(self, snap):
        pass


class _LabelledMethod(Method):
    info = get("leapfrog").info

    def start(self, form, params, t0, y0, settings):
        return _Labelled(form, params, t0, np.array(y0, dtype=float))


def test_a_method_whose_snapshot_holds_an_object_is_refused_up_front(tmp_path):
    # A checkpoint holds numbers, arrays of them and short texts; a plug-in whose snapshot holds
    # anything else is refused when the run is planned, before any file is touched.
    case = write(tmp_path, "top.toml", TOP_TOML)
    plan = runner.plan_run(parse_case(case.read_text(), str(case)), "leapfrog", step=0.01)
    odd = dataclasses.replace(plan, method=_LabelledMethod())
    with pytest.raises(MethodRefused, match="snapshot entry 'label'.* not a list"):
        runner.warm_up(odd)
