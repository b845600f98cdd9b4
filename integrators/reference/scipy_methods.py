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

Snapshots are numbers only. RK45, DOP853 and Radau: the solver's state is a named, whitelisted
set of its scalars and arrays per class (STATE below); restore() checks each for kind, shape and
finiteness, and what the solver's own code relies on (times in order, a positive step, LAPACK
pivots in range: scipy's lu_solve does not check them, and an out-of-range pivot writes outside
the matrix, measured: heap corruption), then builds a fresh solver around this stepper's
right-hand side and puts the state into it; the interpolant of the last step is computed again
from that state. A resumed run repeats the same bits (tested for the three). LSODA: its state
is numbers too, but among them are the compiled solver's own offsets into its work arrays
(scipy's C translation of ODEPACK keeps them in state_ints); handed back from a file they would
steer compiled code (measured: any of 9 of its 48 entries set to 1e8 crashes the process with a
segmentation fault), and topdrift cannot check them without depending on that code's layout.
So an LSODA run is not resumed: resume_refusal() says why, and the runner runs it again from
its start (the same bits, the solver being deterministic).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

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
    STATUS_NAMES,
    Method,
    MethodInfo,
    MethodRefused,
    Stepper,
)
from topdrift.integrators.validation import (
    FINITE_WHILE_OK,
    SnapshotRefused,
    check_snapshot,
    snapshot_identity,
    stepper_fields,
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

SOLVER_STATUSES = ("running", "finished", "failed")  # OdeSolver.status, stored as its index


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


@dataclass(frozen=True)
class Field:
    """One attribute of a scipy solver that is part of its state.

    kind: "float", "int", "bool", "status" (scalars); "f8" (a float64 array); "lu" / "lu_complex"
    (the (lu, piv) pair of scipy.linalg.lu_factor, real or complex). shape: of an array, in terms
    of the state size n ("n", "n,n", "3,n"), or "" for the shape of the array the constructor
    makes. optional: None until the first step (stored with a `<key>_set` flag). after_step: an
    array the constructor leaves uninitialised (np.empty) and the first step fills: stored as
    zeros, and not put back, until then. in_place: copied into the constructor's array, because
    a view of it exists (DOP853's K) or the solver hands that very array on."""

    attr: str
    kind: str
    shape: str = ""
    optional: bool = False
    after_step: bool = False
    in_place: bool = False

    @property
    def key(self) -> str:
        return f"solver_{self.attr}"


_ODE_SOLVER = (
    Field("t", "float"),
    Field("y", "f8", "n"),
    Field("t_old", "float", optional=True),
    Field("nfev", "int"),
    Field("njev", "int"),
    Field("nlu", "int"),
    Field("status", "status"),
)
_RUNGE_KUTTA = _ODE_SOLVER + (
    Field("y_old", "f8", "n", optional=True),
    Field("f", "f8", "n"),
    Field("h_abs", "float"),
    Field("h_previous", "float", optional=True),
)

# The whitelist: every attribute of each solver class that changes as it steps.
STATE = {
    "RK45": _RUNGE_KUTTA + (Field("K", "f8", after_step=True, in_place=True),),
    # K is the first n_stages + 1 rows of K_extended, the stages of the last step; the rows
    # after them are the dense output's extra stages, which dense_output() computes from K.
    "DOP853": _RUNGE_KUTTA + (Field("K", "f8", after_step=True, in_place=True),),
    "Radau": _ODE_SOLVER
    + (
        Field("y_old", "f8", "n", optional=True),
        Field("f", "f8", "n"),
        Field("h_abs", "float"),
        Field("h_abs_old", "float", optional=True),
        Field("error_norm_old", "float", optional=True),
        Field("Z", "f8", "3,n", optional=True),
        Field("J", "f8", "n,n"),
        Field("jac_factor", "f8", "n"),
        Field("current_jac", "bool"),
        Field("LU_real", "lu", optional=True),
        Field("LU_complex", "lu_complex", optional=True),
    ),
}

# Attributes set by the constructor from the settings alone, or functions bound to the solver:
# the fresh solver restore() builds has them already. DOP853's K_extended holds K (a view of its
# first rows) and the dense output's extra stages, made from K when asked for; Radau's sol is the
# interpolant of its last step, computed again from Z, t_old, t and y_old.
_FIXED_COMMON = (
    "_fun",
    "fun",
    "fun_single",
    "fun_vectorized",
    "t_bound",
    "vectorized",
    "direction",
    "n",
    "rtol",
    "atol",
    "max_step",
)
FIXED = {
    "RK45": _FIXED_COMMON + ("error_exponent",),
    "DOP853": _FIXED_COMMON + ("error_exponent", "K_extended"),
    "Radau": _FIXED_COMMON + ("I", "jac", "lu", "solve_lu", "newton_tol", "sol"),
}

LSODA_REFUSAL = (
    "scipy's LSODA keeps the offsets of its compiled solver into its work arrays in its state, "
    "which topdrift cannot check; an LSODA run is not resumed from a file"
)


def _dims(shape: str, n: int) -> tuple[int, ...]:
    return tuple(n if d == "n" else int(d) for d in shape.split(","))


def _as_array(v, dtype) -> np.ndarray:
    return np.array(v, dtype=dtype, copy=True)


def solver_entries(solver, fields, n: int) -> dict:
    """The solver's state as snapshot entries (numbers and float64/int64 arrays only)."""
    stepped = solver.t_old is not None
    out: dict = {}
    for fl in fields:
        v = getattr(solver, fl.attr)
        if fl.optional:
            out[f"{fl.key}_set"] = int(v is not None)
        if fl.kind == "float":
            out[fl.key] = 0.0 if v is None else float(v)
        elif fl.kind == "int":
            out[fl.key] = int(v)
        elif fl.kind == "bool":
            out[fl.key] = int(bool(v))
        elif fl.kind == "status":
            out[fl.key] = SOLVER_STATUSES.index(v)
        elif fl.kind == "f8":
            if v is None:
                v = np.zeros(_dims(fl.shape, n))
            elif fl.after_step and not stepped:
                v = np.zeros_like(v)
            out[fl.key] = _as_array(v, np.float64)
        else:  # lu, lu_complex
            lu, piv = (np.zeros((n, n)), np.arange(n)) if v is None else v
            if fl.kind == "lu":
                out[f"{fl.key}_lu"] = _as_array(lu, np.float64)
            else:
                lu = np.asarray(lu, dtype=np.complex128)
                out[f"{fl.key}_lu_re"] = _as_array(lu.real, np.float64)
                out[f"{fl.key}_lu_im"] = _as_array(lu.imag, np.float64)
            out[f"{fl.key}_piv"] = _as_array(piv, np.int64)
    return out


def solver_field_specs(entries: dict) -> dict:
    """validation.check_snapshot's field specs for solver entries, from entries of the same
    solver class and state size (their names, kinds and shapes). Floats must be finite while
    the run is ok; a failed run's last attempt may have met non-finite values."""
    specs = {}
    for key, v in entries.items():
        if isinstance(v, np.ndarray):
            specs[key] = (v.dtype.type, v.shape, FINITE_WHILE_OK)
        elif isinstance(v, float):
            specs[key] = (float, (), FINITE_WHILE_OK)
        else:
            specs[key] = (int, ())
    return specs


def _flag(snap: dict, key: str) -> bool:
    v = snap[key]
    if v not in (0, 1):
        raise SnapshotRefused(f"snapshot field {key!r} is {v}, not 0 or 1")
    return v == 1


def _pivots(snap: dict, key: str, n: int) -> np.ndarray:
    piv = snap[key]
    # LAPACK's getrf leaves row i swapped with a row at or below it (LAPACK Users' Guide,
    # xGETRF: "row i of the matrix was interchanged with row IPIV(i)", IPIV(i) >= i), 0-based in
    # scipy; anything else would make lu_solve swap rows outside the matrix.
    if piv.shape != (n,) or not np.all((piv >= np.arange(n)) & (piv < n)):
        raise SnapshotRefused(f"snapshot field {key!r} holds pivots outside the matrix")
    return piv.astype(np.int32)


def solver_values(snap: dict, fields, n: int) -> dict:
    """Decode and check the solver entries of a snapshot (kinds and shapes checked already by
    check_snapshot): attribute name -> value to set, None for an unset optional one or an
    after-step array of a solver that has not stepped."""
    out = {}
    stepped = _flag(snap, "solver_t_old_set")
    for fl in fields:
        if (fl.optional and not _flag(snap, f"{fl.key}_set")) or (fl.after_step and not stepped):
            out[fl.attr] = None
            continue
        if fl.kind == "float":
            out[fl.attr] = np.float64(snap[fl.key])
        elif fl.kind == "int":
            v = snap[fl.key]
            if v < 0:
                raise SnapshotRefused(f"snapshot field {fl.key!r} is negative")
            out[fl.attr] = int(v)
        elif fl.kind == "bool":
            out[fl.attr] = _flag(snap, fl.key)
        elif fl.kind == "status":
            v = snap[fl.key]
            if not 0 <= v < len(SOLVER_STATUSES):
                raise SnapshotRefused(f"snapshot field {fl.key!r} is {v}, not a solver status")
            out[fl.attr] = SOLVER_STATUSES[v]
        elif fl.kind == "f8":
            out[fl.attr] = snap[fl.key].copy()
        elif fl.kind == "lu":
            out[fl.attr] = (snap[f"{fl.key}_lu"].copy(), _pivots(snap, f"{fl.key}_piv", n))
        else:
            lu = snap[f"{fl.key}_lu_re"] + 1j * snap[f"{fl.key}_lu_im"]
            out[fl.attr] = (lu, _pivots(snap, f"{fl.key}_piv", n))
    return out


def _check_times(v: dict, t: float, class_name: str) -> None:
    """What stepping and dense output rely on: the solver at or past the output time t, its
    last step (if any) covering t and of positive length, a positive step to try next."""
    t_old, ts = v["t_old"], v["t"]
    ok = ts >= t and v["h_abs"] > 0.0
    if t_old is None:
        ok = ok and ts == t
    else:
        ok = ok and t_old <= t and t_old < ts
        ok = ok and v["y_old"] is not None
        if class_name == "Radau":
            ok = ok and v["Z"] is not None and v["h_abs_old"] is not None
        else:
            ok = ok and v["h_previous"] is not None
    if not ok:
        raise SnapshotRefused("snapshot holds no consistent solver state (times, steps)")


_unknown_state: dict[str, str] = {}


def unknown_state(class_name: str) -> str:
    """'' when the installed scipy's solver class holds no state beyond STATE and FIXED, else
    the names it holds that are neither (a scipy release that added some): such a solver is not
    resumed, for a snapshot would miss them. Looked at once per process, on a small problem."""
    if class_name in _unknown_state:
        return _unknown_state[class_name]
    if class_name not in STATE:
        return "no state whitelist for this solver"
    cls = _solver(class_name)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sol = cls(lambda t, y: -y, 0.0, np.ones(2), np.inf, rtol=1e-6, atol=1e-9)
        for _ in range(3):
            sol.step()
    known = {fl.attr for fl in STATE[class_name]} | set(FIXED[class_name])
    have = set(vars(sol))
    words = []
    if have - known:
        words.append("unknown state " + ", ".join(sorted(have - known)))
    if known - have:
        words.append("no attribute " + ", ".join(sorted(known - have)))
    _unknown_state[class_name] = "; ".join(words)
    return _unknown_state[class_name]


class ReferenceStepper(Stepper):
    def __init__(self, method, form, params, t0, y0, rtol, atol):
        super().__init__(form=form, params=params, t=t0, y=y0.copy())
        self.method_name = method.name
        self.solver_class = method.solver_class
        self.fields = STATE.get(method.class_name, ())
        self.refusal = method.resume_refusal
        self.n_stages = method.stages_per_attempt
        self.rtol = rtol
        self.atol = atol
        self.settings = {"rtol": rtol, "atol": atol}  # as the method checked them
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
        """Plain numbers, strings and arrays: the identity (method, form, rtol and atol), the
        stepper's own values, and the solver's state as the whitelist for its class names it
        (STATE; none for LSODA, which is never resumed)."""
        snap = snapshot_identity(self.method_name, self.form, self.settings)
        snap.update(
            t=self.t,
            y=self.y.copy(),
            counters=self.counters.copy(),
            calls=self.calls[0],
            status=self.status,
            t_fail=self.t_fail,
            dense_ready=int(self.dense is not None),
        )
        if self.fields:
            snap.update(solver_entries(self.solver, self.fields, self.y.shape[0]))
        return snap

    def _field_specs(self) -> dict:
        own = solver_entries(self.solver, self.fields, self.y.shape[0]) if self.fields else {}
        return {
            **stepper_fields(len(self.counters)),
            "y": (np.float64, self.y.shape),
            "calls": (int, ()),
            "dense_ready": (int, ()),
            **solver_field_specs(own),
        }

    def restore(self, snap: dict) -> None:
        """Take back a snapshot; nothing of this stepper changes unless every check passes."""
        check_snapshot(
            snap,
            method=self.method_name,
            form=self.form,
            settings=self.settings,
            fields=self._field_specs(),
        )
        why = self.refusal()
        if why:
            raise SnapshotRefused(f"{self.method_name}: cannot resume: {why}")
        name = self.method_name
        try:
            n = self.y.shape[0]
            v = solver_values(snap, self.fields, n)
            _check_times(v, snap["t"], self.solver_class.__name__)
            dense_ready = _flag(snap, "dense_ready")
            if dense_ready and v["t_old"] is None:
                raise SnapshotRefused("snapshot has an interpolant but no step")
            if snap["calls"] < 0 or not 0 <= snap["status"] < len(STATUS_NAMES):
                raise SnapshotRefused("snapshot holds a negative count or an unknown status")
        except SnapshotRefused as exc:
            raise SnapshotRefused(f"{name}: {exc}") from None
        solver = self._new_solver(float(v["t"]), v["y"].copy())
        for fl in self.fields:
            value = v[fl.attr]
            if value is None and fl.after_step:
                continue  # not stepped: the constructor's array is never read before it is filled
            if fl.in_place:
                getattr(solver, fl.attr)[...] = value
            else:
                setattr(solver, fl.attr, value)
        if self.solver_class.__name__ == "Radau" and v["t_old"] is not None:
            solver.sol = solver._compute_dense_output()  # the interpolant Newton starts from
        dense = solver.dense_output() if dense_ready else None
        solver.nfev = v["nfev"]  # the interpolant's evaluations were counted when first made
        self.solver = solver
        self.dense = dense
        self.calls[0] = int(snap["calls"])
        self.counters[:] = snap["counters"]
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

    def resume_refusal(self) -> str:
        if self.class_name == "LSODA":
            return LSODA_REFUSAL
        unknown = unknown_state(self.class_name)
        if unknown:
            return (
                f"scipy {_scipy_version()}'s {self.class_name} does not match the state "
                f"topdrift stores ({unknown})"
            )
        return ""

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
