"""What the runner records at one output sample, as one jitted call.

A sample needs the state in both forms, the folded Euler angles, the figure axis and the
invariants. Done in Python that is a dozen small calls per sample; done here it is one, so that
sampling stays cheap next to the integration even with many samples (see
benchmarks/timing/test_time_runner.py).
"""

from __future__ import annotations

# The models first: they point numba's kernel cache at this code's folder (kernel_cache.py).
import topdrift.models  # noqa: F401

# isort: split
import math

import numpy as np
from numba import njit

from topdrift.benchmarks.store.format import TURNS_DATASET
from topdrift.models.forms import FORM_BODY, FORM_EULER, FORM_SIZE, body_to_euler, euler_to_body
from topdrift.models.invariants import (
    INV_ENERGY,
    INV_KOV,
    INV_NORM,
    INV_P_PHI,
    INV_P_PSI,
    N_INVARIANTS,
    invariants,
)
from topdrift.models.quaternion import figure_axis
from topdrift.models.turns import N_TURNS, T_PHI, T_PSI, true_angle

# Columns of the per-sample scalar block `scal` (one row per sample).
S_ENERGY = 0
S_P_PHI = 1
S_P_PSI = 2
S_NORM = 3
S_KOV = 4  # Kovalevskaya's integral (NaN unless the body has chi off axis 3; stored only for
# Kovalevskaya tops, where it is an invariant)
N_SCALARS = 5
# The turns of a stepper that counts none (its angles are unfolded, or the start state).
NO_TURNS = np.zeros(0, dtype=np.int64)


@njit(cache=True, inline="always")
def _copy_state(y, j, state):
    """state[j] = y; False when y is not finite."""
    ok = True
    for i in range(y.shape[0]):
        state[j, i] = y[i]
        if not math.isfinite(y[i]):
            ok = False
    return ok


@njit(cache=True, inline="always")
def _record_rest(form, y, p, j, yb, quat, mom, axis, scal, inv):
    """The part of a sample both forms share: quaternion, momentum, figure axis (from yb, the
    body-form state) and the invariants of the form that was integrated (converting first would
    add round-off). Returns False when the energy is not finite."""
    q0, q1, q2, q3 = yb[0], yb[1], yb[2], yb[3]
    quat[j, 0] = q0
    quat[j, 1] = q1
    quat[j, 2] = q2
    quat[j, 3] = q3
    mom[j, 0] = yb[4]
    mom[j, 1] = yb[5]
    mom[j, 2] = yb[6]
    nq = math.sqrt(q0 * q0 + q1 * q1 + q2 * q2 + q3 * q3)
    ax, ay, az = figure_axis(q0 / nq, q1 / nq, q2 / nq, q3 / nq)
    axis[j, 0] = ax
    axis[j, 1] = ay
    axis[j, 2] = az
    invariants(form, y, p, inv)
    scal[j, S_ENERGY] = inv[INV_ENERGY]
    scal[j, S_P_PHI] = inv[INV_P_PHI]
    scal[j, S_P_PSI] = inv[INV_P_PSI]
    scal[j, S_NORM] = inv[INV_NORM]
    scal[j, S_KOV] = inv[INV_KOV]
    return math.isfinite(inv[INV_ENERGY])


# One entry per form (the stepper's form is known before the first sample), so that a run
# compiles only its own form's conversions and invariants: an entry taking the form as data
# compiles both (measured in docs/timing.md).
@njit(cache=True)
def record_euler(y, kturns, p, j, state, euler, turns, quat, mom, axis, scal, ye, yb, inv):
    """Write sample j of the Euler-form state y into the row j of each buffer.

    phi and psi are y's angles plus the stepper's whole turns of fl(2 pi) (kturns: two int64, or
    empty where the stepper does not fold; models/turns.py); they are written to `euler` (and to
    `state`) folded by 2 pi into [-pi, pi], with their whole 2 pi turns in `turns`, so that no
    bit is lost however far they have grown.

    Returns False when the state is not finite (nothing is then written but `state`).
    ye (6), yb (7) and inv (5) are scratch arrays owned by the caller.
    """
    if not _copy_state(y, j, state):
        return False
    k_phi = float(kturns[T_PHI]) if kturns.shape[0] == N_TURNS else 0.0
    k_psi = float(kturns[T_PSI]) if kturns.shape[0] == N_TURNS else 0.0
    phi, n_phi = true_angle(y[0], k_phi)
    psi, n_psi = true_angle(y[2], k_psi)
    for i in range(6):
        ye[i] = y[i]
    # The attitude from the angles folded by 2 pi itself (the kernel's y lacks the part of
    # its turns that fl(2 pi) misses, 2.4e-16 rad a turn), and with the sign the unfolded
    # angles give: a whole turn of phi or psi turns the quaternion into its negative.
    ye[0] = phi
    ye[2] = psi
    euler_to_body(ye, yb)
    if (int(n_phi) + int(n_psi)) % 2 != 0:
        for i in range(4):
            yb[i] = -yb[i]
    euler[j, 0] = phi
    euler[j, 1] = y[1]
    euler[j, 2] = psi
    state[j, 0] = phi
    state[j, 2] = psi
    turns[j, 0] = np.int64(n_phi)
    turns[j, 1] = np.int64(n_psi)
    return _record_rest(FORM_EULER, y, p, j, yb, quat, mom, axis, scal, inv)


