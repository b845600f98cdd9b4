"""A bicycle-wheel gyroscope built from its geometry: the rigid body about its pivot.

Layout, all along the figure axis (body axis 3), measured from the pivot at the axle's free end:

    pivot (z = 0) ---- axle (thin rod, z = 0 .. axle_length) ----
                              wheel centre plane at z = wheel_offset

The wheel is four parts centred on the axle at z = wheel_offset: the rim and the tyre as thin hoops
at their radii, the hub as a solid cylinder (hub_length along the axle), and the spokes as thin
straight rods running radially from a hub flange (radius flange_radius) to the rim. The spokes
alternate between two flanges at z = wheel_offset +- flange_spacing / 2 and all meet the rim in
the centre plane (a dished, radially laced wheel; the tangential offset of a crossed lacing is left
out). With an even number of spokes, at least four, spaced equally in azimuth, the wheel's inertia
about the axle is a symmetric tensor: I1 = I2 exactly, not merely to round-off.

Every part's moments are the standard ones (any handbook table of moments of inertia) moved to
the pivot with the parallel-axis theorem.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields

from .body import STANDARD_GRAVITY, BodyError, RigidBody

# ----------------------------------------------------------------------------- part formulas


def hoop_moments(mass: float, radius: float) -> tuple[float, float]:
    """(axial, diametral) moments of a thin hoop about its centre: m r^2 and m r^2 / 2."""
    axial = mass * radius * radius
    return axial, 0.5 * axial


def solid_cylinder_moments(mass: float, radius: float, length: float) -> tuple[float, float]:
    """(axial, transverse) moments of a solid cylinder about its centre:
    m r^2 / 2 about its axis, m (3 r^2 + L^2) / 12 about a diameter of its middle section."""
    r2 = radius * radius
    return 0.5 * mass * r2, mass * (3.0 * r2 + length * length) / 12.0


def rod_moment_centre(mass: float, length: float) -> float:
    """Thin rod about a perpendicular axis through its middle: m L^2 / 12."""
    return mass * length * length / 12.0


def rod_moment_end(mass: float, length: float) -> float:
    """Thin rod about a perpendicular axis through one end: m L^2 / 3."""
    return mass * length * length / 3.0


def parallel_axis(moment_about_com: float, mass: float, distance: float) -> float:
    """Moment about an axis parallel to one through the centre of mass, `distance` away."""
    return moment_about_com + mass * distance * distance


def radial_spoke_moments(
    mass: float, inner: float, outer: float, axial_offset: float
) -> tuple[float, float, float]:
    """Second moments of one straight thin spoke from (inner, 0, axial_offset) to (outer, 0, 0),
    about the wheel centre: (S_rr, S_zz, S_rz) with S = integral of x x^T dm.

    For a uniform rod from a to b, S = m (a a^T + b b^T) / 3 + m (a b^T + b a^T) / 6.
    """
    s_rr = mass * (inner * inner + inner * outer + outer * outer) / 3.0
    s_zz = mass * axial_offset * axial_offset / 3.0
    s_rz = mass * axial_offset * (2.0 * inner + outer) / 6.0
    return s_rr, s_zz, s_rz


# ----------------------------------------------------------------------------- the wheel


@dataclass(frozen=True)
class Part:
    """One part of the wheel: its mass, the height of its centre of mass above the pivot along
    axis 3, and its moments about axis 3 (axial) and about a pivot axis normal to axis 3
    (transverse, parallel-axis theorem applied)."""

    name: str
    mass: float
    com: float
    axial: float
    transverse: float

    def as_dict(self) -> dict:
        return asdict(self)


# Field -> (must be strictly positive?, what it is). Masses of everything but the rim may be
# zero, so that a wheel without tyre, spokes or axle can be studied; lengths may not.
_FIELDS_DOC = {
    "rim_mass": "mass of the rim, kg",
    "rim_radius": "radius of the rim's hoop (its mass centroid), m",
    "tyre_mass": "mass of tyre and tube, kg",
    "tyre_radius": "radius of the tyre's hoop (its mass centroid), m",
    "hub_mass": "mass of the hub, kg",
    "hub_radius": "radius of the hub's solid cylinder, m",
    "hub_length": "length of the hub's solid cylinder along the axle, m",
    "spoke_count": "number of spokes (even, at least 4)",
    "spoke_mass_each": "mass of one spoke, kg",
    "flange_radius": "radius at which the spokes leave the hub flanges, m",
    "flange_spacing": "axial distance between the two hub flanges, m",
    "axle_mass": "mass of the axle, kg",
    "axle_length": "length of the axle from the pivot to its far end, m",
    "wheel_offset": "distance from the pivot to the wheel's centre plane, m",
}


def _number(name: str, value) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise BodyError(f"{name}: expected a number, got {type(value).__name__}")
    value = float(value)
    if not math.isfinite(value):
        raise BodyError(f"{name}: must be finite, got {value}")
    return value


def _positive(name: str, value) -> float:
    value = _number(name, value)
    if value <= 0.0:
        raise BodyError(f"{name}: must be positive, got {value}")
    return value


def _not_negative(name: str, value) -> float:
    value = _number(name, value)
    if value < 0.0:
        raise BodyError(f"{name}: must not be negative, got {value}")
    return value


@dataclass(frozen=True)
class WheelSpec:
    """The builder's fields (SI units: kg, m); see the module docstring for the layout."""

    rim_mass: float
    rim_radius: float
    tyre_mass: float
    tyre_radius: float
    hub_mass: float
    hub_radius: float
    hub_length: float
    spoke_count: int
    spoke_mass_each: float
    flange_radius: float
    flange_spacing: float
    axle_mass: float
    axle_length: float
    wheel_offset: float

    def __post_init__(self) -> None:
        clean = {
            "rim_mass": _positive("rim_mass", self.rim_mass),
            "rim_radius": _positive("rim_radius", self.rim_radius),
            "tyre_mass": _not_negative("tyre_mass", self.tyre_mass),
            "tyre_radius": _positive("tyre_radius", self.tyre_radius),
            "hub_mass": _not_negative("hub_mass", self.hub_mass),
            "hub_radius": _positive("hub_radius", self.hub_radius),
            "hub_length": _positive("hub_length", self.hub_length),
            "spoke_mass_each": _not_negative("spoke_mass_each", self.spoke_mass_each),
            "flange_radius": _positive("flange_radius", self.flange_radius),
            "flange_spacing": _not_negative("flange_spacing", self.flange_spacing),
            "axle_mass": _not_negative("axle_mass", self.axle_mass),
            "axle_length": _positive("axle_length", self.axle_length),
            "wheel_offset": _positive("wheel_offset", self.wheel_offset),
        }
        n = self.spoke_count
        if isinstance(n, bool) or not isinstance(n, int):
            raise BodyError(f"spoke_count: expected an integer, got {type(n).__name__}")
        # Fewer than four, or an odd count split over two flanges, would not be axisymmetric.
        if n < 4 or n % 2:
            raise BodyError(f"spoke_count: must be an even number of at least 4, got {n}")
        c = clean
        if c["tyre_radius"] < c["rim_radius"]:
            raise BodyError(
                f"tyre_radius: {c['tyre_radius']} m is inside the rim (rim_radius "
                f"{c['rim_radius']} m); the tyre sits on the rim"
            )
        if c["hub_radius"] >= c["rim_radius"]:
            raise BodyError(
                f"hub_radius: {c['hub_radius']} m must be smaller than rim_radius "
                f"{c['rim_radius']} m"
            )
        if c["flange_radius"] >= c["rim_radius"]:
            raise BodyError(
                f"flange_radius: {c['flange_radius']} m must be smaller than rim_radius "
                f"{c['rim_radius']} m"
            )
        if c["flange_spacing"] > c["hub_length"]:
            raise BodyError(
                f"flange_spacing: {c['flange_spacing']} m is longer than the hub "
                f"(hub_length {c['hub_length']} m)"
            )
        if c["wheel_offset"] > c["axle_length"]:
            raise BodyError(
                f"wheel_offset: {c['wheel_offset']} m is beyond the end of the axle "
                f"(axle_length {c['axle_length']} m)"
            )
        for k, v in clean.items():
            object.__setattr__(self, k, v)

    @classmethod
    def field_names(cls) -> tuple[str, ...]:
        return tuple(f.name for f in fields(cls))

    @staticmethod
    def field_doc(name: str) -> str:
        return _FIELDS_DOC[name]

    def as_dict(self) -> dict:
        return asdict(self)

    @property
    def spoke_length(self) -> float:
        dr = self.rim_radius - self.flange_radius
        dz = 0.5 * self.flange_spacing
        return math.hypot(dr, dz)

    def parts(self) -> list[Part]:
        """The five parts with their moments about the pivot."""
        d = self.wheel_offset
        out = []
        for name, m, r in (
            ("rim", self.rim_mass, self.rim_radius),
            ("tyre", self.tyre_mass, self.tyre_radius),
        ):
            axial, diam = hoop_moments(m, r)
            out.append(Part(name, m, d, axial, parallel_axis(diam, m, d)))

        axial, trans = solid_cylinder_moments(self.hub_mass, self.hub_radius, self.hub_length)
        out.append(Part("hub", self.hub_mass, d, axial, parallel_axis(trans, self.hub_mass, d)))

        # Spokes: half leave the flange at +s/2, half at -s/2, so their centre of mass is in the
        # centre plane; equal spacing in azimuth averages cos^2 and sin^2 to 1/2 each.
        n = self.spoke_count
        ms = self.spoke_mass_each
        s_rr, s_zz, _ = radial_spoke_moments(
            ms, self.flange_radius, self.rim_radius, 0.5 * self.flange_spacing
        )
        axial = n * s_rr
        trans_centre = n * (0.5 * s_rr + s_zz)
        out.append(Part("spokes", n * ms, d, axial, parallel_axis(trans_centre, n * ms, d)))

        la = self.axle_length
        out.append(Part("axle", self.axle_mass, 0.5 * la, 0.0, rod_moment_end(self.axle_mass, la)))
        return out

    def totals(self) -> tuple[float, float, float, float]:
        """(mass, I1 = I2 about the pivot, I3, distance l of the centre of mass from the pivot)."""
        parts = self.parts()
        mass = sum(p.mass for p in parts)
        transverse = sum(p.transverse for p in parts)
        axial = sum(p.axial for p in parts)
        com = sum(p.mass * p.com for p in parts) / mass
        return mass, transverse, axial, com

    def body(self, gravity: float = STANDARD_GRAVITY) -> RigidBody:
        """The wheel as a rigid body about its pivot, centre of mass on +axis 3."""
        mass, transverse, axial, com = self.totals()
        return RigidBody(
            mass=mass, inertia=(transverse, transverse, axial), com=(0.0, 0.0, com), gravity=gravity
        )


def demo_wheel() -> WheelSpec:
    """A 700C road wheel on an extended steel axle, held at a pivot at the axle's free end, 9 cm
    out from the hub: a classroom-style gyroscope. Numbers are a realistic scenario of our own.

    The rim is ISO 5775 622 mm bead-seat diameter (bead seat radius 311 mm); the rim's box section
    puts its mass centroid a few millimetres inside the bead seat, the tyre (28 mm wide, with tube)
    a little over a centimetre outside it.
    """
    return WheelSpec(
        rim_mass=0.48,  # aluminium clincher rim
        rim_radius=0.305,
        tyre_mass=0.38,  # 28 mm tyre 0.28 kg plus butyl tube 0.10 kg
        tyre_radius=0.325,
        hub_mass=0.32,
        hub_radius=0.018,
        hub_length=0.100,
        spoke_count=32,
        spoke_mass_each=0.0065,  # 2.0 mm steel spoke, about 290 mm
        flange_radius=0.0225,  # 45 mm flange pitch circle
        flange_spacing=0.055,
        axle_mass=0.22,  # 12 mm steel rod, 0.25 m long
        axle_length=0.25,
        wheel_offset=0.14,  # pivot to wheel centre plane; the hub's near end is 9 cm out
    )
