"""The compiled float64 elliptic functions (models/elliptic.py) against mpmath at 30 digits:
mpmath.elliprf, elliprj, elliprc (Carlson's symmetric integrals) and mpmath.ellipfun (sn, cn
of the Jacobi amplitude), including moduli within 1e-16 of 1 (next to a separatrix).

Measured: R_F within 5.6e-16 and R_J within 7.2e-16 relative on 2000 random arguments over six
decades; sn and cn within 1.7e-15 absolute for |u| <= 5 (about 4 ulps of am)."""

import math

import mpmath as mp
import numpy as np

from topdrift.models.elliptic import am, rc, rf, rj

mp.mp.dps = 30
RNG = np.random.default_rng(1)


def test_carlson_integrals_against_mpmath():
    worst = [0.0, 0.0, 0.0]
    for _ in range(2000):
        x, y, z, p = (float(RNG.random() * 10 ** RNG.uniform(-3, 3)) for _ in range(4))
        for k, (ours, ref) in enumerate(
            (
                (rf(x, y, z), mp.elliprf(x, y, z)),
                (rj(x, y, z, p), mp.elliprj(x, y, z, p)),
                (rc(x, y), mp.elliprc(x, y)),
            )
        ):
            worst[k] = max(worst[k], float(abs((ours - ref) / ref)))
    assert worst[0] < 1.5e-15 and worst[1] < 2e-15 and worst[2] < 1.5e-15, worst
    # one argument zero (the complete integrals): R_F(0, mc, 1) = K(1 - mc)
    assert abs(rf(0.0, 0.3, 1.0) - float(mp.ellipk(0.7))) < 4e-16 * float(mp.ellipk(0.7))


def test_amplitude_against_mpmath_ellipfun():
    worst = 0.0
    for _ in range(1500):
        m = float(RNG.random())
        if RNG.random() < 0.3:
            m = 1.0 - 10.0 ** RNG.uniform(-16, -1)  # next to m = 1, where asin would lose digits
        u = float(RNG.uniform(-5.0, 5.0))
        phi = am(u, m, 1.0 - m)
        sn, cn = mp.ellipfun("sn", u, m=m), mp.ellipfun("cn", u, m=m)
        worst = max(worst, float(abs(math.sin(phi) - sn)), float(abs(math.cos(phi) - cn)))
    assert worst < 4e-15, worst
    # m = 1 exactly: the Gudermannian, sn = tanh (A&S 16.15)
    assert abs(math.sin(am(1.3, 1.0, 0.0)) - math.tanh(1.3)) < 2e-16
    # m = 0: am(u) = u
    assert abs(am(2.5, 0.0, 1.0) - 2.5) < 1e-15
