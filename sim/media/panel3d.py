"""The instrument panel of a 3D device's clip: time, phase, tilt, one speed dial per wheel, notes.

`readout3d(result, t)` gives what a frame shows (the trace row nearest `t`); `Panel3D.draw` paints
it under the scene and returns what it drew, each dial's speed read back from its needle, so tests
can hold the picture to the trace. Signs as in the trace (`sim.run.trace3d`): wheel speeds relative
to the body about each wheel's own axis; tilts about world x and y from upright, rad (shown in deg).
The look follows the planar panel (`sim.media.overlay`): a dark strip, one dial per wheel in the
wheel's tint (`scene3d.WHEEL_TINTS`, the same tint as its spin mark), red chips for limits.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..core.angles import wrap_angle
from .overlay import (CURRENT_AT_LIMIT, DIAL_SPAN, DIM, NEAR_NO_LOAD, PANEL, PUSH, PUSH_SHOWN_S, TEXT,
                      VOLTAGE_AT_SUPPLY, WARN, Dashboard, dial_track, ending_text, push_arrow, row_index)
from .scene3d import WHEEL_TINTS

SCENE_SHARE_WIDE, SCENE_SHARE_NARROW = 0.76, 0.66
"""The top share of a frame the scene takes; the panel has the rest (narrow frames stack two rows)."""


@dataclass(frozen=True)
class WheelReadout:
    """One wheel: speed rad/s, its no-load speed at the supply rad/s, volts V, amps A, current limit A (inf: none)."""

    speed_rad_s: float
    limit_rad_s: float
    voltage_v: float
    current_a: float
    current_limit_a: float


@dataclass(frozen=True)
class Readout3D:
    """What one frame shows: time s, phase, tilt and its parts rad, wheels, notes, the push acting
    (world angular impulse N m s, or None) and how long ago it began s, a failed trial's ending."""

    t_s: float
    phase: str
    tilt_rad: float
    tilt_x_rad: float           # as in the trace (a hinge's is unwrapped); shown wrapped to (-180, 180] deg
    tilt_y_rad: float | None
    wheels: tuple
    notes: tuple = ()
    push_n_m_s: tuple | None = None
    push_age_s: float = 0.0
    ending: str | None = None


@dataclass
class Drawn3D:
    """What `Panel3D.draw` put on the frame; dial speeds are read back from the needles, rad/s."""

    readout: Readout3D
    dial_speeds_rad_s: tuple


def _impulse_vector(impulse) -> tuple:
    """A push's angular impulse as a world 3-vector, N m s (a number is about world x, the hinge)."""
    return tuple(float(v) for v in impulse) if isinstance(impulse, (tuple, list)) else (float(impulse), 0.0, 0.0)


def readout3d(result, t_s: float) -> Readout3D:
    """The numbers a frame at `t_s` shows, from a 3D TrialResult's trace and device."""
    tr, dev = result.trace, result.device
    k = row_index(tr, t_s)
    wheels, notes = [], []
    for i, w in enumerate(dev.wheels, start=1):
        speed, volt, cur = (float(getattr(tr, f"w{i}_{q}")[k]) for q in ("speed", "voltage", "current"))
        wheels.append(WheelReadout(speed, w.no_load_speed_rad_s, volt, cur, w.current_limit_a))
        if abs(volt) >= VOLTAGE_AT_SUPPLY * w.supply_v:
            notes.append(f"wheel {i}: voltage at supply")
        if math.isfinite(w.current_limit_a) and abs(cur) >= CURRENT_AT_LIMIT * w.current_limit_a:
            notes.append(f"wheel {i}: current at limit")
        if abs(speed) >= NEAR_NO_LOAD * w.no_load_speed_rad_s:
            notes.append(f"wheel {i}: near no-load speed")
    push, age = None, 0.0
    for p in result.scenario.trial.pushes:
        if 0.0 <= t_s - p.at < PUSH_SHOWN_S:
            push, age = _impulse_vector(p.impulse), t_s - p.at
    phase = tr.phases[tr.mode[k]] if tr.phases else ""
    return Readout3D(t_s=t_s, phase=phase, tilt_rad=float(tr.tilt[k]), tilt_x_rad=float(tr.tilt_x[k]),
                     tilt_y_rad=float(tr.tilt_y[k]) if tr.ball else None, wheels=tuple(wheels),
                     notes=tuple(notes), push_n_m_s=push, push_age_s=age, ending=ending_text(result, t_s))


def tint_rgb(i: int) -> tuple:
    """Wheel i's (from 0) tint as 0..255 RGB."""
    return tuple(int(255 * v) for v in WHEEL_TINTS[i % len(WHEEL_TINTS)])


