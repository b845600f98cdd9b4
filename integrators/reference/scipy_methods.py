"""scipy's own solvers as reference methods: RK45, DOP853, Radau and LSODA from scipy.integrate,
the OdeSolver classes that solve_ivp drives, with the model's right-hand side wrapped as a plain
Python function. That wrapper is the point: a user sees the library they would otherwise have
used, Python-call overhead and all.

The solver is stepped one step at a time with t_bound = inf, so its step-size controller keeps its
state between advance_to calls and never shortens a step to land on an output time; output times
are reached by the solver's dense_output() of the step that covers them, which never changes the
step sequence.

Counters. steps: accepted steps (one per OdeSolver.step). evals: every call of the wrapped
right-hand side, counted by the wrapper itself; this equals scipy's nfev for RK45, DOP853 and
LSODA, and exceeds it for Radau, whose finite-difference Jacobian calls the function without
counting it in nfev. Every call evaluates the torque: force evaluations are the same count.
DOP853's dense output costs 3 more calls per step that is sampled. rejected:
exact for RK45 and DOP853 (every attempt costs n_stages calls, so attempts = calls / n_stages);
scipy exposes no count for Radau and LSODA, and the counter holds REJECTED_UNKNOWN (-1) there.

snapshot() stores the solver's whole numerical state (everything but its bound functions)
pickled into a uint8 array; restore() rebuilds a fresh solver around this stepper's right-hand
side and puts that state back. A resumed run repeats the same bits (tested for all four).
"""

from __future__ import annotations

import pickle
import types
import warnings

import numpy as np

from topdrift.integrators.base import (
    C_EVALS,
    C_FORCE_EVALS,
    C_REJECTED,
    C_STEPS,
    ST_DIVERGED,
    ST_FAILED,
    ST_OK,
    ST_SINGULAR,
    ST_STEP_UNDERFLOW,
    Method,
    MethodInfo,
    MethodRefused,
    Stepper,
)
from topdrift.models import FORM_NAMES, FORM_SIZE
from topdrift.models.dynamics import rhs, singular

REJECTED_UNKNOWN = -1

# What scipy's solvers keep (the rule: integrators/base.py): Runge-Kutta and linear multistep
# methods keep linear invariants in exact arithmetic (common practice), so as for our own
# Runge-Kutta methods (rk/adaptive.py): p_phi and p_psi to the bit in the Euler form (their rate
# is exactly 0.0 and every update, Newton correction and interpolant of it is 0.0), p_psi to
# round-off in the body form. Measured, 6 random starts each, tests/test_keeps.py.
KEEPS_BY_FORM = {"euler": (("p_phi", "p_psi", "norm"), ()), "body": ((), ("p_psi",))}

_FUNCTION_TYPES = (types.FunctionType, types.MethodType, types.BuiltinFunctionType)


def wrapped_rhs(form: int, params: np.ndarray, calls: list):
    """The model's right-hand side as the plain Python f(t, y) scipy expects."""
    n = FORM_SIZE[form]

    def fun(t, y):
        calls[0] += 1
        if not y.flags.c_contiguous:  # Radau's Jacobian passes columns; keep one specialisation
            y = np.ascontiguousarray(y)
        dy = np.empty(n)
        rhs(form, y, params, dy)
        return dy

    return fun


def _plain_state(obj) -> dict:
    return {k: v for k, v in obj.__dict__.items() if not isinstance(v, _FUNCTION_TYPES)}


def solver_state(solver) -> dict:
    """The numerical state of an OdeSolver: its attributes without the functions bound to it."""
    state = _plain_state(solver)
    if "K_extended" in state:
        state.pop("K")  # a view of K_extended; rebuilt on restore
    if "_lsoda_solver" in state:
        ode = state.pop("_lsoda_solver")
        state["_lsoda_ode"] = _plain_state(ode)  # its _integrator holds the C solver's state
    return state


