"""The physics of topdrift: bodies, state forms, equations of motion, exact sub-flows,
invariants and the exact solution of the symmetric heavy top. Knows nothing of integrators."""

# First, before any kernel is decorated: where numba caches them (kernel_cache.py says why).
from . import kernel_cache  # noqa: F401, I001

from .body import STANDARD_GRAVITY, BodyError, RigidBody
from .forms import (
    FORM_BODY,
    FORM_EULER,
    FORM_NAMES,
    FORM_SIZE,
    SingularAttitude,
    body_state,
    euler_rates,
    euler_state,
    form_code,
    to_body,
    to_euler_form,
)
from .invariants import INVARIANT_NAMES, invariants_of

__all__ = [
    "STANDARD_GRAVITY",
    "BodyError",
    "RigidBody",
    "FORM_BODY",
    "FORM_EULER",
    "FORM_NAMES",
    "FORM_SIZE",
    "SingularAttitude",
    "body_state",
    "euler_rates",
    "euler_state",
    "form_code",
    "to_body",
    "to_euler_form",
    "INVARIANT_NAMES",
    "invariants_of",
]
