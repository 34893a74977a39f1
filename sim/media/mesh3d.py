"""Flat-faced meshes of a 3D device's parts for the clip painter (`sim.media.scene3d`).

A mesh is a list of faces in one rigid frame; each face is a convex polygon (vertex rows, m),
its outward normal, an RGB colour (0..1), an opacity and whether it may be skipped when it faces
away from the camera (closed solids) or not (see-through shells, marks drawn on both sides).

Part frames follow `sim.model.scenario.Part`: x along `thickness` (the pivot axis), y along `width`,
z along `length`; disks and rings have their axis along x, rods along z. Wheel frames have x on
the spin axis, origin at the wheel's centre; a wheel part's `at` is its distance from the axis
(copies spread round it), boxes and rods lying radially (along the part's z).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..model.massprops3d import rotation_matrix, rot_x

SEGMENTS = 28          # polygon sides of a round part: smooth enough at clip sizes, cheap to sort


@dataclass(frozen=True)
class Face:
    """One convex polygon: `verts` (k, 3) m in its mesh's frame, unit `normal`, `rgb` 0..1,
    `alpha` 0..1, `cull` (skip when facing away), `bias` m (drawn as if this much nearer)."""

    verts: np.ndarray
    normal: np.ndarray
    rgb: tuple
    alpha: float = 1.0
    cull: bool = True
    bias: float = 0.0
    outline: tuple | None = None


def moved(faces: list, rot: np.ndarray, shift) -> list:
    """Faces turned by `rot` then shifted by `shift` (m)."""
    shift = np.asarray(shift, dtype=float)
    return [Face(f.verts @ rot.T + shift, rot @ f.normal, f.rgb, f.alpha, f.cull, f.bias, f.outline) for f in faces]


def box(half, rgb, *, alpha: float = 1.0, outline=None) -> list:
    """A box centred on the origin, half extents (hx, hy, hz) m along x, y, z."""
    faces = []
    for axis in range(3):
        for sign in (1.0, -1.0):
            n = np.zeros(3)
            n[axis] = sign
            u, v = [a for a in range(3) if a != axis]
            corners = []
            for su, sv in ((-1, -1), (1, -1), (1, 1), (-1, 1)):
                p = np.zeros(3)
                p[axis], p[u], p[v] = sign * half[axis], su * half[u], sv * half[v]
                corners.append(p)
            faces.append(Face(np.array(corners), n, rgb, alpha, alpha >= 1.0, 0.0, outline))
    return faces


def ring(outer: float, inner: float, thickness: float, rgb, *, segments: int = SEGMENTS) -> list:
    """An annular prism (inner 0: a cylinder) on the x axis, centred on the origin, m."""
    a = np.linspace(0.0, 2 * math.pi, segments + 1)
    c, s = np.cos(a), np.sin(a)
    h = thickness / 2
    faces = []
    for k in range(segments):
        k1 = k + 1
        mid = (a[k] + a[k1]) / 2
        radial = np.array([0.0, math.cos(mid), math.sin(mid)])
        wall = np.array([[-h, outer * c[k], outer * s[k]], [-h, outer * c[k1], outer * s[k1]],
                         [h, outer * c[k1], outer * s[k1]], [h, outer * c[k], outer * s[k]]])
        faces.append(Face(wall, radial, rgb))
        if inner > 0:
            faces.append(Face(wall * [1.0, inner / outer, inner / outer], -radial, rgb))
            for sign in (1.0, -1.0):
                quad = np.array([[sign * h, inner * c[k], inner * s[k]], [sign * h, outer * c[k], outer * s[k]],
                                 [sign * h, outer * c[k1], outer * s[k1]], [sign * h, inner * c[k1], inner * s[k1]]])
                faces.append(Face(quad, np.array([sign, 0.0, 0.0]), rgb))
    if inner <= 0:
        for sign in (1.0, -1.0):
            cap = np.column_stack([np.full(segments, sign * h), outer * c[:-1], outer * s[:-1]])
            faces.append(Face(cap, np.array([sign, 0.0, 0.0]), rgb))
    return faces


def _z_to_x() -> np.ndarray:
    """The turn taking x onto z (a rod built on x stands along z): x -> z, y -> y, z -> -x."""
    return np.array([[0.0, 0.0, -1.0], [0.0, 1.0, 0.0], [1.0, 0.0, 0.0]])


def basis_from_x(axis) -> np.ndarray:
    """A rotation whose first column is the unit vector `axis` (a wheel frame in the body frame)."""
    a = np.asarray(axis, dtype=float)
    a = a / np.linalg.norm(a)
    helper = np.array([0.0, 0.0, 1.0]) if abs(a[2]) < 0.9 else np.array([0.0, 1.0, 0.0])
    b = np.cross(helper, a)
    b /= np.linalg.norm(b)
    return np.column_stack([a, b, np.cross(a, b)])


def part_shape(part, rgb, *, point_size: float, translucent_shells: bool = True) -> tuple[list, list]:
    """(faces, spheres) of one part in its own frame; spheres are (centre, radius m, rgb)."""
    s = part.shape
    if s == "box":
        return box((part.thickness / 2, part.width / 2, part.length / 2), rgb), []
    if s == "hollow_box":   # a shell: see-through faces with firm edges, so what it holds shows
        edge = tuple(0.55 * v for v in rgb)
        return box((part.thickness / 2, part.width / 2, part.length / 2), rgb,
                   alpha=0.3 if translucent_shells else 1.0, outline=edge), []
    if s == "rod":
        radius = part.radius or 0.02 * part.length
        return moved(ring(radius, 0.0, part.length, rgb, segments=12), _z_to_x(), (0, 0, 0)), []
    if s == "disk":
        return ring(part.radius, 0.0, part.thickness or 0.15 * part.radius, rgb), []
    if s == "ring":
        return ring(part.outer_radius, part.inner_radius, part.thickness or 0.15 * part.outer_radius, rgb), []
    return [], [(np.zeros(3), point_size, rgb)]


def body_part_faces(part, rgb, *, point_size: float) -> tuple[list, list]:
    """A body part placed and turned in the body frame: (faces, spheres)."""
    faces, spheres = part_shape(part, rgb, point_size=point_size)
    rot = rotation_matrix(part.rotation)
    at = np.array(part.at if isinstance(part.at, tuple) else (0.0, 0.0, part.at), dtype=float)
    return moved(faces, rot, at), [(rot @ c + at, r, col) for c, r, col in spheres]


def wheel_part_faces(part, rgb, *, bolt_rgb, wheel_radius: float, thickness: float) -> list:
    """A wheel part with its `count` copies in the wheel frame (x the spin axis)."""
    if part.shape == "point":   # a bolt through the rim: a short dark pin showing on both faces
        own = ring(0.045 * wheel_radius, 0.0, 1.3 * thickness, bolt_rgb, segments=8)
    else:
        own, _ = part_shape(part, rgb, point_size=0.0, translucent_shells=False)
    faces = []
    for j in range(part.count):
        psi = 2 * math.pi * j / part.count
        faces += moved(own, rot_x(psi), rot_x(psi) @ np.array([0.0, 0.0, part.at]))
    return faces


def spin_mark(inner: float, outer: float, thickness: float, rgb) -> list:
    """A radial stripe on both faces of a wheel at angle 0 (along the wheel frame's +z), m: one
    stripe, not a symmetric pattern, so the way it turns reads at low speed."""
    width = 0.09 * outer
    faces = []
    for sign in (1.0, -1.0):
        x = sign * (thickness / 2 + 0.002 * outer)
        quad = np.array([[x, -width / 2, inner], [x, width / 2, inner], [x, width / 2, outer], [x, -width / 2, outer]])
        faces.append(Face(quad, np.array([sign, 0.0, 0.0]), rgb, 1.0, True, 0.3 * thickness + 0.01 * outer))
    return faces
