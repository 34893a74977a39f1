"""Frames of a finished 3D trial: the device from its trace (`scene3d.Scene3D`) over the panel (`panel3d`).

Nothing is simulated again: frame i shows the trace row nearest t = i / fps, as for planar clips
(`sim.media.video`). A row that is not finite (a diverged trial's last one) shows the last
drawable pose.
"""

from __future__ import annotations

import math

import numpy as np

from .panel3d import Panel3D, readout3d
from .scene3d import Scene3D, WHEEL_TINTS

CONTACT_RGB = (40, 170, 90)    # the balancing contact on the floor, touching (our colours)
LIFTED_RGB = (220, 60, 50)     # ... and off the floor

MARK_SHARP_RAD, MARK_GONE_RAD = 1.0, 2.5
"""A wheel turning less than this between frames keeps its spin mark sharp; past the second it is
washed into the wheel (one mark a turn: past about a quarter turn a frame its motion reads wrongly)."""


def mark_fade(step_rad: float) -> float:
    """0 (sharp) .. 0.85 (washed out) for a wheel turning `step_rad` between frames."""
    share = (abs(step_rad) - MARK_SHARP_RAD) / (MARK_GONE_RAD - MARK_SHARP_RAD)
    return 0.85 * min(1.0, max(0.0, share)) if math.isfinite(step_rad) else 0.85


class TrialPainter3D:
    """Paints the frames of one 3D trial at one size.

    `camera` : a key of `scene3d.PRESETS` (None: oblique). `supersample` : the scene's drawing
    scale before it is shrunk (2: smooth edges at about twice the cost of 1).
    """

    palette_colours = tuple(tuple(int(255 * v) for v in t) for t in WHEEL_TINTS)

    def __init__(self, result, *, width: int, height: int, camera: str | None = None, label: str | None = None,
                 fps: int = 30, supersample: int = 2):
        self.result, self.fps = result, fps
        tr = result.trace
        self.n_wheels = result.device.n_wheels
        self.panel = Panel3D(width, height, n_wheels=self.n_wheels, label=label)
        self.scene = Scene3D(result.scenario, result.device, width=width, height=self.panel.top,
                             camera=camera or "oblique", supersample=supersample)
        self._full = (width, height)
        # a free body on the floor records its whole attitude and where its frame's origin is
        self._cols = [tr.tilt_x, getattr(tr, "tilt_y", None), getattr(tr, "heading", None)]
        self._origin = ([tr.contact_x, tr.contact_y, tr.contact_z] if hasattr(tr, "contact_z") else None)
        self._last = (np.eye(3), [0.0] * self.n_wheels, None)

    def pose_at(self, k: int) -> tuple[np.ndarray, list, np.ndarray | None]:
        """(R_wb, wheel angles rad, the body frame's origin m or None at the pivot) of trace row k; the
        last finite pose when row k is not finite."""
        tr = self.result.trace
        tx, ty, h = (float(c[k]) if c is not None else 0.0 for c in self._cols)
        angles = [float(getattr(tr, f"w{i}_angle")[k]) for i in range(1, self.n_wheels + 1)]
        origin = None if self._origin is None else np.array([float(c[k]) for c in self._origin])
        if all(math.isfinite(v) for v in (tx, ty, h, *angles)) and (origin is None or np.all(np.isfinite(origin))):
            self._last = (self.scene.attitude(tx, ty, h), angles, origin)
        return self._last

    def paint(self, t_s: float):
        """(frame (height, width, 3) uint8 RGB, Drawn3D) at time `t_s`."""
        from PIL import Image

        from .overlay import row_index
        tr = self.result.trace
        k = row_index(tr, t_s)
        r_wb, angles, origin = self.pose_at(k)
        fades = [mark_fade(float(getattr(tr, f"w{i}_speed")[k]) / self.fps) for i in range(1, self.n_wheels + 1)]
        scene = self.scene.draw_image(r_wb, angles, mark_fade=fades, origin=origin)
        if origin is not None:      # a body on the floor: its balancing contact, marked on the floor
            self._mark_contact(scene, origin, touching=float(tr.in_contact[k]) > 0.5)
        frame = Image.new("RGB", self._full, (16, 24, 34))
        frame.paste(scene, (0, 0))
        r = readout3d(self.result, t_s)
        arrow = self.scene.push_arrow(r_wb, r.push_n_m_s, origin) if r.push_n_m_s is not None else None
        return self.panel.draw(frame, r, push_arrow=arrow)

    def _mark_contact(self, image, origin, *, touching: bool) -> None:
        """A ring on the floor under the balancing contact (the body frame's origin): CONTACT_RGB while
        the body touches the floor, LIFTED_RGB while it is off it."""
        from PIL import ImageDraw
        (x, y), depth = (v[0] for v in self.scene.camera.project([[origin[0], origin[1], 0.0]]))
        if not depth > 0:
            return
        r = max(3.0, 0.012 * self.scene.camera.focal_px * self.scene.layout.reach_m / depth)
        ImageDraw.Draw(image).ellipse([x - r, y - r, x + r, y + r], outline=CONTACT_RGB if touching else LIFTED_RGB,
                                      width=max(2, int(r / 3)))

    def close(self) -> None:   # nothing held outside Python objects (no engine client)
        pass
