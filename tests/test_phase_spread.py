"""The round-off study's phase spread (benchmarks/choose/roundoff.py): the members' attitude
errors as rotation vectors in space axes, and their spread about the mean, against scipy's
rotations (scipy.spatial.transform.Rotation, an outside implementation)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from topdrift.benchmarks.choose.roundoff import space_error_vectors, spread_about_mean


def scalar_first(r: Rotation) -> np.ndarray:
    x = r.as_quat()  # scipy: scalar last
    return np.column_stack((x[:, 3], x[:, 0], x[:, 1], x[:, 2]))


@pytest.mark.parametrize("seed", range(4))
def test_error_vectors_are_scipys_rotation_vectors_in_space_axes(seed):
    rng = np.random.default_rng(seed)
    exact = Rotation.random(8, random_state=seed)
    small = Rotation.from_rotvec(rng.normal(size=(8, 3)) * 1e-6)
    member = small * exact  # R_m = R_small R_e: the error rotation acts in space axes
    qm, qe = scalar_first(member), scalar_first(exact)
    qm[::2] *= -1.0  # q and -q are one attitude
    got = space_error_vectors(qm, qe)
    want = (member * exact.inv()).as_rotvec()
    # first order in the angle: |2 sin(a/2) - a| ~ a^3 / 24, 4e-20 here
    assert np.max(np.abs(got - want)) < 1e-15


def test_spread_removes_what_the_members_share():
    rng = np.random.default_rng(7)
    own = rng.normal(size=(16, 3)) * 1e-12
    shared = np.array([3e-9, -1e-9, 2e-9])
    assert spread_about_mean(own + shared) == pytest.approx(spread_about_mean(own), rel=1e-6)
    # and for independent members it estimates their RMS (K - 1 in the divisor)
    big = rng.normal(size=(20000, 3))
    assert spread_about_mean(big) == pytest.approx(math.sqrt(3.0), rel=0.02)
