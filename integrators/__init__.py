"""The numerics of topdrift: the method contract (base.py, validation.py), the registry of
built-in and plug-in methods (registry.py), a base for fixed-step plug-ins (fixed_step.py), and
one sub-package per family, each a coefficient table plus a small numba kernel family. Imports
the models' kernels; knows nothing of cases or files."""

# The models first: they point numba's kernel cache at this code's folder (kernel_cache.py).
import topdrift.models  # noqa: F401, I001

from .base import (
    C_EVALS,
    C_FORCE_EVALS,
    C_REJECTED,
    C_STEPS,
    GRID_RTOL,
    N_COUNTERS,
    ST_DIVERGED,
    ST_FAILED,
    ST_NO_CONVERGENCE,
    ST_OK,
    ST_SINGULAR,
    ST_STEP_UNDERFLOW,
    STATUS_NAMES,
    Method,
    MethodInfo,
    MethodRefused,
    Stepper,
    grid_steps,
    whole_steps,
)
from .fixed_step import FixedStepMethod, FixedStepStepper
from .registry import (
    ENTRY_POINT_GROUP,
    UnknownMethod,
    all_methods,
    get,
    origin,
    register,
    unregister,
)
from .validation import Setting, SnapshotRefused

__all__ = [
    "C_EVALS",
    "C_FORCE_EVALS",
    "C_REJECTED",
    "C_STEPS",
    "N_COUNTERS",
    "ST_DIVERGED",
    "ST_FAILED",
    "ST_NO_CONVERGENCE",
    "ST_OK",
    "ST_SINGULAR",
    "ST_STEP_UNDERFLOW",
    "GRID_RTOL",
    "STATUS_NAMES",
    "Method",
    "MethodInfo",
    "MethodRefused",
    "Stepper",
    "grid_steps",
    "whole_steps",
    "FixedStepMethod",
    "FixedStepStepper",
    "Setting",
    "SnapshotRefused",
    "ENTRY_POINT_GROUP",
    "UnknownMethod",
    "all_methods",
    "get",
    "origin",
    "register",
    "unregister",
]
