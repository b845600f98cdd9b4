"""Fixed work, timed in the process that times the integrators, as the unit of the gate's timings.

A kernel's time per step moves with the machine and the day (clock speed, turbo, a neighbour on
the other hyperthread, a CI runner of the same kind but another host); what should not move is
its ratio to a fixed piece of work of the same kind, timed right before and right after it. The
earlier unit, a scalar loop of one sin/cos pair and a square root, did not have the kernels'
instruction mix: between two days on one machine the Runge-Kutta kernels moved by a third
against it and the splittings did not.

So the unit is two frozen kernels, each the plain form of one family of the project's kernels,
written out here once and never edited with them (a change to a method's kernel must show up as a
change of its ratio, which it could not if the unit changed with it):

- "scalar": the Strang splitting of the heavy symmetric top on its canonical variables (kick by
  half a step, exact drift, kick), six scalars, a sin/cos pair and a few divisions per step: the
  instruction mix of the splitting kernels.
- "stages": classical RK4 on the body form (quaternion and body momentum, seven variables), with
  its stages in small arrays: the loads, stores and multiply-adds of the Runge-Kutta and
  Gauss-Legendre kernels.

Each method is timed against the reference of its family (`reference_kind`); a method of another
family (a plug-in, the scipy references) against the mean of both. A change to either kernel
below is a change of the unit: bump WORKLOAD_VERSION, which makes every baseline recorded before
it incomparable in its timings (the gate says so and compares the rest).
"""

from __future__ import annotations

# The models first: they point numba's kernel cache at this code's folder (kernel_cache.py).
import topdrift.models  # noqa: F401

# isort: split
import math
import time

import numpy as np
from numba import njit

WORKLOAD = "strang-euler+rk4-body"
WORKLOAD_VERSION = 1
KINDS = ("scalar", "stages", "mix")

# Steps per reference pass: about 5 ms each on the 2-core AMD EPYC (family 25) this was written
# on (80 and 58 ns per step), short enough to sit beside every method pass in every round.
SCALAR_STEPS = 60_000
STAGES_STEPS = 80_000

# CPU time of the calling thread, not wall time: on a shared machine a pass that is descheduled
# halfway takes twice the wall time but the same CPU time. Linux reads it from
# CLOCK_THREAD_CPUTIME_ID, to the nanosecond.
CLOCK = "thread_time"
clock = time.thread_time

# A top of our own: I1 = I2 = 0.05, I3 = 0.02 kg m^2, M g l = 0.4 N m, tilted 1 rad, spinning
# fast enough for a small nutation, so that the Euler angles stay far from the pole however many
# steps a pass takes; each pass starts from the same state, so every pass does the same work.
_I1, _I3, _MGL = 0.05, 0.02, 0.4
_H = 1e-3


@njit(cache=True)
def scalar_steps(n, theta0):
    """n Strang steps (b/2, a, b/2) on (phi, theta, psi, p_phi, p_theta, p_psi); returns a sum
    over the path so that none of it is dead code."""
    i1, i3, mgl, h = _I1, _I3, _MGL, _H
    phi, theta, psi = 0.0, theta0, 0.0
    p_psi = i3 * 60.0
    p_phi = p_psi * math.cos(theta0)
    p_theta = 0.0
    acc = 0.0
    half = 0.5 * h
    for _ in range(n):
        # H_b for h/2: theta fixed, kick p_theta, turn phi and psi
        s = math.sin(theta)
        c = math.cos(theta)
        a = p_phi - p_psi * c
        inv = 1.0 / (i1 * s * s)
        p_theta += half * (a * a * c * inv / s - a * p_psi / (i1 * s) + mgl * s)
        phi += half * a * inv
        psi -= half * c * a * inv
        # H_a for h: theta and psi move at fixed momenta
        theta += h * p_theta / i1
        psi += h * p_psi / i3
        # H_b for h/2 again
        s = math.sin(theta)
        c = math.cos(theta)
        a = p_phi - p_psi * c
        inv = 1.0 / (i1 * s * s)
        p_theta += half * (a * a * c * inv / s - a * p_psi / (i1 * s) + mgl * s)
        phi += half * a * inv
        psi -= half * c * a * inv
        acc += theta
    return acc + phi + psi


