"""A fixed amount of floating-point work, timed in the process that times the integrators.

The regression gate compares kernel timings recorded on one machine (or on one day) with timings
taken on another. Dividing each run's nanoseconds per step by the nanoseconds of one iteration of
this loop, timed in the same process, takes out most of what differs between the two: clock
frequency, turbo state, a slower CI runner. What it cannot take out (a different
microarchitecture favouring one kind of instruction) is why the gate names a changed CPU model
next to any timing it flags.

The loop has the shape of an integrator step on a top: a short chain of dependent multiply-adds,
a sin/cos pair, a square root and a division per iteration, on scalars only, allocating nothing.
Its state is a unit vector turned by an angle that depends on the state, so that nothing can be
hoisted out of the loop and the values stay bounded however many iterations run.
"""

from __future__ import annotations

import math
import time

from numba import njit

# About 10 ms per pass on the x86 core this was written on: long enough for the clock's
# resolution, short enough that a best of several passes costs well under a second. The passes
# are interleaved with the timing runs (grid_measure.measure_timings).
ITERATIONS = 300_000
KERNEL = "calibration.turning_unit_vector"  # recorded with the baseline: what the unit is

# Timings are CPU time of the calling thread, not wall time: on a machine shared with other work
# (a CI runner, two cores and a dozen processes) a pass that is descheduled halfway takes twice
# the wall time but the same CPU time. What CPU time still sees (cache pollution, a busy
# hyperthread sibling, frequency changes) is what the calibration and the best of several
# passes are for. Linux reads it from CLOCK_THREAD_CPUTIME_ID, to the nanosecond.
CLOCK = "thread_time"
clock = time.thread_time


@njit(cache=True)
def turning_unit_vector(n, x0):
    """n iterations of the fixed work; returns a sum over the path so none of it is dead code."""
    x = x0
    y = 0.6
    z = 0.8
    acc = 0.0
    for _ in range(n):
        a = 0.1 + 0.01 * z
        ca = math.cos(a)
        sa = math.sin(a)
        x1 = ca * x - sa * y
        y1 = sa * x + ca * y
        z1 = z + 1e-3 * x1
        r = 1.0 / math.sqrt(x1 * x1 + y1 * y1 + z1 * z1)
        x = x1 * r
        y = y1 * r
        z = z1 * r
        acc += x * y
    return acc
