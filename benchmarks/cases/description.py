"""What `topdrift describe` reports about a case, as one plain dict (the JSON contract in
docs/case-files.md); the command renders the same dict as text."""

from __future__ import annotations

import math

from topdrift.benchmarks.cases.schema import Case
from topdrift.models import FORM_BODY, invariants_of

EULER_KEYS = ("phi", "theta", "psi", "p_phi", "p_theta", "p_psi")


def body_kind(case: Case) -> str:
    b = case.body
    if b.field.plugin:
        return "plugin-field"
    if not b.uniform_gravity:
        return b.field.kind
    if b.lagrange_top:
        return "lagrange-gyrostat" if b.has_rotor else "lagrange"
    if b.has_rotor:
        return "gyrostat"
    if b.kovalevskaya:
        return "kovalevskaya"
    if all(c == 0.0 for c in b.com):
        return "free"
    return "symmetric" if b.symmetric else "asymmetric"


def _finite_or_none(value):
    """JSON has no NaN or infinity: a quantity that does not exist is null."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def exact_summary(case: Case) -> tuple[dict | None, str | None]:
    """(summary, reason it is unavailable). (None, None) when the body is not a Lagrange top."""
    if not case.body.lagrange_top:
        return None, None
    from topdrift.models.exact import ExactUnavailable, LagrangeTop

    try:
        top = LagrangeTop.from_state(case.body, FORM_BODY, case.body_state())
        summary = top.summary()
    except ExactUnavailable as exc:
        return None, str(exc)
    return {k: _finite_or_none(v) for k, v in summary.items()}, None


def _p_psi(case: Case, value: float) -> float | None:
    b = case.body
    if b.field.plugin:
        return value if b.keeps_p_psi else None
    if not b.uniform_gravity or (b.has_rotor and not b.lagrange_top):
        return None
    return value


def plugin_summary(case: Case) -> dict | None:
    """A plug-in field's own words: what it is, its keys, whether its torque is a gradient."""
    f = case.body.field
    if not f.plugin:
        return None
    from topdrift.models.field_plugins import load

    plugin = load(f.kind)
    return {
        "kind": f.kind,
        "description": str(plugin.description),
        "keys": {k: str(v) for k, v in plugin.keys.items()},
        "conservative": f.conservative,
        "keeps": sorted(({"energy"} if f.conservative else set()) | set(f.keeps())),
    }


def summarise(case: Case) -> dict:
    yb = case.body_state()
    if case.body.lagrange_top and math.sin(case.start.theta) != 0.0:
        ye = case.euler_state()
        euler = dict(zip(EULER_KEYS, (float(v) for v in ye), strict=True))
        euler_reason = None
    else:
        euler = None
        euler_reason = (
            "the figure axis starts on the vertical, where the Euler angles are singular"
            if case.body.lagrange_top
            else "the euler form needs uniform gravity (phi cyclic)"
            if not case.body.uniform_gravity
            else "the euler form needs I1 = I2 and the centre of mass and any rotor on axis 3"
        )
    inv = invariants_of(FORM_BODY, yb, case.body.params())
    wheel = None
    if case.wheel is not None:
        mass, transverse, axial, com = case.wheel.totals()
        wheel = {
            "spec": case.wheel.as_dict(),
            "parts": [p.as_dict() for p in case.wheel.parts()],
            "totals": {"mass": mass, "transverse": transverse, "axial": axial, "com": com},
        }
    exact, reason = exact_summary(case)
    out = {
        "case": {
            "name": case.name,
            "description": case.description,
            "path": str(case.path) if case.path else None,
            "format_version": case.format_version,
            "horizon": case.horizon,
            "samples": case.samples,
            "run": case.run,
        },
        "kind": body_kind(case),
        "body": case.body.as_dict(),
        "wheel": wheel,
        "start": {
            "angles": {k: getattr(case.start, k) for k in ("theta", "phi", "psi")},
            "rates": {k: getattr(case.start, k) for k in ("theta_rate", "phi_rate", "psi_rate")},
            "body": {"q": [float(v) for v in yb[:4]], "m": [float(v) for v in yb[4:]]},
            "euler": euler,
        },
        "invariants": {
            # in the gravity gradient: the Jacobi integral of the orbit frame; null for a
            # plug-in field whose torque is no gradient
            "energy": inv["energy"] if case.body.keeps_energy else None,
            # L.e_z is a momentum of the motion in uniform gravity only (null in another field,
            # unless a plug-in field says it keeps it)
            "p_phi": inv["p_phi"] if case.body.keeps_p_phi else None,
            # an off-axis rotor turns m3, and so does the gravity gradient: p_psi is then no
            # momentum of the motion (null); a plug-in field says
            "p_psi": _p_psi(case, inv["p_psi"]),
            "kovalevskaya": inv["kovalevskaya"] if case.body.kovalevskaya else None,
        },
        "exact": exact,
    }
    plugin = plugin_summary(case)
    if plugin is not None:
        out["plugin_field"] = plugin
    if euler_reason is not None:
        out["start"]["euler_unavailable"] = euler_reason
    if reason is not None:
        out["exact_unavailable"] = reason
    return out
