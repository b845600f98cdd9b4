"""`keeps`, one rule for every family (integrators/base.py), checked for every built-in method in
every form it runs in: what it claims to keep to the bit never changes, not by one ulp; what it
claims to keep to round-off moves by at most 4 eps per step; and what it does not claim moves by
more than that at these steps, so that no claim is missing either (an unclaimed invariant kept
by accident would show up here as a claim to add).

The bound for "to round-off" is of our choosing, a few units in the last place per step (the
rule's words); the steps are coarse enough that truncation error, where a method has it, is
orders of magnitude above the bound. Random starts of two demo bodies of our own: a Lagrange top
(every invariant applies) and a heavy body with three different moments and its centre of mass
off every axis (energy, p_phi and |q| apply; p_psi is no invariant of it and claims nothing).
"""

import math
import zlib

import numpy as np
import pytest

from topdrift.integrators import ST_OK, MethodRefused, all_methods
from topdrift.integrators.base import KEEPS
from topdrift.models import RigidBody, body_state, euler_state, invariants_of
from topdrift.models.forms import FORM_BODY, FORM_EULER

EPS = 2.0**-52
PER_STEP = 4.0 * EPS  # the rule's "a few ulps per step"

LAGRANGE = RigidBody(mass=1.0, inertia=(0.9, 0.9, 0.55), com=(0.0, 0.0, 0.1))
ASYMMETRIC = RigidBody(mass=1.0, inertia=(0.9, 0.75, 0.55), com=(0.02, -0.01, 0.1))
BUILTIN = [m for m in all_methods() if m.info.family != "external"]
FORMS = {"euler": FORM_EULER, "body": FORM_BODY}
# Steps (s) at which each order's truncation error is far above the round-off bound (measured:
# the smallest energy error over the starts, 1000 steps, is above 1e-11 for every method that
# does not keep the energy), and at which the Euler form stays clear of the pole.
# The increment of m3 of the implicit midpoint rule at 0.02 s, and of explicit Euler at 0.01 s, is
# below half an ulp of m3 on every start (measured: p_psi never moved in 6000 steps), so their
# rounding shows only at a longer step.
STEP = {
    1: 0.01,
    2: 0.02,
    3: 0.05,
    4: 0.1,
    6: 0.2,
    8: 0.3,
    "leapfrog-tj8": 0.2,
    "leapfrog-tj8-kahan": 0.2,
    "leapfrog-tj8-composed": 0.2,
    "midpoint": 0.05,
    "midpoint-kahan": 0.05,
    "engine-euler": 0.02,
}
# Explicit Euler evaluates m3's rate m1 w2 - m2 w1 once per step, and its rounding reaches m3 on
# about one step in a thousand at these rates (measured): twelve starts show it, six did not.
STARTS = {"engine-euler": 12}


def starts(k, seed, tumble=True):
    """k starts: spinning about the figure axis, and (tumble) every other one tumbling, with
    transverse rates larger than the spin, where m1 w2 - m2 w1 is largest and rounds to nonzero
    most often. A tumbling top passes near the vertical, the pole of the Euler form: only the
    body form takes those."""
    rng = np.random.default_rng(seed)
    out = []
    for i in range(k):
        tumbling = tumble and i % 2 == 1
        transverse, spin = (4.0, (-1.0, 1.0)) if tumbling else (0.5, (3.0, 8.0))
        out.append(
            (
                rng.uniform(-3.0, 3.0),
                rng.uniform(0.8, 1.6),  # the nutation stays clear of both poles of the angles
                rng.uniform(-3.0, 3.0),
                rng.uniform(-transverse, transverse),
                rng.uniform(-transverse, transverse),
                rng.uniform(*spin),
            )
        )
    return out


def applies(body, name):
    return name != "p_psi" or body.lagrange_top


def scale(name, inv0, l0):
    return {"energy": abs(inv0["energy"]), "p_phi": l0, "p_psi": l0, "norm": 1.0}[name]


