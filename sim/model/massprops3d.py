"""Mass properties in 3D: full inertia tensors of placed and rotated parts, the body and the wheels.

Frames: the body frame has x along the hinge axis, z along the body axis (from the pivot toward a
part's scalar `at`), y completing a right-handed frame; the pivot is its origin. A part's own axes
are those of `sim.model.massprops` (x the pivot axis, y the swing plane, z the body axis), turned
by its `rotation` R = Rz(c) Ry(b) Rx(a) (angles about the body's fixed axes, x first).

Formulas (Meriam & Kraige, Engineering Mechanics: Dynamics, Appendix B "Mass moments of inertia",
products of inertia and rotation of axes; Goldstein, Classical Mechanics, ch. 5):
- rotation of axes: I' = R I R^T;
- parallel axes: I_O = I_C + m (|r|^2 E - r r^T), r from O to the centre of mass C;
- a wheel spinning on the unit axis a: I = I_s a a^T + I_t (E - a a^T), I_s its spin inertia and
  I_t its inertia about a diameter through its centre.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .massprops import part_inertia, part_mass, wheel_props


def rotation_matrix(rotation) -> np.ndarray:
    """R = Rz(c) Ry(b) Rx(a) for `rotation` = a (about x) or (a, b, c), rad."""
    a, b, c = rotation if isinstance(rotation, tuple) else (rotation, 0.0, 0.0)
    return rot_z(c) @ rot_y(b) @ rot_x(a)


def rot_x(a: float) -> np.ndarray:
    ca, sa = math.cos(a), math.sin(a)
    return np.array([[1.0, 0.0, 0.0], [0.0, ca, -sa], [0.0, sa, ca]])


def rot_y(b: float) -> np.ndarray:
    cb, sb = math.cos(b), math.sin(b)
    return np.array([[cb, 0.0, sb], [0.0, 1.0, 0.0], [-sb, 0.0, cb]])


def rot_z(c: float) -> np.ndarray:
    cc, sc = math.cos(c), math.sin(c)
    return np.array([[cc, -sc, 0.0], [sc, cc, 0.0], [0.0, 0.0, 1.0]])


def shifted(inertia_com: np.ndarray, mass: float, r: np.ndarray) -> np.ndarray:
    """Parallel-axis theorem: the inertia about a point at -r from the centre of mass, kg m^2."""
    r = np.asarray(r, dtype=float)
    return inertia_com + mass * (float(r @ r) * np.eye(3) - np.outer(r, r))


@dataclass(frozen=True)
class MassProps3D:
    """Mass kg, centre of mass m (body frame, from the pivot), inertia about the centre of mass kg m^2."""

    mass_kg: float
    com_m: tuple[float, float, float]
    inertia_com_kg_m2: tuple[tuple[float, float, float], ...]

    def about_pivot(self) -> np.ndarray:
        """The inertia tensor about the pivot (body frame), kg m^2."""
        return shifted(np.array(self.inertia_com_kg_m2), self.mass_kg, np.array(self.com_m))


def combine(items) -> MassProps3D:
    """Lump (mass kg, centre m, inertia about its own centre kg m^2) items into one rigid body."""
    items = list(items)
    m_tot = sum(m for m, _, _ in items)
    first = sum((m * np.asarray(c, dtype=float) for m, c, _ in items), np.zeros(3))
    com = first / m_tot if m_tot > 0 else np.zeros(3)
    about = sum((shifted(np.asarray(i, dtype=float), m, np.asarray(c, dtype=float) - com) for m, c, i in items),
                np.zeros((3, 3)))
    return MassProps3D(float(m_tot), _tuple3(com), tuple(_tuple3(row) for row in about))


def part_items(part) -> list[tuple[float, np.ndarray, np.ndarray]]:
    """A body part as one (mass, centre, inertia tensor) item; `count` copies coincide."""
    m = part_mass(part)
    rot = rotation_matrix(part.rotation)
    inertia = rot @ np.diag(part_inertia(part, m)) @ rot.T
    at = np.array(part.at if isinstance(part.at, tuple) else (0.0, 0.0, part.at))
    return [(m * part.count, at, inertia * part.count)]


def body_mass_properties(sc) -> MassProps3D:
    """The body (parts and every wheel's motor stator at its wheel centre), without the wheels,
    with `body.inertia_correction` added about x at the centre of mass (as on the planar path)."""
    items = [it for p in sc.body.parts for it in part_items(p)]
    for i, w in enumerate(sc.wheel_list):
        stator = sc.wheel_motor(i).mass
        if stator:
            items.append((stator, np.array(wheel_centre(w)), np.zeros((3, 3))))
    props = combine(items)
    corr = sc.body.inertia_correction
    if corr:
        inertia = np.array(props.inertia_com_kg_m2)
        inertia[0, 0] += corr
        props = MassProps3D(props.mass_kg, props.com_m, tuple(_tuple3(r) for r in inertia))
    return props


def wheel_centre(w) -> tuple[float, float, float]:
    """A wheel's centre in the body frame, m (a scalar `at` lies on the body axis)."""
    at = w.at
    return at if isinstance(at, tuple) else (0.0, 0.0, float(at))


def wheel_axis(w) -> tuple[float, float, float]:
    """A wheel's unit spin axis in the body frame (the hinge axis x for `wheel:`)."""
    axis = np.array(getattr(w, "axis", (1.0, 0.0, 0.0)), dtype=float)
    return _tuple3(axis / np.linalg.norm(axis))


def wheel_inertias(w, *, rotor_inertia: float) -> tuple[float, float, float]:
    """(mass kg, spin inertia, transverse inertia about a diameter through the centre, kg m^2),
    the spin inertia with the wheel's `inertia_correction` added."""
    props = wheel_props(w.parts, rotor_inertia=rotor_inertia)
    return props.mass_kg, props.inertia_com[0] + w.inertia_correction, props.inertia_com[1]


def wheel_tensor(spin: float, transverse: float, axis) -> np.ndarray:
    """A wheel's inertia tensor about its centre in the body frame: I_s a a^T + I_t (E - a a^T)."""
    a = np.asarray(axis, dtype=float)
    aa = np.outer(a, a)
    return spin * aa + transverse * (np.eye(3) - aa)


def _tuple3(v) -> tuple[float, float, float]:
    return tuple(float(x) for x in v)