@njit(cache=True)
def record_body(y, kturns, p, j, state, euler, turns, quat, mom, axis, scal, ye, yb, inv):
    """Write sample j of the body-form state y into the row j of each buffer (record_euler's
    arguments). The angles come from the quaternion and are known only modulo 2 pi: turns are
    written as 0 and not stored (the writer leaves them out); kturns is not read."""
    if not _copy_state(y, j, state):
        return False
    turns[j, 0] = 0
    turns[j, 1] = 0
    for i in range(7):
        yb[i] = y[i]
    # At sin(theta) = 0 only phi + psi is defined; to_euler still returns a split of it,
    # which is what is stored (the quaternion dataset is exact there).
    body_to_euler(y, ye)
    euler[j, 0] = ye[0]
    euler[j, 1] = ye[1]
    euler[j, 2] = ye[2]
    return _record_rest(FORM_BODY, y, p, j, yb, quat, mom, axis, scal, inv)


class SampleBuffers:
    """Preallocated sample rows (one run's samples between writes, or one sample of every member
    of an ensemble), plus the scratch arrays of record_euler and record_body."""

    def __init__(self, rows: int, width: int):
        self.state = np.zeros((rows, width))
        self.euler = np.zeros((rows, 3))
        self.turns = np.zeros((rows, N_TURNS), dtype=np.int64)
        self.quat = np.zeros((rows, 4))
        self.mom = np.zeros((rows, 3))
        self.axis = np.zeros((rows, 3))
        self.scal = np.zeros((rows, N_SCALARS))
        self.t = np.zeros(rows)
        self.ye = np.zeros(FORM_SIZE[FORM_EULER])
        self.yb = np.zeros(FORM_SIZE[FORM_BODY])
        self.inv = np.zeros(N_INVARIANTS)
        self.rows = rows

    def record(
        self, form: int, y: np.ndarray, p: np.ndarray, j: int, kturns: np.ndarray = NO_TURNS
    ) -> bool:
        """Row j from state y and the stepper's turns kturns (record_euler, record_body);
        False when the state is not finite."""
        record = record_euler if form == FORM_EULER else record_body
        return record(
            y,
            kturns,
            p,
            j,
            self.state,
            self.euler,
            self.turns,
            self.quat,
            self.mom,
            self.axis,
            self.scal,
            self.ye,
            self.yb,
            self.inv,
        )

    def rows_of(
        self, j: int, stop: int | None = None, kovalevskaya: bool = False
    ) -> dict[str, np.ndarray]:
        """Rows [j, stop) as the run group's sample datasets (state, angles and their turns,
        quaternion, momentum and invariants, Kovalevskaya's integral where asked for; the time
        is the caller's), views into the buffers. The writer leaves the turns out where the
        run has no dataset for them (a body-form run, a version-1 file)."""
        stop = j + 1 if stop is None else stop
        rows = {
            "state": self.state[j:stop],
            "euler": self.euler[j:stop],
            TURNS_DATASET: self.turns[j:stop],
            "quaternion": self.quat[j:stop],
            "momentum": self.mom[j:stop],
            "invariants/energy": self.scal[j:stop, S_ENERGY],
            "invariants/p_phi": self.scal[j:stop, S_P_PHI],
            "invariants/p_psi": self.scal[j:stop, S_P_PSI],
            "invariants/norm": self.scal[j:stop, S_NORM],
        }
        if kovalevskaya:  # only for a Kovalevskaya top, where it is an invariant
            rows["invariants/kovalevskaya"] = self.scal[j:stop, S_KOV]
        return rows
