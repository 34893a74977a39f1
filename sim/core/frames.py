"""Attitude helpers for 3D devices: quaternions, rotation matrices, tilt angles and heading.

Conventions (the README states them too): the body frame has x along the hinge axis, z along the
body axis and y completing a right-handed frame; world z points up. `R_wb` takes body-frame
vectors to the world frame. The upright attitude R0 is the smallest rotation taking the device's
centre-of-mass direction to world +z (identity when the centre of mass is on the body z axis).
The attitude relative to upright, R = R_wb R0^T, is decomposed as R = Rz(heading) Ry(tilt_y)
Rx(tilt_x), rad. `tilt_rad` is the angle between the pivot-to-centre-of-mass line and the
vertical. Quaternions are (x, y, z, w), as pybullet writes them.
"""

from __future__ import annotations

import math


def quat_to_matrix(q) -> tuple[tuple[float, float, float], ...]:
    """The rotation matrix of a unit quaternion (x, y, z, w), row by row."""
    x, y, z, w = q
    return ((1 - 2 * (y * y + z * z), 2 * (x * y - z * w), 2 * (x * z + y * w)),
            (2 * (x * y + z * w), 1 - 2 * (x * x + z * z), 2 * (y * z - x * w)),
            (2 * (x * z - y * w), 2 * (y * z + x * w), 1 - 2 * (x * x + y * y)))


def matrix_to_quat(m) -> tuple[float, float, float, float]:
    """A unit quaternion (x, y, z, w) of a rotation matrix (Shepperd's method: the largest
    diagonal term chosen for accuracy)."""
    tr = m[0][0] + m[1][1] + m[2][2]
    cands = (tr, m[0][0], m[1][1], m[2][2])
    i = max(range(4), key=lambda j: cands[j])
    if i == 0:
        s = 2.0 * math.sqrt(1.0 + tr)
        return ((m[2][1] - m[1][2]) / s, (m[0][2] - m[2][0]) / s, (m[1][0] - m[0][1]) / s, 0.25 * s)
    if i == 1:
        s = 2.0 * math.sqrt(1.0 + m[0][0] - m[1][1] - m[2][2])
        return (0.25 * s, (m[0][1] + m[1][0]) / s, (m[0][2] + m[2][0]) / s, (m[2][1] - m[1][2]) / s)
    if i == 2:
        s = 2.0 * math.sqrt(1.0 + m[1][1] - m[0][0] - m[2][2])
        return ((m[0][1] + m[1][0]) / s, 0.25 * s, (m[1][2] + m[2][1]) / s, (m[0][2] - m[2][0]) / s)
    s = 2.0 * math.sqrt(1.0 + m[2][2] - m[0][0] - m[1][1])
    return ((m[0][2] + m[2][0]) / s, (m[1][2] + m[2][1]) / s, 0.25 * s, (m[1][0] - m[0][1]) / s)


def tilt_angles(r) -> tuple[float, float, float]:
    """(tilt_x, tilt_y, heading) rad of R = Rz(heading) Ry(tilt_y) Rx(tilt_x), R relative to upright."""
    tilt_y = math.asin(max(-1.0, min(1.0, -r[2][0])))
    tilt_x = math.atan2(r[2][1], r[2][2])
    heading = math.atan2(r[1][0], r[0][0])
    return tilt_x, tilt_y, heading


def smallest_rotation_to_z(v) -> tuple[tuple[float, float, float], ...]:
    """The smallest rotation taking direction `v` to +z (Rodrigues' formula); identity for v along +z
    or zero, and a half turn about x for v along -z."""
    n = math.sqrt(v[0] ** 2 + v[1] ** 2 + v[2] ** 2)
    if n == 0.0:
        return ((1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 0.0, 1.0))
    x, y, z = v[0] / n, v[1] / n, v[2] / n
    # axis k = v x z = (y, -x, 0); cos = z, sin = |k|
    s = math.hypot(x, y)
    if s < 1e-15:
        if z > 0:
            return ((1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 0.0, 1.0))
        return ((1.0, 0.0, 0.0), (0.0, -1.0, 0.0), (0.0, 0.0, -1.0))
    kx, ky, c = y / s, -x / s, z
    t = 1.0 - c
    return ((c + kx * kx * t, kx * ky * t, ky * s),
            (kx * ky * t, c + ky * ky * t, -kx * s),
            (-ky * s, kx * s, c))


def matmul(a, b) -> tuple[tuple[float, float, float], ...]:
    """3x3 product of row tuples (plain floats: cheaper than numpy at this size)."""
    return tuple(tuple(a[i][0] * b[0][j] + a[i][1] * b[1][j] + a[i][2] * b[2][j] for j in range(3)) for i in range(3))


def transpose(a) -> tuple[tuple[float, float, float], ...]:
    return tuple(tuple(a[j][i] for j in range(3)) for i in range(3))


def rotation_about_x_y(about_x: float, about_y: float) -> tuple[tuple[float, float, float], ...]:
    """Ry(about_y) Rx(about_x): a start tilt relative to upright (heading 0), rad."""
    ca, sa, cb, sb = math.cos(about_x), math.sin(about_x), math.cos(about_y), math.sin(about_y)
    return ((cb, sb * sa, sb * ca), (0.0, ca, -sa), (-sb, cb * sa, cb * ca))