@njit(cache=True, inline="always")
def _body_rhs(y, inv_i, mgl, dy):
    """Euler-Poisson equations with the quaternion: m' = m x w + M g l (Gamma x e3),
    q' = q (0, w) / 2, Gamma = R^T e_z read from the quaternion."""
    q0, q1, q2, q3 = y[0], y[1], y[2], y[3]
    m1, m2, m3 = y[4], y[5], y[6]
    w1, w2, w3 = m1 * inv_i[0], m2 * inv_i[1], m3 * inv_i[2]
    g1 = 2.0 * (q1 * q3 - q0 * q2)
    g2 = 2.0 * (q2 * q3 + q0 * q1)
    dy[0] = 0.5 * (-q1 * w1 - q2 * w2 - q3 * w3)
    dy[1] = 0.5 * (q0 * w1 + q2 * w3 - q3 * w2)
    dy[2] = 0.5 * (q0 * w2 + q3 * w1 - q1 * w3)
    dy[3] = 0.5 * (q0 * w3 + q1 * w2 - q2 * w1)
    dy[4] = m2 * w3 - m3 * w2 + mgl * g2
    dy[5] = m3 * w1 - m1 * w3 - mgl * g1
    dy[6] = m1 * w2 - m2 * w1


@njit(cache=True)
def stages_steps(n, y0, inv_i, work):
    """n classical RK4 steps of the body form from y0 (7 values); `work` holds the four stages,
    the state and the stage point (42 values), allocated once by the caller. Returns a sum over
    the path."""
    h = _H
    mgl = _MGL
    y = work[28:35]
    for j in range(7):
        y[j] = y0[j]
    k1 = work[0:7]
    k2 = work[7:14]
    k3 = work[14:21]
    k4 = work[21:28]
    tmp = work[35:42]
    acc = 0.0
    for _ in range(n):
        _body_rhs(y, inv_i, mgl, k1)
        for j in range(7):
            tmp[j] = y[j] + 0.5 * h * k1[j]
        _body_rhs(tmp, inv_i, mgl, k2)
        for j in range(7):
            tmp[j] = y[j] + 0.5 * h * k2[j]
        _body_rhs(tmp, inv_i, mgl, k3)
        for j in range(7):
            tmp[j] = y[j] + h * k3[j]
        _body_rhs(tmp, inv_i, mgl, k4)
        for j in range(7):
            y[j] += h / 6.0 * (k1[j] + 2.0 * k2[j] + 2.0 * k3[j] + k4[j])
        acc += y[6]
    return acc


class ReferenceWorkload:
    """The two reference kernels with their arrays, ready to time (compiled on construction)."""

    def __init__(self, scalar: int = SCALAR_STEPS, stages: int = STAGES_STEPS):
        self.scalar, self.stages = int(scalar), int(stages)
        # tilted 1 rad about body axis 1, spinning 60 rad/s about axis 3
        self.y0 = np.array([math.cos(0.5), math.sin(0.5), 0.0, 0.0, 0.0, 0.0, _I3 * 60.0])
        self.inv_i = np.array([1.0 / _I1, 1.0 / _I1, 1.0 / _I3])
        self.work = np.zeros(42)
        scalar_steps(10, 1.0)
        stages_steps(10, self.y0, self.inv_i, self.work)

    def time_pass(self) -> tuple[float, float]:
        """(seconds of the scalar kernel, seconds of the stages kernel), one pass of each."""
        t0 = clock()
        scalar_steps(self.scalar, 1.0)
        t1 = clock()
        stages_steps(self.stages, self.y0, self.inv_i, self.work)
        t2 = clock()
        return t1 - t0, t2 - t1


def reference_kind(family: str) -> str:
    """Which reference a method of this family is timed against."""
    if family == "splitting":
        return "scalar"
    if family in ("explicit-rk", "adaptive-rk", "gauss-legendre"):
        return "stages"
    return "mix"


def unit_ns(kind: str, scalar_ns: float, stages_ns: float) -> float:
    """Nanoseconds of one step of the reference of this kind."""
    if kind == "scalar":
        return scalar_ns
    if kind == "stages":
        return stages_ns
    return 0.5 * (scalar_ns + stages_ns)
