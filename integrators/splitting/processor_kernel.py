"""The processor of a processed splitting (processed_tables.py), applied to one state: the
sequence B(y_0 h) A(z_1 h) ... A(z_m h) B(y_m h) once, in place. It runs only at the start
(P^-1) and at output times (P), never inside the step loop, so it is a plain loop over the
sub-flows with the form and free flow as data. Phi and psi are not folded here: the stepper's
turn count belongs to the kernel state, and the processor moves the angles by O(h^2) only."""

from __future__ import annotations

from numba import njit

from topdrift.integrators.base import C_EVALS, C_FORCE_EVALS
from topdrift.models.flows import flow_a_fixed, flow_b


@njit(cache=True)
def apply_sequence(form, free, p, kick, drift, y, counters):
    """y <- B(kick[m]) A(drift[m-1]) ... A(drift[0]) B(kick[0]) y (kick[0] first); the
    coefficients already carry the step. Counts the sub-flows it evaluates."""
    m = drift.shape[0]
    for i in range(m):
        flow_b(form, kick[i], y, p)
        flow_a_fixed(form, free, drift[i], y, p)
    flow_b(form, kick[m], y, p)
    counters[C_EVALS] += 2 * m + 1
    counters[C_FORCE_EVALS] += m + 1
