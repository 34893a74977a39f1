"""The body's attitude and rates as a 3D trace records them, from a spherical joint's raw state.

pybullet gives the ball joint's state as a quaternion q = (qx, qy, qz, w) and a rate (u0, u1, u2),
rad/s, both in the body link's principal axes P (pybullet turns a link's inertial frame to its
principal axes; det P = 1). From them `AttitudeMap` works out what the trace and the sensors use:
tilt_x, tilt_y and heading of the attitude relative to upright (R = Rz(heading) Ry(tilt_y)
Rx(tilt_x), `sim.core.frames`), tilt_rad (the angle of the body's upright axis from the vertical),
and the body rate in the heading frame (the world turned about the vertical by the heading), rad/s.

`row` works one state out; `rows` works many out at once (numpy arrays), giving the very same
doubles: the same operations in the same order on IEEE doubles (numpy's element-wise arithmetic
rounds as Python's does), and the inverse trigonometric functions through the `math` module (numpy's
own may differ in the last bit on some processors). The 3D trial uses `rows` to work out, after its
loop, the rows it did not need while running (tests/test_joint_attitude.py pins the two together).
"""

from __future__ import annotations

import math

import numpy as np

from ..core.frames import matrix_to_quat


class AttitudeMap:
    """The attitude and rate map of one body on a ball joint: its principal axes `p` (rows of P, the
    link's principal axes in the body frame) and its upright attitude `upright` (R0, rows).

    `row(qx, qy, qz, w, u0, u1, u2)` -> (tilt_x, tilt_y, heading, tilt rad, (rate_x, rate_y, rate_z)
    rad/s in the heading frame), a closure with every constant bound (the 3D engine calls it every
    physics step).
    """

    def __init__(self, p, upright) -> None:
        self.p = tuple(tuple(float(v) for v in r) for r in p)
        cx, cy, cz, cw = matrix_to_quat(upright)
        self.c = (-cx, -cy, -cz, cw)                       # conj(q0): relative to upright
        self.row = self._row()

    def _row(self):
        terms, (cx, cy, cz, cw) = _frame_terms(self.p), self.c
        cos, sin, relative = math.cos, math.sin, relative_attitude

        def row(qx: float, qy: float, qz: float, w: float, u0: float, u1: float, u2: float):
            x, y, z, rx, ry, rz = terms(qx, qy, qz, w, u0, u1, u2)
            tilt_x, tilt_y, heading, tilt = relative(x, y, z, w, cx, cy, cz, cw)
            # the rate in the heading frame: the tilts' own rates at any heading, so a law designed at
            # heading 0 holds at every heading
            ch, sh = cos(heading), sin(heading)
            return tilt_x, tilt_y, heading, tilt, (ch * rx + sh * ry, ch * ry - sh * rx, rz)
        return row

    def rows(self, qx, qy, qz, w, u0, u1, u2):
        """`row` over arrays of states: (tilt_x, tilt_y, heading, tilt, rate_x, rate_y, rate_z) arrays."""
        with np.errstate(all="ignore"):      # a diverged row's inf and NaN go through as the scalar path's do
            x, y, z, rx, ry, rz = _frame_terms(self.p)(qx, qy, qz, w, u0, u1, u2)
            tilt_x, tilt_y, heading, tilt = relative_attitudes(x, y, z, w, *self.c)
            ch, sh = _each(math.cos, heading), _each(math.sin, heading)
            return tilt_x, tilt_y, heading, tilt, ch * rx + sh * ry, ch * ry - sh * rx, rz


