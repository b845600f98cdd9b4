"""The equations of motion handed to scipy's solve_ivp, the general-purpose reference library the
kernels are checked against (its DOP853 at tight tolerances)."""

from __future__ import annotations

import numpy as np
from scipy.integrate import solve_ivp

from topdrift.models.dynamics import rhs


def scipy_rhs(form: int, params: np.ndarray):
    """f(t, y) for solve_ivp: the same right-hand side as the kernels see."""

    def f(_t, y):
        d = np.empty(y.shape[0])
        rhs(form, np.ascontiguousarray(y), params, d)
        return d

    return f


def dop853(form: int, body, y0, t, rtol: float = 1e-13, atol: float = 1e-13) -> np.ndarray:
    """scipy's DOP853 from (0, y0) sampled at the times t (rows)."""
    sol = solve_ivp(
        scipy_rhs(form, body.params()),
        (0.0, t[-1]),
        y0,
        method="DOP853",
        rtol=rtol,
        atol=atol,
        t_eval=t,
    )
    assert sol.success
    return sol.y.T
