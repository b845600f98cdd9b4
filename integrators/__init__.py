"""The numerics of topdrift: a registry of pluggable methods, each a coefficient table plus a
small numba kernel family. Imports the models' kernels; knows nothing of cases or files."""

from .base import (
    C_EVALS,
    C_REJECTED,
    C_STEPS,
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
    name_key,
    snapshot_kinds,
)
from .registry import ENTRY_POINT_GROUP, UnknownMethod, all_methods, get, register

__all__ = [
    "C_EVALS",
    "C_REJECTED",
    "C_STEPS",
    "N_COUNTERS",
    "ST_DIVERGED",
    "ST_FAILED",
    "ST_NO_CONVERGENCE",
    "ST_OK",
    "ST_SINGULAR",
    "ST_STEP_UNDERFLOW",
    "STATUS_NAMES",
    "Method",
    "MethodInfo",
    "MethodRefused",
    "Stepper",
    "name_key",
    "snapshot_kinds",
    "ENTRY_POINT_GROUP",
    "UnknownMethod",
    "all_methods",
    "get",
    "register",
]
