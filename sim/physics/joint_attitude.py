"""The body's attitude and rates as a 3D trace records them, from a spherical joint's raw state.

pybullet gives the ball joint's state as a quaternion q = (qx, qy, qz, w) and a rate (u0, u1, u2),
rad/s, both in the body link's principal axes P (pybullet turns a link's inertial frame to its
principal axes; det P = 1). From them `AttitudeMap` works out what the trace and the sensors use:
tilt_x, tilt_y and heading of the attitude relative to upright (R = Rz(heading) Ry(tilt_y)
Rx(tilt_x), `sim.core.frames`), tilt_rad (the angle of the body's upright axis from the vertical),
and the body rate in the heading frame (the world turned about the vertical by the heading), rad/s.

`row` works one state out; `rows` works many out at once (numpy arrays), giving the very same
doubles: both are built from one text of the formulas (`_FRAME`, `_RELATIVE`; `sim.core.unrolled`),
so the same operations in the same order on IEEE doubles (numpy's element-wise arithmetic rounds as
Python's does), and the inverse trigonometric functions go through the `math` module (numpy's own
may differ in the last bit on some processors). `row` is one flat function (the 3D trial calls it
on every control tick; nested calls cost a seventh of it). The 3D trial uses `rows` to work out,
after its loop, the rows it did not need while running (tests/test_joint_attitude.py pins the two
together).
"""

from __future__ import annotations

import math

import numpy as np

from ..core.frames import matrix_to_quat
from ..core.unrolled import unrolled


# The formulas, one text for the scalar and the array forms (floats or numpy arrays alike).
# From the joint's raw state (qx, qy, qz, w), (u0, u1, u2): the body quaternion's vector part (x, y, z)
# in the body frame, and the body rate in the world frame (wx, wy, wz), rad/s.
_FRAME = """
    # pybullet's joint quaternion is in the principal axes P: q_wb = (P v, w) (det P = 1)
    x = p00 * qx + p01 * qy + p02 * qz
    y = p10 * qx + p11 * qy + p12 * qz
    z = p20 * qx + p21 * qy + p22 * qz
    # body rate: P wp in the body frame, turned to the world by q_wb (v + 2w u x v + 2 u x (u x v))
    bx = p00 * u0 + p01 * u1 + p02 * u2
    by = p10 * u0 + p11 * u1 + p12 * u2
    bz = p20 * u0 + p21 * u1 + p22 * u2
    tx_, ty_, tz_ = 2.0 * (y * bz - z * by), 2.0 * (z * bx - x * bz), 2.0 * (x * by - y * bx)
    wx = bx + w * tx_ + y * tz_ - z * ty_
    wy = by + w * ty_ + z * tx_ - x * tz_
    wz = bz + w * tz_ + x * ty_ - y * tx_
"""
# q_rel = q conj(q0) with conj(q0) = (cx, cy, cz, cw), as rx, ry, rz, rw; its rotation's entries r22, r20
_RELATIVE = """
    rx = w * cx + x * cw + y * cz - z * cy
    ry = w * cy - x * cz + y * cw + z * cx
    rz = w * cz + x * cy - y * cx + z * cw
    rw = w * cw - x * cx - y * cy - z * cz
    r22, r20 = 1.0 - 2.0 * (rx * rx + ry * ry), 2.0 * (rx * rz - ry * rw)
"""
# R = Rz(heading) Ry(tilt_y) Rx(tilt_x) of q_rel (`sim.core.frames`), and tilt, from those (floats only)
_ANGLES = """
    s20 = -r20 if -1.0 < -r20 < 1.0 else (1.0 if r20 <= -1.0 else -1.0)
    tilt = acos(r22) if -1.0 < r22 < 1.0 else (0.0 if r22 >= 1.0 else pi)
    heading = atan2(2.0 * (rx * ry + rz * rw), 1.0 - 2.0 * (ry * ry + rz * rz))
    tilt_x, tilt_y = atan2(2.0 * (ry * rz + rx * rw), r22), asin(s20)
"""
_TRIG = {"atan2": math.atan2, "asin": math.asin, "acos": math.acos, "pi": math.pi, "cos": math.cos, "sin": math.sin}