def apply_state(solver, state: dict) -> None:
    state = dict(state)
    ode_state = state.pop("_lsoda_ode", None)
    solver.__dict__.update(state)
    if "K_extended" in state:
        solver.K = solver.K_extended[: solver.n_stages + 1]
    if ode_state is not None:
        solver._lsoda_solver.__dict__.update(ode_state)


class ReferenceStepper(Stepper):
    def __init__(self, method, form, params, t0, y0, rtol, atol):
        super().__init__(form=form, params=params, t=t0, y=y0.copy())
        self.method_name = method.name
        self.solver_class = method.solver_class
        self.n_stages = method.stages_per_attempt
        self.rtol = rtol
        self.atol = atol
        self.calls = [0]
        self.solver = self._new_solver(t0, y0)
        self.dense = None  # interpolant of the solver's last step, once asked for
        self.message = ""
        if self.n_stages == 0:
            self.counters[C_REJECTED] = REJECTED_UNKNOWN

    def _new_solver(self, t0, y0):
        fun = wrapped_rhs(self.form, self.params, self.calls)
        # The constructor evaluates f for its first step; a bad f shows up in the first step.
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return self.solver_class(fun, t0, y0, np.inf, rtol=self.rtol, atol=self.atol)

    @property
    def nfev(self) -> int:
        """scipy's own count of function evaluations (see the module note on Radau)."""
        return int(self.solver.nfev)

    def _fail(self, status: int, t_good: float, y_good: np.ndarray, message: str) -> int:
        self.counters[C_EVALS] = self.counters[C_FORCE_EVALS] = self.calls[0]
        self.status = status
        self.t_fail = float(t_good)
        self.t = float(t_good)
        self.y = np.array(y_good, dtype=np.float64)
        self.message = message
        return status

    def advance_to(self, t_end: float) -> int:
        if self.status != ST_OK:
            return self.status
        t_end = float(t_end)
        if not t_end >= self.t:
            raise MethodRefused(
                f"{self.method_name}: runs forward only; t_end = {t_end!r} is before t = {self.t!r}"
            )
        if t_end == self.t:
            return ST_OK
        sol = self.solver
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            while sol.t < t_end:
                t_before = float(sol.t)
                y_before = sol.y.copy()
                calls_before = self.calls[0]
                try:
                    msg = sol.step()
                except Exception as exc:  # a library failure is a result, not a crash
                    return self._fail(ST_FAILED, t_before, y_before, f"{type(exc).__name__}: {exc}")
                self.counters[C_EVALS] = self.counters[C_FORCE_EVALS] = self.calls[0]
                if sol.status == "failed":
                    text = str(msg or "")
                    for w in caught:
                        text += f" {w.message}"
                    code = ST_STEP_UNDERFLOW if "step size" in text.lower() else ST_FAILED
                    return self._fail(code, t_before, y_before, text.strip())
                self.counters[C_STEPS] += 1
                if self.n_stages:
                    attempts = (self.calls[0] - calls_before) // self.n_stages
                    self.counters[C_REJECTED] += attempts - 1
                self.dense = None
                if not np.all(np.isfinite(sol.y)):
                    return self._fail(ST_DIVERGED, t_before, y_before, "non-finite state")
                if singular(self.form, np.ascontiguousarray(sol.y)):
                    return self._fail(ST_SINGULAR, t_before, y_before, "singular state")
            if sol.t == t_end:
                self.y = np.array(sol.y, dtype=np.float64)
            else:
                if self.dense is None:
                    self.dense = sol.dense_output()
                    self.counters[C_EVALS] = self.counters[C_FORCE_EVALS] = self.calls[0]
                self.y = np.array(self.dense(t_end), dtype=np.float64)
        self.t = t_end
        return ST_OK

    def snapshot(self) -> dict:
        blob = pickle.dumps(
            {"solver": solver_state(self.solver), "dense": self.dense},
            protocol=pickle.HIGHEST_PROTOCOL,
        )
        return {
            "method": self.method_name,
            "rtol": self.rtol,
            "atol": self.atol,
            "t": self.t,
            "y": self.y.copy(),
            "counters": self.counters.copy(),
            "calls": self.calls[0],
            "status": self.status,
            "t_fail": self.t_fail,
            "solver_state": np.frombuffer(blob, dtype=np.uint8).copy(),
        }

    def restore(self, snap: dict) -> None:
        if (
            snap.get("method") != self.method_name
            or snap.get("rtol") != self.rtol
            or snap.get("atol") != self.atol
        ):
            raise MethodRefused(
                f"{self.method_name}: snapshot is of {snap.get('method')!r} at rtol "
                f"{snap.get('rtol')!r}, atol {snap.get('atol')!r}, not of this run"
            )
        inner = pickle.loads(np.asarray(snap["solver_state"], dtype=np.uint8).tobytes())
        solver = self._new_solver(float(snap["t"]), np.asarray(snap["y"], dtype=np.float64))
        apply_state(solver, inner["solver"])
        self.solver = solver
        self.dense = inner["dense"]
        self.calls[0] = int(snap["calls"])
        self.counters[:] = np.asarray(snap["counters"])
        self.t = float(snap["t"])
        self.y = np.array(snap["y"], dtype=np.float64)
        self.status = int(snap["status"])
        self.t_fail = float(snap["t_fail"])