class Panel3D(Dashboard):
    """The panel on frames of one size for `n_wheels` wheels; static parts painted once.

    Wide frames: clock, phase and tilt on the left, the dials in a row on the right. Narrow
    frames (a side of a side-by-side clip): clock and tilt on one row, the dials below.
    """

    def __init__(self, width: int, height: int, *, n_wheels: int, label: str | None = None):
        self.width, self.height, self.n = width, height, n_wheels
        self.wide = width >= 1.4 * height
        self.top = int(round(height * (SCENE_SHARE_WIDE if self.wide else SCENE_SHARE_NARROW)))
        ph = height - self.top
        self.unit = ph if self.wide else min(0.5 * ph, 0.27 * width)
        d = self._start_panel(self.unit, label)
        x0 = 0.34 * width if self.wide else 0.0
        slot = (width - x0) / n_wheels
        r = int(min(0.36 * ph if self.wide else 0.2 * ph, 0.3 * slot))
        cy = self.top + (0.62 * ph if self.wide else 0.8 * ph)
        self.dials = [(int(x0 + slot * (i + 0.5)), int(cy), r) for i in range(n_wheels)]
        for i, (cx, cy_, rad) in enumerate(self.dials):
            self._paint_dial(d, i, cx, cy_ - self.top, rad)

    def _paint_dial(self, d, i: int, cx: int, cy: int, r: int) -> None:
        dial_track(d, cx, cy, r)
        d.text((cx, cy + 0.12 * r), f"wheel {i + 1}", font=self.f_small, fill=tint_rgb(i), anchor="mt")

    def draw(self, frame, r: Readout3D, *, push_arrow=None):
        """Paint the panel onto `frame` (a PIL RGB image, in place, or an array) and return
        (the frame as an array, Drawn3D)."""
        from PIL import Image, ImageDraw

        img = frame if isinstance(frame, Image.Image) else Image.fromarray(frame)
        img.paste(self.panel, (0, self.top))
        d = ImageDraw.Draw(img)
        u, pad = self.unit, int(0.03 * self.width)
        ph = self.height - self.top
        d.text((pad, self.top + 0.14 * ph), f"{r.t_s:5.2f} s", font=self.f_big, fill=TEXT, anchor="lt")
        tilt = f"tilt {math.degrees(r.tilt_rad):5.2f} deg" if math.isfinite(r.tilt_rad) else "tilt --"
        parts = f"about x {math.degrees(wrap_angle(r.tilt_x_rad)):+.2f}°" + (f"  y {math.degrees(r.tilt_y_rad):+.2f}°"
                                                          if r.tilt_y_rad is not None else "")
        tx, ty = (pad, self.top + 0.45 * ph) if self.wide else (int(0.45 * self.width), self.top + 0.1 * ph)
        d.text((tx, ty), tilt, font=self.f_mid, fill=TEXT, anchor="lt")
        d.text((tx, ty + 0.17 * u), parts, font=self.f_small, fill=DIM, anchor="lt")
        if r.phase:
            at = (pad, self.top + 0.74 * ph) if self.wide else (pad, self.top + 0.36 * ph)
            self._tag(img, at, r.phase, fill=(40, 56, 72), ink=TEXT)
        speeds = tuple(self._needle(d, i, w) for i, w in enumerate(r.wheels))
        y = self.top - int(0.06 * u)
        for note in r.notes:   # stacked upwards from the panel's top edge, right-aligned
            y = self._tag(img, (self.width - pad, y), note.upper(), fill=WARN, ink=(255, 246, 240), right=True, up=True)
        if self.label:
            self._tag(img, (pad, int(0.04 * self.height)), self.label, fill=PANEL[:3], ink=TEXT)
        if r.ending:
            self._tag(img, (self.width - pad, int(0.04 * self.height)), r.ending, fill=WARN, ink=(255, 246, 240),
                      right=True)
        if r.push_n_m_s is not None:
            self._push3d(img, d, r, push_arrow)
        return np.asarray(img), Drawn3D(r, speeds)

    def _needle(self, d, i: int, w: WheelReadout) -> float:
        """Draw wheel i's needle, arc and value; the speed read back from the needle, rad/s."""
        cx, cy, rad = self.dials[i]
        finite = math.isfinite(w.speed_rad_s)
        ratio = w.speed_rad_s / w.limit_rad_s if finite else 0.0
        frac = max(-DIAL_SPAN, min(DIAL_SPAN, ratio)) / DIAL_SPAN
        needle = 90.0 - 90.0 * frac    # deg counter-clockwise from +x: 90 = straight up = 0 rad/s
        colour = WARN if abs(ratio) >= NEAR_NO_LOAD else tint_rgb(i)
        start, end = sorted((270.0, 360.0 - needle))
        if end - start > 0.5:
            d.arc([cx - rad, cy - rad, cx + rad, cy + rad], start, end, fill=colour, width=max(2, rad // 6))
        a = math.radians(needle)
        d.line([cx, cy, cx + 0.92 * rad * math.cos(a), cy - 0.92 * rad * math.sin(a)], fill=TEXT,
               width=max(1, rad // 14))
        hub = max(2, rad // 10)
        d.ellipse([cx - hub, cy - hub, cx + hub, cy + hub], fill=TEXT)
        value = f"{round(w.speed_rad_s):+d}/{w.limit_rad_s:.0f}" if finite else "--"
        d.text((cx, cy - rad * 1.22), value, font=self.f_small, fill=TEXT, anchor="mb")
        return (90.0 - needle) / 90.0 * DIAL_SPAN * w.limit_rad_s if finite else math.nan

    def _push3d(self, img, d, r: Readout3D, arrow) -> None:
        push_arrow(d, arrow, unit=self.unit, age_s=r.push_age_s)
        text = "push [" + ", ".join(f"{v * 1000:+.1f}" for v in r.push_n_m_s) + "] mN m s"
        self._tag(img, (int(0.03 * self.width), self.top - int(0.06 * self.unit)), text, fill=PUSH,
                  ink=(16, 24, 34), up=True)
