"""The global-error order measurement that the family tests share: run a fixed-step method at
several step counts to the same sample times, take the largest error over them against a
reference of no method family here (tests/independent_references.py: the exact solution of the
Lagrange top, compared in the attitude; a 34-digit mpmath Taylor series for any other body), and
fit the slope of log error against log h. A slope within 0.2 of the nominal order is the usual
test (common practice)."""

from __future__ import annotations

import numpy as np
from independent_references import attitude_error, exact_attitude, taylor_states

from topdrift.integrators import C_EVALS, C_STEPS, ST_OK, get
from topdrift.models.exact import LagrangeTop


def reference_error(form, body, y0, times):
    """error(y, k): the distance of state y from the reference at times[k]."""
    if body.lagrange_top:
        angles = exact_attitude(LagrangeTop.from_state(body, form, y0), times)

        def error(y, k):
            return attitude_error(form, y, angles[k])
    else:
        ref = taylor_states(body, y0, times)

        def error(y, k):
            return float(np.max(np.abs(y - ref[k])))

    return error


def measured_order(name, form, body, y0, times, steps, evals_per_step=None, settings=None):
    """(slope, errors) of method `name` from y0 over `times` at each step count in `steps`;
    checks the step counter (and the evaluation counter, when evals_per_step is given)."""
    error = reference_error(form, body, y0, times)
    t_end = float(times[-1])
    errors = []
    for n in steps:
        st = get(name).start(form, body.params(), 0.0, y0, {"step": t_end / n, **(settings or {})})
        worst = 0.0
        for k, t in enumerate(times):
            assert st.advance_to(t) == ST_OK
            worst = max(worst, error(st.y, k))
        assert st.counters[C_STEPS] == n
        if evals_per_step is not None:
            assert st.counters[C_EVALS] == evals_per_step * n
        errors.append(worst)
    slope = np.polyfit(np.log(t_end / np.asarray(steps, dtype=float)), np.log(errors), 1)[0]
    return slope, errors
