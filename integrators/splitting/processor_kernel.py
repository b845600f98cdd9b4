"""The processor of a processed splitting (processed_tables.py), applied to one state: the
sequence B(y_0 h) A(z_1 h) ... A(z_m h) B(y_m h) once, in place. It runs only at the start
(P^-1) and at output times (P), never inside the step loop. One entry per form with the form a
constant, as for the step loops (kernels.py): an Euler-form run then never compiles the body
form's free flows, the elliptic one included. Measured cold (fresh cache, a whole
`topdrift run demo-wheel`): leapfrog-proc4 11.8 s Euler form, 20.1 s body form, against
leapfrog-tj4's 11.1 and 19.2 s. Phi and psi are not folded here: the stepper's turn count
belongs to the kernel state, and the processor moves the angles by O(h^2) only."""

from __future__ import annotations

from numba import njit

from topdrift.integrators.base import C_EVALS, C_FORCE_EVALS
from topdrift.models.flows import drift_euler, flow_a_fixed, flow_b
from topdrift.models.forms import FORM_BODY, FORM_EULER


@njit(cache=True, inline="always")
def _sequence(form, free, p, kick, drift, y, counters):
    m = drift.shape[0]
    for i in range(m):
        flow_b(form, kick[i], y, p)
        if form == FORM_EULER:
            drift_euler(drift[i], y, p)
        else:
            flow_a_fixed(form, free, drift[i], y, p)
    flow_b(form, kick[m], y, p)
    counters[C_EVALS] += 2 * m + 1
    counters[C_FORCE_EVALS] += m + 1


@njit(cache=True)
def apply_sequence_euler(free, p, kick, drift, y, counters):
    """y <- B(kick[m]) A(drift[m-1]) ... A(drift[0]) B(kick[0]) y (kick[0] first), Euler form;
    the coefficients already carry the step. Counts the sub-flows it evaluates."""
    _sequence(FORM_EULER, free, p, kick, drift, y, counters)


@njit(cache=True)
def apply_sequence_body(free, p, kick, drift, y, counters):
    """apply_sequence_euler for the body form."""
    _sequence(FORM_BODY, free, p, kick, drift, y, counters)


def apply_sequence(form, free, p, kick, drift, y, counters):
    """The entry of the form (called from Python, once per output time)."""
    run = apply_sequence_euler if form == FORM_EULER else apply_sequence_body
    run(free, p, kick, drift, y, counters)
