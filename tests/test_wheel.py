"""The wheel builder: part formulas against a handbook table, and the assembled body against an
independent point-mass sum."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from topdrift.models import BodyError
from topdrift.models.wheel import (
    WheelSpec,
    demo_wheel,
    hoop_moments,
    parallel_axis,
    rod_moment_centre,
    rod_moment_end,
    solid_cylinder_moments,
)

M, R, L = 1.7, 0.23, 0.61  # arbitrary test values


# Reference values: the table "Moments of inertia of various bodies" found in standard physics
# texts (e.g. Halliday, Resnick and Walker, Fundamentals of Physics, table 10-2) [from memory] and
# engineering handbooks (Marks' Standard Handbook for Mechanical Engineers, sec. 3); from memory.
def test_hoop_about_axis_and_diameter():
    axial, diam = hoop_moments(M, R)
    assert axial == pytest.approx(M * R**2, rel=1e-15)  # table: hoop about central axis, M R^2
    assert diam == pytest.approx(M * R**2 / 2, rel=1e-15)  # table: about any diameter, M R^2 / 2


def test_hoop_about_tangent_in_its_plane():
    # Table (same source): thin ring about a tangent line in its plane, 3/2 M R^2.
    _, diam = hoop_moments(M, R)
    assert parallel_axis(diam, M, R) == pytest.approx(1.5 * M * R**2, rel=1e-15)


def test_solid_cylinder_about_axis_and_central_diameter():
    axial, trans = solid_cylinder_moments(M, R, L)
    assert axial == pytest.approx(M * R**2 / 2, rel=1e-15)  # table: about its axis, M R^2 / 2
    # table: about a central diameter, M R^2 / 4 + M L^2 / 12
    assert trans == pytest.approx(M * R**2 / 4 + M * L**2 / 12, rel=1e-15)


def test_solid_cylinder_about_end_diameter():
    # Table (same source): about a diameter of an end face, M R^2 / 4 + M L^2 / 3.
    _, trans = solid_cylinder_moments(M, R, L)
    assert parallel_axis(trans, M, L / 2) == pytest.approx(M * R**2 / 4 + M * L**2 / 3, rel=1e-14)


def test_thin_rod_about_centre_and_end():
    assert rod_moment_centre(M, L) == pytest.approx(M * L**2 / 12, rel=1e-15)  # table: M L^2/12
    assert rod_moment_end(M, L) == pytest.approx(M * L**2 / 3, rel=1e-15)  # table: M L^2 / 3
    # Steiner's theorem joins the two rows of the table: L^2/12 + (L/2)^2 = L^2/3.
    assert parallel_axis(rod_moment_centre(M, L), M, L / 2) == pytest.approx(
        rod_moment_end(M, L), rel=1e-15
    )


def test_parallel_axis_against_direct_integral():
    # A rod's moment about a parallel axis at distance d from its centre, integrated directly:
    # integral of (x^2 + d^2) dm over x in [-L/2, L/2] (scipy quadrature, independent of the code).
    from scipy.integrate import quad

    d = 0.37
    direct, _ = quad(lambda x: (M / L) * (x * x + d * d), -L / 2, L / 2)
    assert parallel_axis(rod_moment_centre(M, L), M, d) == pytest.approx(direct, rel=1e-13)


# ----------------------------------------------------------------------------- the assembly


def _point_masses(spec: WheelSpec, k_rod: int = 600, n_hoop: int = 720):
    """The wheel as a cloud of point masses (positions about the pivot, weights), from the
    geometry alone: hoops sampled in azimuth, rods by the midpoint rule along their length, the
    hub by Gauss-Legendre in radius and length and equal steps in azimuth."""
    xs, ws = [], []
    d = spec.wheel_offset
    ang = 2 * np.pi * (np.arange(n_hoop) + 0.5) / n_hoop
    for m, r in ((spec.rim_mass, spec.rim_radius), (spec.tyre_mass, spec.tyre_radius)):
        xs.append(np.column_stack([r * np.cos(ang), r * np.sin(ang), np.full(n_hoop, d)]))
        ws.append(np.full(n_hoop, m / n_hoop))
    t = (np.arange(k_rod) + 0.5) / k_rod
    for j in range(spec.spoke_count):
        a = 2 * np.pi * j / spec.spoke_count
        u = np.array([math.cos(a), math.sin(a), 0.0])
        z0 = d + (0.5 if j % 2 == 0 else -0.5) * spec.flange_spacing
        p0 = spec.flange_radius * u + np.array([0, 0, z0])
        p1 = spec.rim_radius * u + np.array([0, 0, d])
        xs.append(p0 + t[:, None] * (p1 - p0))
        ws.append(np.full(k_rod, spec.spoke_mass_each / k_rod))
    xs.append(np.column_stack([np.zeros(k_rod), np.zeros(k_rod), t * spec.axle_length]))
    ws.append(np.full(k_rod, spec.axle_mass / k_rod))
    g, gw = np.polynomial.legendre.leggauss(8)
    rr = 0.5 * spec.hub_radius * (g + 1)
    wr = 0.5 * spec.hub_radius * gw * rr  # area element r dr
    zz = d + 0.5 * spec.hub_length * g
    wz = 0.5 * spec.hub_length * gw
    na = 16
    aa = 2 * np.pi * np.arange(na) / na
    R_, A_, Z_ = np.meshgrid(rr, aa, zz, indexing="ij")
    W_ = wr[:, None, None] * np.full(na, 2 * np.pi / na)[None, :, None] * wz[None, None, :]
    W_ = W_ / W_.sum() * spec.hub_mass  # uniform density
    xs.append(np.column_stack([(R_ * np.cos(A_)).ravel(), (R_ * np.sin(A_)).ravel(), Z_.ravel()]))
    ws.append(W_.ravel())
    return np.vstack(xs), np.concatenate(ws)


def _tensor(x, w):
    r2 = np.einsum("ij,ij->i", x, x)
    return np.einsum("i,i", w, r2) * np.eye(3) - np.einsum("i,ij,ik->jk", w, x, x)


def test_demo_totals_add_up():
    spec = demo_wheel()
    parts = spec.parts()
    mass, i1, i3, l = spec.totals()
    masses = (
        spec.rim_mass
        + spec.tyre_mass
        + spec.hub_mass
        + spec.spoke_count * spec.spoke_mass_each
        + spec.axle_mass
    )
    assert mass == pytest.approx(masses, rel=1e-15)
    assert i3 == pytest.approx(sum(p.axial for p in parts), rel=1e-15)
    body = spec.body()
    assert body.inertia[0] == body.inertia[1]  # symmetric by construction
    assert body.lagrange_top
    assert body.com[2] == pytest.approx(l) and l > 0
    # The axial moment is dominated by rim and tyre: sum of m r^2 of the two hoops (hand check).
    hoops = spec.rim_mass * spec.rim_radius**2 + spec.tyre_mass * spec.tyre_radius**2
    assert 0.9 * i3 < hoops < i3


@pytest.mark.parametrize(
    "changes",
    [{}, {"flange_spacing": 0.0}, {"spoke_count": 4, "axle_mass": 0.0, "tyre_mass": 0.0}],
)
def test_builder_matches_point_mass_sum(changes):
    spec = dataclasses.replace(demo_wheel(), **changes)
    x, w = _point_masses(spec)
    tensor = _tensor(x, w)
    body = spec.body()
    scale = body.inertia[2]
    # Midpoint rule on rods: relative error ~ 1 / (12 k^2), about 2e-7 at k = 600.
    np.testing.assert_allclose(np.diag(tensor), body.inertia, rtol=1e-6)
    off = tensor - np.diag(np.diag(tensor))
    assert np.max(np.abs(off)) < 1e-12 * scale  # principal axes are the body axes
    assert tensor[0, 0] == pytest.approx(tensor[1, 1], rel=1e-12)  # I1 = I2 by symmetry
    com = (w[:, None] * x).sum(axis=0) / w.sum()
    assert w.sum() == pytest.approx(body.mass, rel=1e-12)
    np.testing.assert_allclose(com, body.com, atol=1e-12)


@pytest.mark.parametrize(
    ("field", "value", "words"),
    [
        ("rim_mass", 0.0, "must be positive"),
        ("tyre_mass", -0.1, "must not be negative"),
        ("hub_radius", float("nan"), "must be finite"),
        ("spoke_count", 31, "even"),
        ("spoke_count", 32.0, "integer"),
        ("tyre_radius", 0.2, "inside the rim"),
        ("flange_radius", 0.4, "smaller than rim_radius"),
        ("wheel_offset", 0.3, "beyond the end of the axle"),
        ("flange_spacing", 0.2, "longer than the hub"),
        ("axle_length", "long", "expected a number"),
    ],
)
def test_builder_refuses_bad_fields_naming_them(field, value, words):
    with pytest.raises(BodyError) as err:
        dataclasses.replace(demo_wheel(), **{field: value})
    msg = str(err.value)
    assert msg.startswith(f"{field}: ") and words in msg and "\n" not in msg
