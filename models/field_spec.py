"""The field a case names, as a value: its kind and its constants, checked. The kernels that
evaluate it are in fields.py; the parameter slots it fills are in body.py. A kind other than the
two built-in ones is a plug-in field of the entry-point group topdrift.fields
(field_plugins.py), whose constants its own params() gives from the case's [field] table."""

from __future__ import annotations

import math
from dataclasses import dataclass

from . import field_plugins

FIELD_UNIFORM = 0
FIELD_GRAVITY_GRADIENT = 1
FIELD_KINDS = ("uniform-gravity", "gravity-gradient")


def known_kinds() -> tuple[str, ...]:
    """The built-in kinds and then the plug-in fields installed here."""
    return FIELD_KINDS + field_plugins.names()


class FieldError(ValueError):
    """A field description that cannot be; the message names the key."""


@dataclass(frozen=True)
class Field:
    """kind: one of known_kinds(); orbit_rate: the mean motion n (rad/s) of the circular orbit,
    only for the gravity gradient (0.0 otherwise). A plug-in field's table: its [field] keys and
    values as the case gave them, (key, value) pairs; constants: what its params() made of them
    (the parameter slots P_FIELD_C0..), filled in here."""

    kind: str = "uniform-gravity"
    orbit_rate: float = 0.0
    table: tuple = ()
    constants: tuple = ()

    def __post_init__(self) -> None:
        if self.kind not in known_kinds():
            raise FieldError(
                f"kind: no field {self.kind!r} is built in or installed; expected one of "
                f"{', '.join(known_kinds())}"
            )
        if self.plugin:
            self._plugin_constants()
        elif self.table or self.constants:
            raise FieldError(
                f"{self.table[0][0] if self.table else 'constants'}: the "
                f"{self.kind} field takes no such key"
            )
        n = self.orbit_rate
        if isinstance(n, bool) or not isinstance(n, (int, float)):
            raise FieldError(f"orbit_rate: expected a number, got {type(n).__name__}")
        n = float(n)
        if self.kind == "gravity-gradient":
            if not math.isfinite(n) or n <= 0.0:
                raise FieldError(
                    f"orbit_rate: the mean motion of the orbit must be positive and finite, "
                    f"got {n!r}"
                )
        elif n != 0.0:
            raise FieldError("orbit_rate: uniform gravity has no orbit; leave orbit_rate out")
        object.__setattr__(self, "orbit_rate", n)

    def _plugin_constants(self) -> None:
        if self.orbit_rate != 0.0:
            raise FieldError(f"orbit_rate: the {self.kind} field has no orbit; leave it out")
        try:
            constants = field_plugins.constants_of(self.kind, dict(self.table))
        except field_plugins.PluginFieldError as exc:
            raise FieldError(f"kind: {exc}") from None
        except (ValueError, TypeError, KeyError) as exc:
            text = str(exc).strip("'\"")
            raise FieldError(text if ": " in text else f"kind: {self.kind}: {text}") from None
        object.__setattr__(self, "constants", constants)

    @property
    def plugin(self) -> bool:
        """A field of the entry-point group topdrift.fields, not a built-in one."""
        return self.kind not in FIELD_KINDS

    @property
    def code(self) -> int:
        if self.plugin:
            return field_plugins.codes()[self.kind]
        return FIELD_KINDS.index(self.kind)

    @property
    def conservative(self) -> bool:
        """Its torque is the gradient of a potential of the attitude (the built-in ones are)."""
        return not self.plugin or field_plugins.load(self.kind).conservative

    @property
    def turning_frame(self) -> bool:
        """The case's frame turns relative to inertial space (the gravity gradient's orbit
        frame); uniform gravity and the plug-in fields are written in inertial axes."""
        return self.kind == "gravity-gradient"

    def keeps(self) -> frozenset[str]:
        """Which of p_phi and p_psi the field itself leaves invariant (the body must allow
        them too: p_psi needs I1 = I2). Uniform gravity keeps both, the gravity gradient
        neither; a plug-in field says."""
        if self.uniform:
            return frozenset({"p_phi", "p_psi"})
        if not self.plugin:
            return frozenset()
        return field_plugins.kept_invariants(self.kind, self.constants)

    @property
    def uniform(self) -> bool:
        return self.kind == "uniform-gravity"

    def as_dict(self) -> dict:
        if self.plugin:
            return {
                "kind": self.kind,
                "orbit_rate": 0.0,
                "table": {k: (list(v) if isinstance(v, tuple) else v) for k, v in self.table},
                "constants": list(self.constants),
                "conservative": self.conservative,
            }
        return {"kind": self.kind, "orbit_rate": self.orbit_rate}


UNIFORM_GRAVITY = Field()
