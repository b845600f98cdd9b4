"""Processed splittings (integrators/splitting/processed.py): the effective order of the output
P K^n P^-1 and the kernel's own order, measured against references of no method family, and
the stepper's promises (samples do not change the steps; a resumed run repeats the bits)."""

import mpmath
import numpy as np
import pytest
from independent_references import attitude_error, exact_attitude, taylor_states

from topdrift.integrators import ST_OK
from topdrift.integrators.splitting.compositions import SplittingTable
from topdrift.integrators.splitting.methods import SplittingMethod
from topdrift.integrators.splitting.processed import METHODS
from topdrift.models import RigidBody, body_state, euler_state
from topdrift.models.exact import LagrangeTop
from topdrift.models.forms import FORM_BODY, FORM_EULER

TOP = RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1))
ASYMMETRIC = RigidBody(1.0, (0.05, 0.046, 0.02), com=(0.01, -0.005, 0.1))
START = (0.3, 0.9, 0.2, 1.0, 0.5, 40.0)  # phi, theta, psi and their rates
T = 1.0  # about 2.5 nutation periods
BY_NAME = {m.name: m for m in METHODS}


def kernel_alone(method):
    """The kernel run as a plain splitting, with no processor: order 2."""
    kick, drift = method.table.kernel()
    table = SplittingTable(
        key="kernel", order=2, kind="splitting", coefficients=tuple(kick), b=tuple(drift)
    )
    return SplittingMethod(table, False)


# --- the order conditions, on matrices ------------------------------------------------------
# Independent of the derivation's algebra: for a linear system y' = (A + B) y the flows are
# matrix exponentials (mpmath at 40 digits), and the effective order p means
# |P K(h)^n P^-1 - exp(T (A + B))| = O(h^p) at T = n h (Butcher's effective order; Blanes,
# Casas and Ros, SIAM J. Sci. Comput. 21 (1999) 711). Random 3 x 3 matrices commute with
# nothing, so every order condition is exercised.


def _sequence_matrix(kick, drift, ea, eb):
    """B(kick_0) A(drift_0) ... B(kick_m), first kick first: the matrix product right to left."""
    m = eb(kick[0])
    for a, b in zip(drift, kick[1:], strict=True):
        m = eb(b) * ea(a) * m
    return m


def _matrix_error(table, n, processed, mats):
    a, b = mats
    h = mpmath.mpf(1) / n
    ea = lambda c: mpmath.expm(a * (h * mpmath.mpf(c)))  # noqa: E731
    eb = lambda c: mpmath.expm(b * (h * mpmath.mpf(c)))  # noqa: E731
    kernel = _sequence_matrix(*table.kernel(), ea, eb)
    out = kernel**n
    if processed:
        post = _sequence_matrix(*table.post(), ea, eb)
        pre = _sequence_matrix(*table.pre(), ea, eb)
        out = post * out * pre
    exact = mpmath.expm(a + b)
    return float(mpmath.mnorm(out - exact, 1))


@pytest.mark.parametrize("name", sorted(BY_NAME))
def test_effective_order_on_matrices(name):
    table = BY_NAME[name].table
    rng = np.random.default_rng(7)
    with mpmath.workdps(40):
        mats = tuple(mpmath.matrix(rng.normal(size=(3, 3)).tolist()) for _ in range(2))
        ns = (16, 32, 64)
        for processed, p in ((True, table.order), (False, 2)):
            e = [_matrix_error(table, n, processed, mats) for n in ns]
            slopes = [np.log2(e[i] / e[i + 1]) for i in range(len(ns) - 1)]
            assert all(abs(s - p) < 0.2 for s in slopes), (processed, e, slopes)


# --- measured orders on the heavy top -------------------------------------------------------


def start_state(body, form):
    return euler_state(body, *START) if form == FORM_EULER else body_state(body, *START)


def reference(body, form):
    """The exact solution (Lagrange top, compared in the attitude) or a 34-digit Taylor-series
    integration (asymmetric body, the whole state): tests/independent_references.py."""
    y0 = start_state(body, form)
    if body.lagrange_top:
        return "exact", exact_attitude(LagrangeTop.from_state(body, form, y0), [T])[0]
    return "state", taylor_states(body, y0, [T])[0]


def error(form, y, ref):
    kind, yr = ref
    if kind == "exact":
        return attitude_error(form, y, yr)
    dq = min(np.max(np.abs(y[:4] - yr[:4])), np.max(np.abs(y[:4] + yr[:4])))  # q ~ -q
    return float(max(dq, np.max(np.abs(y[4:] - yr[4:]))))


# Steps per unit time, chosen from measured local slopes: past the pre-asymptotic regime and
# above round-off (errors 6e-6 .. 1e-10 for order 4 and a factor 16 of steps; 1e-6 .. 3e-13
# for order 6 and a factor 4; the kernel 3e-4 .. 1e-6).
STEPS = {6: (40, 57, 80, 113, 160), 4: (40, 80, 160, 320, 640), 2: (40, 80, 160, 320, 640)}
CASES = [
    pytest.param(TOP, FORM_EULER, id="symmetric-euler"),
    pytest.param(TOP, FORM_BODY, id="symmetric-body"),
    pytest.param(ASYMMETRIC, FORM_BODY, id="asymmetric-body"),
]


