"""The 3D trial's attitude columns, worked out only where the loop needs them and the rest after it.

On a free ball mount the loop reads the joint's raw state every step (`Engine3D.raw_io`), but needs
the attitude and rates it implies only on some steps: the rows its sensors read (one per control
tick) and, for the fall check, the tilt at each tick. `LazyAttitude` keeps the other rows raw in
the trace's own attitude columns (no extra memory: seven raw numbers, the quaternion and the rate,
in the seven columns tilt, tilt_x, tilt_y, heading, rate_x, rate_y, rate_z) and marks the rows it
has worked out; `finish` works the rest out at once with `AttitudeMap.rows`, the same doubles the
step-by-step path gives (tests/test_joint_attitude.py). Until `finish` a raw row is not an attitude:
nothing but the loop may read the columns meanwhile, so a trial whose trace another process reads as
it runs (an isolated trial), whose IMU reads the true state every step, or whose encoders read older
rows over a bus, works every row out as it goes instead (`wanted`).
"""

from __future__ import annotations

import numpy as np

BLOCK_ROWS = 65536
"""Rows worked out per block in `finish` (bounds the temporaries of a long trial)."""

COLUMNS = ("tilt", "tilt_x", "tilt_y", "heading", "rate_x", "rate_y", "rate_z")
"""The trace's attitude columns, in the order a raw row fills them: qx, qy, qz, w, u0, u1, u2."""


def wanted(*, engine, imu, suites, shared: bool) -> bool:
    """Can this trial keep rows raw until the loop ends? (See the module docstring.)"""
    return (getattr(engine, "raw_io", None) is not None and engine.ball and not engine.held and imu is None
            and not shared and not any(s.limited for s in suites))


class LazyAttitude:
    """The rows of one trial's attitude columns worked out so far (`done`, one byte a row)."""

    def __init__(self, trace, attitude_map) -> None:
        self.trace, self.map = trace, attitude_map
        self.cols = [memoryview(getattr(trace, a)) for a in COLUMNS]
        self.done = bytearray(len(trace.tilt))

    def work_out(self, j: int) -> None:
        """Work out raw row j in place (the loop's own rows it works out as it reads them)."""
        c = self.cols
        tx, ty, hd, tilt, rate = self.map.row(c[0][j], c[1][j], c[2][j], c[3][j], c[4][j], c[5][j], c[6][j])
        c[0][j], c[1][j], c[2][j], c[3][j] = tilt, tx, ty, hd
        c[4][j], c[5][j], c[6][j] = rate
        self.done[j] = 1

    def finish(self, rows: int) -> None:
        """Work out every raw row of the first `rows` (the loop has ended)."""
        rows = min(rows, len(self.done))
        raw = np.flatnonzero(np.frombuffer(self.done, dtype=np.uint8)[:rows] == 0)
        cols = [getattr(self.trace, a) for a in COLUMNS]
        for start in range(0, raw.size, BLOCK_ROWS):
            at = raw[start:start + BLOCK_ROWS]
            tx, ty, hd, tilt, rx, ry, rz = self.map.rows(*(c[at] for c in cols))
            for c, v in zip(cols, (tilt, tx, ty, hd, rx, ry, rz)):
                c[at] = v
        self.done[:rows] = b"\x01" * rows