def _solver(class_name: str):
    # Imported when a run starts, not when the registry loads: scipy.integrate costs about 0.3 s
    # of every process's start-up on top of scipy.special (measured), and most runs never use it.
    from scipy import integrate

    return getattr(integrate, class_name)


class ReferenceMethod(Method):
    def __init__(self, name, class_name, order, fixed_stages, what):
        self.class_name = class_name
        self.fixed_stages = fixed_stages
        self.info = MethodInfo(
            name=name,
            family="reference",
            order=order,
            symplectic=False,
            forms=("euler", "body"),
            control="tolerance",
            keeps=(),
            keeps_roundoff=("p_psi",),
            keeps_by_form=KEEPS_BY_FORM,
            compensated=False,
            description=f"scipy.integrate.{class_name}: {what}, stepped one step at a "
            f"time with a plain Python right-hand side",
            source=f"scipy {_scipy_version()}, scipy.integrate.{class_name}",
        )

    @property
    def solver_class(self):
        return _solver(self.class_name)

    @property
    def stages_per_attempt(self) -> int:
        """Right-hand-side calls per attempted step when fixed (explicit RK), else 0."""
        return int(self.solver_class.n_stages) if self.fixed_stages else 0

    def start(self, form, params, t0, y0, settings) -> Stepper:
        form = int(form)
        if form < 0 or form >= len(FORM_NAMES):
            raise MethodRefused(f"{self.name}: unknown state form code {form!r}")
        checked = self.settings(settings)  # rtol, atol: positive finite floats (base.py)
        y = self.start_state(form, y0)
        p = np.ascontiguousarray(params, dtype=np.float64)
        return ReferenceStepper(self, form, p, float(t0), y, checked["rtol"], checked["atol"])


def _scipy_version() -> str:
    import scipy

    return scipy.__version__


METHODS = [
    ReferenceMethod(
        "scipy-rk45",
        "RK45",
        5,
        True,
        "Dormand-Prince 5(4), explicit, adaptive",
    ),
    ReferenceMethod(
        "scipy-dop853",
        "DOP853",
        8,
        True,
        "Dormand-Prince 8(5,3), explicit, adaptive",
    ),
    ReferenceMethod("scipy-radau", "Radau", 5, False, "Radau IIA, 3 stages, implicit, adaptive"),
    ReferenceMethod(
        "scipy-lsoda",
        "LSODA",
        12,
        False,
        "ODEPACK's LSODA, Adams (orders 1-12) / BDF (1-5) with automatic switching; order "
        "given is the highest Adams order",
    ),
]
