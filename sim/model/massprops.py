"""Mass properties of parts, the body and the wheel, from handbook formulas.

Axes of a part: x parallel to the pivot axis, y in the swing plane across the body, z along the
body axis (for wheel parts: radial). Inertias are about the part's own centre, kg m^2.
Sources: standard rigid-body tables (e.g. Meriam & Kraige, Engineering Mechanics: Dynamics,
Appendix D; Gere, Mechanics of Materials). A hollow box (closed thin-walled shell) is the outer
solid box minus the inner one, each by the solid-box formula m (a^2 + b^2) / 12 of the same
tables, at the shell material's density.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


def part_volume(part) -> float | None:
    """Solid volume of a part, m^3, or None when its sizes do not fix one."""
    s = part.shape
    if s == "rod":
        return math.pi * part.radius**2 * part.length if part.radius else None
    if s == "box":
        return part.length * part.width * part.thickness
    if s == "hollow_box":
        return part.length * part.width * part.thickness - math.prod(_inner_box(part))
    if s == "disk":
        return math.pi * part.radius**2 * part.thickness if part.thickness else None
    if s == "ring":
        return math.pi * (part.outer_radius**2 - part.inner_radius**2) * part.thickness if part.thickness else None
    return None


def wheel_part_outer_radius(part) -> float:
    """Largest radius a wheel part reaches from the wheel axis, m (rods and boxes lie radially)."""
    if part.shape == "disk":
        return part.radius
    if part.shape == "ring":
        return part.outer_radius
    if part.shape in ("rod", "box", "hollow_box"):
        return part.at + part.length / 2.0
    return part.at


def _inner_box(part) -> tuple[float, float, float]:
    """The hollow box's cavity: (length, width, thickness), m."""
    return tuple(size - 2.0 * part.wall for size in (part.length, part.width, part.thickness))


def _solid_box_inertia(mass: float, length: float, w: float, t: float) -> np.ndarray:
    """(Ix, Iy, Iz) of a solid box about its centre: m (b^2 + c^2) / 12 about each axis (x along t)."""
    return mass / 12 * np.array([length**2 + w**2, length**2 + t**2, w**2 + t**2])


def part_mass(part) -> float:
    """Mass of one copy, kg: the given mass, else effective density times volume."""
    if part.mass is not None:
        return part.mass
    vol = part_volume(part)
    if vol is None or part.density_kg_m3 is None:
        raise ValueError("part has neither a mass nor a material density with sizes giving a volume")
    return part.density_kg_m3 * vol


def part_inertia(part, mass: float) -> np.ndarray:
    """(Ix, Iy, Iz) about the part's centre, kg m^2."""
    s = part.shape
    if s == "point":
        return np.zeros(3)
    if s == "rod":  # solid cylinder along z; a thin rod when no radius
        r2, l2 = (part.radius or 0.0) ** 2, part.length**2
        ix = mass * (3 * r2 + l2) / 12
        return np.array([ix, ix, mass * r2 / 2])
    if s == "box":
        return _solid_box_inertia(mass, part.length, part.width, part.thickness)
    if s == "hollow_box":  # outer solid box minus the cavity, both at the shell's density
        outer, inner = (part.length, part.width, part.thickness), _inner_box(part)
        density = mass / (math.prod(outer) - math.prod(inner))
        return (_solid_box_inertia(density * math.prod(outer), *outer)
                - _solid_box_inertia(density * math.prod(inner), *inner))
    if s == "disk":  # solid cylinder with its axis along x
        r2, t2 = part.radius**2, (part.thickness or 0.0) ** 2
        d = mass * (3 * r2 + t2) / 12
        return np.array([mass * r2 / 2, d, d])
    if s == "ring":  # hollow cylinder with its axis along x
        rr, t2 = part.outer_radius**2 + part.inner_radius**2, (part.thickness or 0.0) ** 2
        d = mass * (3 * rr + t2) / 12
        return np.array([mass * rr / 2, d, d])
    raise ValueError(f"unknown shape {s!r}")


@dataclass(frozen=True)
class RigidProps:
    """Mass, centre of mass along the body axis, inertia diagonal at the centre of mass (SI)."""

    mass_kg: float
    com_m: float
    inertia_com: tuple[float, float, float]

    def about_pivot_x(self) -> float:
        """Inertia about the pivot axis, kg m^2 (parallel-axis theorem)."""
        return self.inertia_com[0] + self.mass_kg * self.com_m**2


def body_props(parts, *, extra_point_masses=()) -> RigidProps:
    """Combine body parts (centres at `at` along the body axis) and (mass, at) point masses."""
    m_tot, first, ixyz_pivot = 0.0, 0.0, np.zeros(3)
    items = [(part_mass(p) * p.count, part_inertia(p, part_mass(p)) * p.count, p.at) for p in parts]
    items += [(m, np.zeros(3), at) for m, at in extra_point_masses]
    for m, inertia, at in items:
        m_tot += m
        first += m * at
        # parallel-axis: a shift along z adds m*at^2 to Ix and Iy, nothing to Iz
        ixyz_pivot = ixyz_pivot + inertia + np.array([m * at**2, m * at**2, 0.0])
    com = first / m_tot
    at_com = ixyz_pivot - np.array([m_tot * com**2, m_tot * com**2, 0.0])
    return RigidProps(m_tot, com, tuple(float(v) for v in at_com))


def wheel_props(parts, *, rotor_inertia: float = 0.0) -> RigidProps:
    """The wheel about its own axis: Ix is the spin inertia (plus the rotor's), kg m^2.

    A part with `count` copies at radius `at` is spread evenly round the axis: each copy adds
    m*at^2 to the spin inertia and, on average, m*at^2/2 to each diametral inertia.
    """
    m_tot, inertia = 0.0, np.array([rotor_inertia, rotor_inertia / 2, rotor_inertia / 2])
    for p in parts:
        m = part_mass(p)
        own = part_inertia(p, m)
        diam = (own[1] + own[2]) / 2  # a spinning part's diametral inertia, time-averaged
        inertia = inertia + p.count * np.array([own[0] + m * p.at**2, diam + m * p.at**2 / 2, diam + m * p.at**2 / 2])
        m_tot += m * p.count
    return RigidProps(m_tot, 0.0, tuple(float(v) for v in inertia))