class AttitudeMap:
    """The attitude and rate map of one body on a ball joint: its principal axes `p` (rows of P, the
    link's principal axes in the body frame) and its upright attitude `upright` (R0, rows).

    `row(qx, qy, qz, w, u0, u1, u2)` -> (tilt_x, tilt_y, heading, tilt rad, (rate_x, rate_y, rate_z)
    rad/s in the heading frame), one flat function with every constant bound (the 3D engine calls it
    every physics step).
    """

    def __init__(self, p, upright) -> None:
        self.p = tuple(tuple(float(v) for v in r) for r in p)
        cx, cy, cz, cw = matrix_to_quat(upright)
        self.c = (-cx, -cy, -cz, cw)                       # conj(q0): relative to upright
        names = {f"p{i}{j}": self.p[i][j] for i in range(3) for j in range(3)}
        names.update(zip(("cx", "cy", "cz", "cw"), self.c), **_TRIG)
        source = ("def row(qx, qy, qz, w, u0, u1, u2):" + _FRAME + _RELATIVE + _ANGLES + """
    # the rate in the heading frame: the tilts' own rates at any heading, so a law designed at
    # heading 0 holds at every heading
    ch, sh = cos(heading), sin(heading)
    return tilt_x, tilt_y, heading, tilt, (ch * wx + sh * wy, ch * wy - sh * wx, wz)

def terms(qx, qy, qz, w, u0, u1, u2):""" + _FRAME + _RELATIVE + """
    return rx, ry, rz, rw, r22, r20, wx, wy, wz
""")
        built = unrolled(source, names, "a ball joint's attitude")
        self.row, self._terms = built["row"], built["terms"]

    def rows(self, qx, qy, qz, w, u0, u1, u2):
        """`row` over arrays of states: (tilt_x, tilt_y, heading, tilt, rate_x, rate_y, rate_z) arrays."""
        with np.errstate(all="ignore"):      # a diverged row's inf and NaN go through as the scalar path's do
            rx, ry, rz, rw, r22, r20, wx, wy, wz = self._terms(qx, qy, qz, w, u0, u1, u2)
            inside = (-1.0 < -r20) & (-r20 < 1.0)
            s20 = np.where(inside, -r20, np.where(r20 <= -1.0, 1.0, -1.0))
            open_ = (-1.0 < r22) & (r22 < 1.0)
            tilt = np.where(open_, _each(math.acos, np.where(open_, r22, 0.0)), np.where(r22 >= 1.0, 0.0, math.pi))
            heading = _each(math.atan2, 2.0 * (rx * ry + rz * rw), 1.0 - 2.0 * (ry * ry + rz * rz))
            tilt_x, tilt_y = _each(math.atan2, 2.0 * (ry * rz + rx * rw), r22), _each(math.asin, s20)
            ch, sh = _each(math.cos, heading), _each(math.sin, heading)
            return tilt_x, tilt_y, heading, tilt, ch * wx + sh * wy, ch * wy - sh * wx, wz


relative_attitude = unrolled('''def relative_attitude(x, y, z, w, cx, cy, cz, cw):
    """(tilt_x, tilt_y, heading, tilt_rad) of the body quaternion q = (x, y, z, w) relative to upright:
    q_rel = q conj(q0) with conj(q0) = (cx, cy, cz, cw), decomposed as R = Rz(heading) Ry(tilt_y) Rx(tilt_x)
    (`sim.core.frames`); tilt_rad is the angle of the body's upright axis from the vertical. Plain floats:
    the floor engine calls it every physics step."""''' + _RELATIVE + _ANGLES + """
    return tilt_x, tilt_y, heading, tilt
""", dict(_TRIG), "relative attitude")["relative_attitude"]


def _each(f, *arrays) -> np.ndarray:
    """`f` (a `math` function) on each element: the C library's result, as the scalar path gets it."""
    return np.fromiter(map(f, *(a.tolist() for a in arrays)), dtype=float, count=arrays[0].size)
