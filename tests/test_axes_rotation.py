"""The free rotation split into rotations about the principal axes (models/flows.py,
free_body_axes), checked against the same splitting written in the quaternion's canonical
variables, computed independently in mpmath at 40 digits.

Source: Miller, Eleftheriou, Pattnaik, Ndirango, Newns and Martyna, J. Chem. Phys. 116 (2002)
8649, the free-rotor part of their symplectic quaternion scheme (from memory): with the
conjugate momentum p = 2 q (0, m) (quaternion product, m the body angular momentum) and
P_k x = x (0, e_k), the flow of T_k = (p . P_k q)^2 / (8 I_k) over a time h is

    zeta = p . P_k q / (4 I_k),   q <- cos(zeta h) q + sin(zeta h) P_k q,
                                  p <- cos(zeta h) p + sin(zeta h) P_k p,

and one free step is the sequence of axes 3, 2, 1, 2, 3 with times h/2, h/2, h, h/2, h/2.
Nothing below shares code with topdrift's kernel: the map is applied to (q, p), not to (q, m),
and m is read back as the vector part of conj(q) p / 2.
"""

from __future__ import annotations

import mpmath as mp
import numpy as np
import pytest

from topdrift.models import RigidBody
from topdrift.models.flows import free_body_axes, turn_principal

mp.mp.dps = 40

BODIES = [
    RigidBody(1.0, (0.05, 0.046, 0.02), com=(0.0, 0.0, 0.0)),  # asymmetric
    RigidBody(1.0, (0.05, 0.05, 0.02), com=(0.0, 0.0, 0.1)),  # symmetric (gravity unused here)
]


def qmul(a, b):
    a0, a1, a2, a3 = a
    b0, b1, b2, b3 = b
    return [
        a0 * b0 - a1 * b1 - a2 * b2 - a3 * b3,
        a0 * b1 + a1 * b0 + a2 * b3 - a3 * b2,
        a0 * b2 - a1 * b3 + a2 * b0 + a3 * b1,
        a0 * b3 + a1 * b2 - a2 * b1 + a3 * b0,
    ]


def unit(k):
    e = [mp.mpf(0)] * 4
    e[k + 1] = mp.mpf(1)
    return e


def miller_turn(k, h, q, p, inertia):
    pk_q = qmul(q, unit(k))
    pk_p = qmul(p, unit(k))
    zeta = mp.fsum(a * b for a, b in zip(p, pk_q, strict=True)) / (4 * inertia[k])
    c, s = mp.cos(zeta * h), mp.sin(zeta * h)
    return [c * a + s * b for a, b in zip(q, pk_q, strict=True)], [
        c * a + s * b for a, b in zip(p, pk_p, strict=True)
    ]


def miller_free_step(h, y, inertia):
    q = [mp.mpf(float(v)) for v in y[:4]]
    m = [mp.mpf(float(v)) for v in y[4:7]]
    p = [2 * v for v in qmul(q, [mp.mpf(0), *m])]
    for k, f in ((2, 0.5), (1, 0.5), (0, 1.0), (1, 0.5), (2, 0.5)):
        q, p = miller_turn(k, mp.mpf(h) * mp.mpf(f), q, p, inertia)
    conj = [q[0], -q[1], -q[2], -q[3]]
    n2 = mp.fsum(v * v for v in q)
    m = [v / (2 * n2) for v in qmul(conj, p)[1:]]
    return q, m


def random_body_state(rng):
    q = rng.normal(size=4)
    q /= np.linalg.norm(q)
    m = rng.normal(size=3) * 0.05
    return np.concatenate([q, m])  # the body form's state (q, m)


@pytest.mark.parametrize("body", BODIES, ids=["asymmetric", "symmetric"])
@pytest.mark.parametrize("seed", range(6))
def test_one_step_matches_the_canonical_form(body, seed):
    rng = np.random.default_rng(seed)
    p = body.params()
    inertia = [mp.mpf(float(v)) for v in body.inertia]
    y = random_body_state(rng)
    h = float(rng.uniform(0.01, 0.5))
    got = y.copy()
    free_body_axes(h, got, p)
    q, m = miller_free_step(h, y, inertia)
    scale = max(1.0, float(np.max(np.abs(y[4:7]))))
    for i in range(4):
        assert abs(got[i] - float(q[i])) < 8e-16, (i, got[i], q[i])
    for i in range(3):
        assert abs(got[4 + i] - float(m[i])) < 8e-16 * scale, (i, got[4 + i], m[i])


@pytest.mark.parametrize("k", range(3))
def test_each_turn_keeps_its_own_momentum_component_and_the_norms(k):
    # The flow of m_k^2 / (2 I_k) alone: m_k, |m| and |q| are its invariants (common practice).
    body = BODIES[0]
    p = body.params()
    y = random_body_state(np.random.default_rng(10 + k))
    m0 = y[4:7].copy()
    for _ in range(1000):
        turn_principal(k, 0.3, y, p)
    assert y[4 + k] == m0[k]  # never written
    assert abs(np.linalg.norm(y[4:7]) / np.linalg.norm(m0) - 1.0) < 1e-13
    assert abs(np.linalg.norm(y[:4]) - 1.0) < 1e-13