def changes(method, body, form, start, steps):
    """(largest relative change per invariant over the samples, steps taken)."""
    p = body.params()
    y0 = (euler_state if form == FORM_EULER else body_state)(body, *start)
    l0 = float(np.linalg.norm(body_state(body, *start)[4:]))
    inv0 = invariants_of(form, y0, p)
    if method.info.control == "step":
        h = STEP.get(method.name, STEP[method.info.order])
        settings, horizon = {"step": h}, h * steps
    else:
        settings, horizon = {"rtol": 1e-5, "atol": 1e-8}, 0.02 * steps
    st = method.start(form, p, 0.0, y0, settings)
    worst = dict.fromkeys(KEEPS, 0.0)
    bits = dict.fromkeys(KEEPS, True)
    for t in np.linspace(0.0, horizon, 11)[1:]:
        assert st.advance_to(float(t)) == ST_OK
        inv = invariants_of(form, st.y, p)
        for k in KEEPS:
            bits[k] = bits[k] and inv[k] == inv0[k]
            worst[k] = max(worst[k], abs(inv[k] - inv0[k]) / scale(k, inv0, l0))
    return worst, bits, max(int(st.counters[0]), 1)


CASES = [
    (m.name, form, body_name)
    for m in BUILTIN
    for form in m.info.forms
    for body_name in (("lagrange",) if form == "euler" else ("lagrange", "asymmetric"))
]


@pytest.mark.parametrize("name,form,body_name", CASES)
def test_keeps_what_it_claims_and_no_more(name, form, body_name):
    method = next(m for m in BUILTIN if m.name == name)
    body = LAGRANGE if body_name == "lagrange" else ASYMMETRIC
    try:
        method.check(
            body,
            form,
            {"step": 0.1} if method.info.control == "step" else {"rtol": 1e-5, "atol": 1e-8},
        )
    except MethodRefused as exc:
        pytest.skip(f"refused, as it says: {exc}")
    to_bit, to_roundoff = method.info.keeps_by_form[form]
    # Python right-hand sides are slow: fewer steps for the scipy references.
    steps = 300 if method.info.family == "reference" else 1000
    n_starts = 4 if method.info.family == "reference" else STARTS.get(name, 6)
    moved = set()
    seed = zlib.crc32(f"{name} {form} {body_name}".encode())
    for start in starts(n_starts, seed, tumble=form == "body"):
        worst, bits, taken = changes(method, body, FORMS[form], start, steps)
        moved |= {k for k in KEEPS if not bits[k]}
        bound = PER_STEP * taken
        for k in KEEPS:
            if not applies(body, k):
                continue
            if k in to_bit:
                assert bits[k], f"{name} ({form}) claims {k} to the bit; moved {worst[k]:.2e}"
            elif k in to_roundoff:
                assert worst[k] <= bound, (
                    f"{name} ({form}) claims {k} to round-off; moved {worst[k]:.2e} in {taken} "
                    f"steps, more than 4 eps per step ({bound:.2e})"
                )
            else:
                assert worst[k] > bound, (
                    f"{name} ({form}) keeps {k} ({worst[k]:.2e} in {taken} steps) but does not "
                    "claim it"
                )
    # A claim "to round-off" that never moved would be a claim to the bit in disguise: some
    # start must show the rounding (the tumbling ones do for m3; measured, every method).
    for k in to_roundoff:
        if applies(body, k):
            assert k in moved, f"{name} ({form}): {k} never moved; claim it to the bit"


def test_every_form_claims_what_keeps_says():
    for m in BUILTIN:
        i = m.info
        for form in i.forms:
            assert set(i.keeps) <= set(i.keeps_by_form[form][0]), (m.name, form)
            assert set(i.keeps_roundoff) <= set(i.kept_in(form)), (m.name, form)
        assert not math.isnan(len(i.as_json()["keeps_by_form"]))  # serialisable, every form
        assert set(i.as_json()["keeps_by_form"]) == set(i.forms)


def test_a_claim_that_contradicts_the_forms_is_refused():
    from topdrift.integrators import MethodInfo

    with pytest.raises(ValueError, match="every form"):
        MethodInfo(
            name="overclaim",
            family="external",
            order=2,
            symplectic=False,
            forms=("euler", "body"),
            control="step",
            keeps=("p_psi",),
            compensated=False,
            description="claims p_psi to the bit although its body form keeps it to round-off",
            keeps_by_form={"euler": (("p_psi",), ()), "body": ((), ("p_psi",))},
        )