def measured(method, body, form, order):
    ref = reference(body, form)
    ns = np.array(STEPS[order], dtype=float)
    if not body.lagrange_top:
        ns = np.round(ns * 1.5)  # the asymmetric body enters the asymptotic regime later
    errs = []
    for n in ns:
        st = method.start(form, body.params(), 0.0, start_state(body, form), {"step": T / n})
        assert st.advance_to(T) == ST_OK
        errs.append(error(form, st.y, ref))
    return np.polyfit(np.log(T / ns), np.log(errs), 1)[0], errs


@pytest.mark.parametrize("body, form", CASES)
@pytest.mark.parametrize("name", sorted(BY_NAME))
def test_processed_output_has_the_effective_order(name, body, form):
    m = BY_NAME[name]
    slope, errs = measured(m, body, form, m.info.order)
    assert abs(slope - m.info.order) < 0.2, (slope, errs)


@pytest.mark.parametrize("body, form", CASES)
@pytest.mark.parametrize("name", sorted(BY_NAME))
def test_kernel_alone_has_order_two(name, body, form):
    slope, errs = measured(kernel_alone(BY_NAME[name]), body, form, 2)
    assert abs(slope - 2.0) < 0.2, (slope, errs)


# --- the stepper ----------------------------------------------------------------------------


@pytest.mark.parametrize("form", [FORM_EULER, FORM_BODY])
@pytest.mark.parametrize("name", sorted(BY_NAME))
def test_samples_and_resume_change_no_bit(name, form):
    """Processing is applied to a copy at each output time: sampling every step, rarely, or
    through a snapshot and a fresh stepper gives the same bits (common practice for a fixed
    step method with a post-processor)."""
    m = BY_NAME[name]
    h = 1e-2
    y0 = start_state(ASYMMETRIC if form == FORM_BODY else TOP, form)
    params = (ASYMMETRIC if form == FORM_BODY else TOP).params()
    straight = m.start(form, params, 0.0, y0, {"step": h})
    assert straight.advance_to(1.0) == ST_OK
    often = m.start(form, params, 0.0, y0, {"step": h})
    for k in range(1, 101):
        assert often.advance_to(k * h) == ST_OK
    half = m.start(form, params, 0.0, y0, {"step": h})
    assert half.advance_to(0.5) == ST_OK
    resumed = m.start(form, params, 0.0, y0, {"step": h})
    resumed.restore(half.snapshot())
    assert resumed.advance_to(1.0) == ST_OK
    assert np.array_equal(often.y, straight.y) and np.array_equal(resumed.y, straight.y)
    # the steps are the same; the processor's evaluations differ with the number of samples
    assert resumed.counters[0] == straight.counters[0] == often.counters[0] == 100


def test_output_at_the_start_is_the_start():
    m = next(iter(METHODS))
    y0 = start_state(TOP, FORM_BODY)
    st = m.start(FORM_BODY, TOP.params(), 0.0, y0, {"step": 1e-2})
    assert st.advance_to(0.0) == ST_OK
    assert np.array_equal(st.y, y0)


def test_registry_metadata():
    from topdrift.integrators import get as get_method

    assert sorted(BY_NAME) == ["leapfrog-proc4", "leapfrog-proc6"]
    for name, m in BY_NAME.items():
        i = get_method(name).info
        assert get_method(name) is m
        assert i.family == "splitting" and i.symplectic and i.control == "step"
        assert i.order == m.table.order and i.forms == ("euler", "body")
        assert i.keeps == ("p_psi",) and i.keeps_roundoff == ("p_phi", "norm")
        assert not i.compensated and "Blanes, Casas and Ros" in i.source


@pytest.mark.parametrize("name", sorted(BY_NAME))
def test_a_backward_run_returns_to_the_start_to_the_effective_order(name):
    """A stepper whose first request is earlier starts its kernel from P(-h)^-1 y (P depends
    on the sign of the step): forward to T and back again misses the start by O(h^p) at least
    (a method of effective order p, either way; common practice)."""
    m = BY_NAME[name]
    y0 = start_state(ASYMMETRIC, FORM_BODY)
    miss = []
    for h in (1e-2, 5e-3):
        fwd = m.start(FORM_BODY, ASYMMETRIC.params(), 0.0, y0, {"step": h})
        assert fwd.advance_to(T) == ST_OK
        back = m.start(FORM_BODY, ASYMMETRIC.params(), T, fwd.y, {"step": h})
        assert back.advance_to(0.0) == ST_OK
        miss.append(float(np.max(np.abs(back.y - y0))))
    assert miss[0] / miss[1] > 0.9 * 2**m.info.order, miss


@pytest.mark.parametrize("name", ["leapfrog-proc4", "leapfrog-proc6"])
def test_an_off_axis_rotor_is_refused_as_by_the_other_exact_flow_splittings(name):
    # The kernel's free flow is the exact one, which has no form for a rotor off the figure axis
    # (models/flows.py): refused with the reason, as leapfrog itself refuses it, not run wrong.
    from topdrift.integrators import MethodRefused, get
    from topdrift.models import FORM_BODY, RigidBody, body_state

    body = RigidBody(mass=1.0, inertia=(1.0, 1.0, 0.6), com=(0.0, 0.0, 0.1), rotor=(0.1, 0.0, 0.8))
    y0 = body_state(body, 0.0, 0.3, 0.0, 0.5, 0.0, 10.0)
    for method in (get("leapfrog"), get(name)):
        with pytest.raises(MethodRefused, match="rotor off the figure axis"):
            method.start(FORM_BODY, body.params(), 0.0, y0, {"step": 1e-3})
