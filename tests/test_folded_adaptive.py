"""The adaptive Runge-Kutta pairs fold the Euler form's phi and psi after every accepted step
(integrators/rk/embedded_kernel.py, models/turns.py): p_phi and p_psi still bit-exact, the same
steps and trajectory as the unfolded variant to within that variant's rounding, folded angles in
the run file and its checkpoint, and a resume to the same bits."""

from __future__ import annotations

import math

import numpy as np
import pytest
from demo_bodies import FAST_START, FAST_TOP
from tiny_cases import top_toml

from topdrift.benchmarks.cases.schema import parse_case
from topdrift.benchmarks.run.runner import StopFlag, execute, plan_run
from topdrift.benchmarks.store import reader
from topdrift.benchmarks.store import writer as store
from topdrift.integrators import C_REJECTED, C_STEPS, ST_OK, get
from topdrift.models import FORM_EULER, euler_state

P = FAST_TOP.params()
# A fast top of tests/demo_bodies.py: psi turns about 24 times a second, phi about 0.3 times.
Y0 = euler_state(FAST_TOP, *FAST_START)
ADAPTIVE = ["rk45", "dop853"]
SETTINGS = {"rtol": 1e-10, "atol": 1e-13}


def _run(name: str, times, unfolded: bool, settings=SETTINGS):
    st = get(name).start(FORM_EULER, P, 0.0, Y0, dict(settings))
    if unfolded:
        st.keep_angles_unfolded()
    for t in times:
        assert st.advance_to(t) == ST_OK
    return st


@pytest.mark.parametrize("name", ADAPTIVE)
def test_folded_angles_and_bit_exact_momenta(name):
    st = _run(name, [2.0], unfolded=False)  # psi passes about 48 turns
    assert abs(st.yi[0]) <= math.pi and abs(st.yi[2]) <= math.pi
    assert st.turns[1] >= 40
    # p_phi and p_psi have a right-hand side of exactly 0.0, so neither the stages, the fold
    # nor the dense output writes them: the same bits (common practice for cyclic coordinates;
    # the methods' `keeps` claims, integrators/base.py).
    for y in (st.y, st.yi):
        assert y[3] == Y0[3] and y[5] == Y0[5]


@pytest.mark.parametrize("name", ADAPTIVE)
@pytest.mark.parametrize("horizon", [None, 1.0])
def test_same_steps_and_trajectory_as_unfolded_within_its_rounding(name, horizon):
    # The step control sees phi and psi with their turns put back, and the fold comes after the
    # error test: the folded run takes the unfolded run's steps, accepted and rejected, one for
    # one. A norm that saw the folded magnitudes (atol alone each time psi passes 0) or the
    # jumps of 2 pi would take other steps. The states then differ only by rounding: the
    # unfolded run rounds psi to ulp(psi) each step, the folded one to ulp(pi); at 40 output
    # times (dense output between the shifted ends of a step) within a few ulps of the
    # unfolded run's largest angle per step taken, the bound of its own rounding.
    settings = dict(SETTINGS) if horizon is None else {**SETTINGS, "horizon": horizon}
    times = np.linspace(0.0, 1.0, 41)[1:]
    a = get(name).start(FORM_EULER, P, 0.0, Y0, settings)
    b = get(name).start(FORM_EULER, P, 0.0, Y0, settings)
    b.keep_angles_unfolded()
    for t in times:
        assert a.advance_to(float(t)) == ST_OK and b.advance_to(float(t)) == ST_OK
        steps = int(b.counters[C_STEPS])
        bound = 4.0 * steps * np.spacing(np.abs(b.y).max())
        diff = np.abs(a.unfolded_y() - b.y)
        assert diff.max() <= bound, (t, diff, bound)
    assert b.turns.shape == (0,) and abs(b.y[2]) > 4 * math.pi  # really unfolded
    assert a.turns[1] >= 20 and abs(a.yi[2]) <= math.pi  # really folded
    assert a.counters[C_STEPS] == b.counters[C_STEPS]
    assert a.counters[C_REJECTED] == b.counters[C_REJECTED]
    assert a.counters[C_REJECTED] > 0  # the controller had decisions to take