def _frame_terms(p):
    """`terms(qx, qy, qz, w, u0, u1, u2) -> (x, y, z, rx, ry, rz)`: the body quaternion's vector part
    (x, y, z) in the body frame, and the body rate in the world frame (rad/s), from the ball joint's
    raw state; floats or numpy arrays alike (the same operations either way)."""
    (p00, p01, p02), (p10, p11, p12), (p20, p21, p22) = p

    def terms(qx, qy, qz, w, u0, u1, u2):
        # pybullet's joint quaternion is in the principal axes P: q_wb = (P v, w) (det P = 1)
        x = p00 * qx + p01 * qy + p02 * qz
        y = p10 * qx + p11 * qy + p12 * qz
        z = p20 * qx + p21 * qy + p22 * qz
        # body rate: P wp in the body frame, turned to the world by q_wb (v + 2w u x v + 2 u x (u x v))
        bx = p00 * u0 + p01 * u1 + p02 * u2
        by = p10 * u0 + p11 * u1 + p12 * u2
        bz = p20 * u0 + p21 * u1 + p22 * u2
        tx_, ty_, tz_ = 2.0 * (y * bz - z * by), 2.0 * (z * bx - x * bz), 2.0 * (x * by - y * bx)
        return (x, y, z, bx + w * tx_ + y * tz_ - z * ty_, by + w * ty_ + z * tx_ - x * tz_,
                bz + w * tz_ + x * ty_ - y * tx_)
    return terms


def relative_attitude(x: float, y: float, z: float, w: float, cx: float, cy: float, cz: float, cw: float,
                      atan2=math.atan2, asin=math.asin, acos=math.acos, pi=math.pi) -> tuple[float, float, float, float]:
    """(tilt_x, tilt_y, heading, tilt_rad) of the body quaternion q = (x, y, z, w) relative to upright:
    q_rel = q conj(q0) with conj(q0) = (cx, cy, cz, cw), decomposed as R = Rz(heading) Ry(tilt_y) Rx(tilt_x)
    (`sim.core.frames`); tilt_rad is the angle of the body's upright axis from the vertical. Plain floats:
    both 3D engines call it every physics step."""
    rx, ry, rz, rw, r22, r20 = _relative_terms(x, y, z, w, cx, cy, cz, cw)
    s20 = -r20 if -1.0 < -r20 < 1.0 else (1.0 if r20 <= -1.0 else -1.0)
    tilt = acos(r22) if -1.0 < r22 < 1.0 else (0.0 if r22 >= 1.0 else pi)
    heading = atan2(2.0 * (rx * ry + rz * rw), 1.0 - 2.0 * (ry * ry + rz * rz))
    return atan2(2.0 * (ry * rz + rx * rw), r22), asin(s20), heading, tilt


def relative_attitudes(x, y, z, w, cx: float, cy: float, cz: float, cw: float):
    """`relative_attitude` over arrays (the same doubles, element by element)."""
    rx, ry, rz, rw, r22, r20 = _relative_terms(x, y, z, w, cx, cy, cz, cw)
    inside = (-1.0 < -r20) & (-r20 < 1.0)
    s20 = np.where(inside, -r20, np.where(r20 <= -1.0, 1.0, -1.0))
    open_ = (-1.0 < r22) & (r22 < 1.0)
    tilt = np.where(open_, _each(math.acos, np.where(open_, r22, 0.0)), np.where(r22 >= 1.0, 0.0, math.pi))
    heading = _each(math.atan2, 2.0 * (rx * ry + rz * rw), 1.0 - 2.0 * (ry * ry + rz * rz))
    return _each(math.atan2, 2.0 * (ry * rz + rx * rw), r22), _each(math.asin, s20), heading, tilt


def _relative_terms(x, y, z, w, cx, cy, cz, cw):
    """(q_rel = q conj(q0) as rx, ry, rz, rw; its rotation's entries r22 and r20), floats or arrays."""
    rx = w * cx + x * cw + y * cz - z * cy
    ry = w * cy - x * cz + y * cw + z * cx
    rz = w * cz + x * cy - y * cx + z * cw
    rw = w * cw - x * cx - y * cy - z * cz
    return rx, ry, rz, rw, 1.0 - 2.0 * (rx * rx + ry * ry), 2.0 * (rx * rz - ry * rw)


def _each(f, *arrays) -> np.ndarray:
    """`f` (a `math` function) on each element: the C library's result, as the scalar path gets it."""
    return np.fromiter(map(f, *(a.tolist() for a in arrays)), dtype=float, count=arrays[0].size)
