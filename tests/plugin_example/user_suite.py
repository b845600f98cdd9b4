"""A user's own test module using the topdrift_check fixture (run by tests/test_pytest_plugin.py
through pytester; the name does not match test_*.py, so our own session does not collect it).

The passing bounds leave a wide margin (the leapfrog energy error here is about 2e-6 against a
bound of 1e-4); the failing one asks RK4, which keeps no invariant exactly, for energy to
round-off.
"""

import numpy as np

from topdrift.integrators import Method, get


def test_leapfrog_within_bounds(topdrift_check):
    # A drift law needs a horizon of 20 nutation periods (0.08 s here) and samples to fit it on.
    m = topdrift_check(
        "leapfrog",
        case="looping-nutation",
        step=1e-3,
        horizon=2,
        samples=201,
        energy=1e-4,
        axis=1e-2,
        p_phi=1e-14,
        drift=0.3,
    )
    assert m["steps"] == 2000


def test_rk4_energy_bound_too_tight(topdrift_check):
    # Classical RK4 keeps no invariant exactly: a bound at round-off must fail, naming the bound.
    topdrift_check(
        "rk4", case="looping-nutation", step=1e-3, horizon=1, samples=11, energy=1e-15, axis=1.0
    )


class HalfStepLeapfrog(Method):
    """A method of the user's own: two leapfrog steps of h/2 per step h (still the Strang
    step, so order 2 with a quarter of the error constant)."""

    def __init__(self):
        inner = get("leapfrog")
        self.inner = inner
        self.info = type(inner.info)(**{**inner.info.__dict__, "name": "user-half-leapfrog"})

    def start(self, form, params, t0, y0, settings):
        return self.inner.start(form, params, t0, y0, {"step": settings["step"] / 2})


def test_own_method_object(topdrift_check):
    m = topdrift_check(
        HalfStepLeapfrog(), case="looping-nutation", step=1e-3, horizon=1, samples=11, energy=1e-4
    )
    assert np.isfinite(m["energy_rel_max"])


def test_own_method_is_gone_after_its_test():
    from topdrift.integrators import UnknownMethod

    try:
        get("user-half-leapfrog")
    except UnknownMethod:
        return
    raise AssertionError("the method registered for one test outlived it")
