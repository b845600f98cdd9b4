"""pytest plugin (entry point `pytest11`): the `topdrift_check` fixture.

A project with an integrator of its own runs it through topdrift's cases from its own test suite
and asserts error bounds in one line:

    def test_my_method_keeps_energy(topdrift_check):
        topdrift_check("mymethod", case="looping-nutation", step=1e-3, horizon=5,
                       energy=1e-6, axis=1e-4)

The plugin loads in every pytest session of an environment where topdrift is installed, ours
included, so this module imports pytest alone: topdrift (numba, h5py, scipy) is imported inside
the fixture, the first time a test asks for it.
"""

from __future__ import annotations

import pytest

# Bound keyword -> (metric of the run's metrics JSON, what it measures).
BOUNDS = {
    "energy": ("energy_rel_max", "relative energy error"),
    "p_phi": ("p_phi_rel_max", "p_phi error relative to |L0|"),
    "p_psi": ("p_psi_rel_max", "p_psi error relative to |L0|"),
    "norm": ("norm_abs_max", "quaternion norm error"),
    "axis": ("axis_angle_max", "figure-axis angle to the exact solution (rad)"),
    "attitude": ("attitude_angle_max", "attitude (rotation) angle to the exact solution (rad)"),
    "theta": ("theta_abs_max", "theta error against the exact solution (rad)"),
    "phi": ("phi_abs_max", "phi error against the exact solution (rad)"),
    "psi": ("psi_abs_max", "psi error against the exact solution (rad)"),
    "drift": ("energy_drift_exponent", "energy drift exponent (0 bounded, 1 linear)"),
}


class TopdriftCheck:
    """Callable behind the fixture. Returns the run's metrics (a dict) when every bound holds;
    fails the test with one line per broken bound otherwise."""

    def __init__(self) -> None:
        self._registered: list[tuple[str, object]] = []  # (name, what it replaced or None)

    def __call__(
        self,
        method,
        *,
        case: str = "looping-nutation",
        step: float | None = None,
        rtol: float | None = None,
        atol: float | None = None,
        form: str | None = None,
        horizon: float | None = None,
        samples: int | None = None,
        status: str = "ok",
        **bounds: float,
    ) -> dict:
        from topdrift.benchmarks.cases.library import load_case
        from topdrift.benchmarks.errors import UserError
        from topdrift.benchmarks.run.in_memory import run_in_memory
        from topdrift.benchmarks.run.runner import plan_run
        from topdrift.integrators import MethodRefused, UnknownMethod
        from topdrift.models import BodyError, SingularAttitude

        unknown = sorted(set(bounds) - set(BOUNDS))
        if unknown:
            raise TypeError(
                f"topdrift_check: unknown bound(s) {', '.join(unknown)}; known: {', '.join(BOUNDS)}"
            )
        for k, v in bounds.items():
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not v >= 0.0:
                raise TypeError(f"topdrift_check: bound {k}: expected a number >= 0, got {v!r}")
        name = self._name_of(method)
        label = f"{name} on {case}"
        try:
            plan = plan_run(
                load_case(case),
                name,
                step=step,
                rtol=rtol,
                atol=atol,
                form=form,
                horizon=horizon,
                samples=samples,
            )
            run = run_in_memory(plan)
        except (UserError, BodyError, SingularAttitude, MethodRefused, UnknownMethod) as exc:
            pytest.fail(f"topdrift_check: {label}: cannot run: {exc}", pytrace=False)
        label = f"{name} on {case} ({plan.form} form, {_setting(plan.settings)})"
        m = run.metrics
        if run.status != status:
            why = f": {run.detail}" if run.detail else ""
            pytest.fail(
                f"topdrift_check: {label}: status {run.status!r}, expected {status!r}{why}",
                pytrace=False,
            )
        broken = []
        for key, bound in bounds.items():
            metric, what = BOUNDS[key]
            value = m.get(metric)
            if value is None and key == "drift" and m.get("energy_drift_unknown"):
                broken.append(
                    f"{key}: no drift law for this run ({m['energy_drift_unknown']}), bound "
                    f"{bound:.3g}"
                )
            elif value is None:
                broken.append(
                    f"{key}: {metric} not measured in this run (no exact solution, the form has "
                    f"no such quantity, or it is no invariant of this body), bound {bound:.3g}"
                )
            elif not value <= bound:
                over = f"{value / bound:.3g} x the bound" if bound > 0 else "bound is 0"
                broken.append(f"{key}: {what} {metric} = {value:.3g} > {bound:.3g} ({over})")
        if broken:
            lines = "\n  ".join(broken)
            pytest.fail(
                f"topdrift_check: {label}: {len(broken)} bound(s) broken\n  {lines}",
                pytrace=False,
            )
        return m

    def _name_of(self, method) -> str:
        if isinstance(method, str):
            return method
        from topdrift.integrators import Method, UnknownMethod, get, register

        if not isinstance(method, Method):
            raise TypeError(
                f"topdrift_check: expected a method name or a topdrift Method, got {method!r}"
            )
        name = method.info.name
        # `get` loads the built-in and plug-in methods first, so that none of them can take the
        # name back later. Remember what the name held and put it back at teardown, so that the
        # method lives for this one test.
        try:
            previous = get(name)
        except UnknownMethod:
            previous = None
        if previous is not method:
            register(method, replace=True)
            self._registered.append((name, previous))
        return name

    def _restore(self) -> None:
        from topdrift.integrators import register, unregister

        for name, previous in reversed(self._registered):
            if previous is None:
                unregister(name)
            else:
                register(previous, replace=True)
        self._registered.clear()


def _setting(settings: dict) -> str:
    if "step" in settings:
        return f"step {settings['step']:.4g}"
    return f"rtol {settings['rtol']:.3g}, atol {settings['atol']:.3g}"


@pytest.fixture
def topdrift_check():
    """Run a method (a registered name, or a Method object registered for this test only)
    through a topdrift case and assert bounds on its errors: energy, p_phi, p_psi, norm, axis,
    theta, phi, psi (maxima over the run) and drift (the energy drift exponent)."""
    check = TopdriftCheck()
    try:
        yield check
    finally:
        check._restore()