@pytest.mark.parametrize("name", ADAPTIVE)
@pytest.mark.parametrize("unfolded", [False, True])
def test_snapshot_restore_continues_to_identical_bits(name, unfolded):
    # Mid-step (the dense coefficients and the shifted start of the step are part of the
    # state), after many turns were counted: the restored stepper repeats the bits.
    a = _run(name, [0.73], unfolded)
    snap = a.snapshot()
    assert snap["turns"].shape == ((0,) if unfolded else (2,))
    if not unfolded:
        assert snap["turns"][1] > 10
    ends = (1.0, 1.5, 2.25)
    for t in ends:
        a.advance_to(t)
    b = get(name).start(FORM_EULER, P, 0.0, Y0, dict(SETTINGS))
    if unfolded:
        b.keep_angles_unfolded()
    b.restore(snap)
    for t in ends:
        b.advance_to(t)
    for k in ("y", "yi", "yold", "dense", "ctrl", "counters", "turns"):
        assert np.array_equal(getattr(a, k), getattr(b, k)), k


@pytest.mark.parametrize("name", ADAPTIVE)
def test_an_unfolded_state_taken_back_is_folded_at_the_next_step(name):
    # What a version-1 checkpoint gives (docs/run-files.md): unfolded angles, no turns counted.
    # The first accepted step folds them by many turns at once, yold with them; from then on
    # the run follows the unfolded one within that run's own rounding, steps one for one.
    b = _run(name, [0.73], unfolded=True)
    snap = b.snapshot()
    snap["turns"] = np.zeros(2, dtype=np.int64)
    a = get(name).start(FORM_EULER, P, 0.0, Y0, dict(SETTINGS))
    a.restore(snap)
    assert abs(a.yi[2]) > 4 * math.pi
    for t in (1.0, 1.5, 2.25):
        assert a.advance_to(t) == ST_OK and b.advance_to(t) == ST_OK
        bound = 4.0 * int(b.counters[C_STEPS]) * np.spacing(np.abs(b.y).max())
        assert np.abs(a.unfolded_y() - b.y).max() <= bound, t
    assert abs(a.yi[2]) <= math.pi and a.turns[1] > 40
    assert a.counters[C_STEPS] == b.counters[C_STEPS]


# The runner's top of tests/test_runner.py, in the Euler form: psi passes 300 rpm.
TOP_TOML = top_toml(
    "folded-rk-top",
    "a heavy symmetric top for the folded adaptive runs",
    horizon=2.0,
    samples=41,
    phi=0.3,
    psi=-0.2,
    theta_rate=0.5,
    psi_rate="300 rpm",
)


class StopAfter(StopFlag):
    """Asks to stop after a number of look-ups, as a signal arriving mid-run would."""

    def __init__(self, n):
        super().__init__()
        self.n = n

    @property
    def requested(self):
        self.n -= 1
        return self.n < 0

    @property
    def signum(self):
        return 2 if self.n < 0 else 0

    @signum.setter
    def signum(self, v):
        pass


def _execute(plan, path, **kw):
    f = store.open_writer(path)
    try:
        return execute(plan, f, **kw)
    finally:
        f.close()


@pytest.mark.parametrize("name", ADAPTIVE)
def test_run_file_holds_folded_angles_and_a_resume_repeats_the_bytes(name, tmp_path):
    top = parse_case(TOP_TOML, "folded-rk-top.toml")
    plan = plan_run(top, name, rtol=1e-10, atol=1e-13, form="euler")
    whole = _execute(plan, tmp_path / "whole.h5")
    assert whole.status == "ok"
    part = _execute(plan, tmp_path / "part.h5", stop=StopAfter(15))
    assert part.status == "interrupted"
    with reader.open_reader(tmp_path / "part.h5") as f:
        g = f["runs"][plan.run_id]
        assert 0 < g["t"].shape[0] < 41
        # The checkpoint holds the folded internal state and its counted turns.
        yi = g["checkpoint/stepper/yi"][()]
        assert abs(yi[0]) <= math.pi and abs(yi[2]) <= math.pi
        assert g["checkpoint/stepper/turns"][1] > 0
    done = _execute(plan, tmp_path / "part.h5", resume=True)
    assert done.status == "ok"
    with (
        reader.open_reader(tmp_path / "whole.h5") as fa,
        reader.open_reader(tmp_path / "part.h5") as fb,
    ):
        ga, gb = fa["runs"][plan.run_id], fb["runs"][plan.run_id]
        state, euler, turns = ga["state"][()], ga["euler"][()], ga["euler_turns"][()]
        for y in (state, euler):
            assert np.all(np.abs(y[:, [0, 2]]) <= math.pi)
        assert turns[-1, 1] >= 8  # 300 rpm over 2 s: ten turns of psi
        names = []
        ga.visititems(lambda n, o: names.append(n) if hasattr(o, "shape") else None)
        assert "euler_turns" in names
        for n in names:
            if not n.startswith("checkpoint") and not n.endswith("wall_s"):
                assert ga[n][()].tobytes() == gb[n][()].tobytes(), n
