"""What the runner records at one output sample, as one jitted call.

A sample needs the state in both forms, the folded Euler angles, the figure axis and the
invariants. Done in Python that is a dozen small calls per sample; done here it is one, so that
sampling stays cheap next to the integration even with many samples (see
benchmarks/timing/test_time_runner.py).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from topdrift.models.forms import FORM_BODY, FORM_EULER, FORM_SIZE, body_to_euler, euler_to_body
from topdrift.models.invariants import (
    INV_ENERGY,
    INV_NORM,
    INV_P_PHI,
    INV_P_PSI,
    N_INVARIANTS,
    invariants,
)
from topdrift.models.quaternion import figure_axis

# Columns of the per-sample scalar block `scal` (one row per sample).
S_ENERGY = 0
S_P_PHI = 1
S_P_PSI = 2
S_NORM = 3
N_SCALARS = 4


@njit(cache=True)
def _fold(a):
    """An angle folded into (-pi, pi]: phi and psi of a fast spin cannot be unwrapped across
    samples that lie many turns apart, so they are stored folded and compared wrapped."""
    return math.atan2(math.sin(a), math.cos(a))


@njit(cache=True)
def record_sample(form, y, p, j, state, euler, quat, mom, axis, scal, ye, yb, inv):
    """Write sample j of state y (native form) into the row j of each buffer.

    Returns False when the state is not finite (nothing is then written but `state`).
    ye (6), yb (7) and inv (5) are scratch arrays owned by the caller.
    """
    n = y.shape[0]
    ok = True
    for i in range(n):
        state[j, i] = y[i]
        if not math.isfinite(y[i]):
            ok = False
    if not ok:
        return False
    if form == FORM_EULER:
        for i in range(6):
            ye[i] = y[i]
        euler_to_body(y, yb)
        euler[j, 0] = _fold(y[0])
        euler[j, 1] = y[1]
        euler[j, 2] = _fold(y[2])
    else:
        for i in range(7):
            yb[i] = y[i]
        # At sin(theta) = 0 only phi + psi is defined; to_euler still returns a split of it,
        # which is what is stored (the quaternion dataset is exact there).
        body_to_euler(y, ye)
        euler[j, 0] = ye[0]
        euler[j, 1] = ye[1]
        euler[j, 2] = ye[2]
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
    # The invariants of the form that was integrated: converting first would add round-off.
    invariants(form, y, p, inv)
    scal[j, S_ENERGY] = inv[INV_ENERGY]
    scal[j, S_P_PHI] = inv[INV_P_PHI]
    scal[j, S_P_PSI] = inv[INV_P_PSI]
    scal[j, S_NORM] = inv[INV_NORM]
    return math.isfinite(inv[INV_ENERGY])


class SampleBuffers:
    """Preallocated sample rows (one run's samples between writes, or one sample of every member
    of an ensemble), plus the scratch arrays of record_sample."""

    def __init__(self, rows: int, width: int):
        self.state = np.zeros((rows, width))
        self.euler = np.zeros((rows, 3))
        self.quat = np.zeros((rows, 4))
        self.mom = np.zeros((rows, 3))
        self.axis = np.zeros((rows, 3))
        self.scal = np.zeros((rows, N_SCALARS))
        self.t = np.zeros(rows)
        self.ye = np.zeros(FORM_SIZE[FORM_EULER])
        self.yb = np.zeros(FORM_SIZE[FORM_BODY])
        self.inv = np.zeros(N_INVARIANTS)
        self.rows = rows

    def record(self, form: int, y: np.ndarray, p: np.ndarray, j: int) -> bool:
        """Row j from state y (see record_sample); False when the state is not finite."""
        return record_sample(
            form,
            y,
            p,
            j,
            self.state,
            self.euler,
            self.quat,
            self.mom,
            self.axis,
            self.scal,
            self.ye,
            self.yb,
            self.inv,
        )

    def rows_of(self, j: int, stop: int | None = None) -> dict[str, np.ndarray]:
        """Rows [j, stop) as the run group's sample datasets (state, angles, quaternion,
        momentum and invariants; the time is the caller's), views into the buffers."""
        stop = j + 1 if stop is None else stop
        return {
            "state": self.state[j:stop],
            "euler": self.euler[j:stop],
            "quaternion": self.quat[j:stop],
            "momentum": self.mom[j:stop],
            "invariants/energy": self.scal[j:stop, S_ENERGY],
            "invariants/p_phi": self.scal[j:stop, S_P_PHI],
            "invariants/p_psi": self.scal[j:stop, S_P_PSI],
            "invariants/norm": self.scal[j:stop, S_NORM],
        }
