"""The instrument panel drawn over each frame: time, phase, wheel-speed dial, voltage and current bars, notes.

`readout(result, t)` gives the numbers a frame shows (from the recorded trace, the row nearest
`t`, as `Trace.state_at` picks it). `Dashboard.draw` paints them onto a frame and returns what it
drew, including the wheel speed read back from the dial's needle, so tests can check the picture
against the trace. Signs as in the trace: wheel speed relative to the body, positive voltage
accelerates the wheel in the positive sense.

The look is our own: a dark strip along the bottom with an amber dial, mint and blue bars, red
chips for limits, typeset in the DejaVu faces that ship with matplotlib.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .render import SCENE_FRACTION

# display thresholds for the notes (our choice for a readable clip, not a design criterion)
NEAR_NO_LOAD = 0.9          # share of the no-load speed
CURRENT_AT_LIMIT = 0.98     # share of the current limit
VOLTAGE_AT_SUPPLY = 0.995   # share of the supply
PUSH_SHOWN_S = 0.4          # how long a push stays marked
ENDING_SHOWN_S = 1.0        # a failed trial's outcome and cause show from its fall, or for its last second

PANEL = (16, 24, 34, 255)
RULE = (255, 176, 59, 255)
TEXT = (238, 234, 224)
DIM = (134, 148, 162)
WHEEL = (255, 176, 59)
VOLT = (98, 204, 172)
CURR = (128, 168, 255)
WARN = (226, 68, 56)
PUSH = (255, 222, 92)
TRACK = (52, 64, 78)
DIAL_SPAN = 1.1             # the dial reads to 110 % of the limit, then pins


@dataclass(frozen=True)
class Readout:
    """What one frame shows, SI: time s, speeds rad/s, volts V, amps A, impulse N m s."""

    t_s: float
    phase: str
    wheel_speed_rad_s: float
    wheel_limit_rad_s: float
    voltage_v: float
    supply_v: float
    current_a: float
    current_limit_a: float
    notes: tuple = ()
    push_n_m_s: float | None = None
    push_age_s: float = 0.0
    ending: str | None = None   # a failed trial's outcome and cause, after its fall or near its end


@dataclass
class Drawn:
    """What `Dashboard.draw` put on the frame; `dial_wheel_speed_rad_s` is read back from the needle."""

    readout: Readout
    needle_deg: float
    dial_wheel_speed_rad_s: float
    notes: tuple = field(default_factory=tuple)


def row_index(trace, t_s: float) -> int:
    """The trace row nearest `t_s` (the same row `Trace.state_at` returns)."""
    return int(min(max(round(t_s / trace.step_s), 0), max(trace.n - 1, 0)))


def readout(result, t_s: float) -> Readout:
    """The numbers a frame at time `t_s` shows, from a TrialResult's trace and device."""
    tr, dev = result.trace, result.device
    k = row_index(tr, t_s)
    w, v, i = float(tr.wheel_speed[k]), float(tr.voltage[k]), float(tr.current[k])
    limit, supply = dev.no_load_speed_rad_s, dev.supply_v
    i_lim = dev.current_limit_a if math.isfinite(dev.current_limit_a) else supply / dev.resistance_ohm
    notes = []
    if abs(v) >= VOLTAGE_AT_SUPPLY * supply:
        notes.append("voltage at supply")
    if math.isfinite(dev.current_limit_a) and abs(i) >= CURRENT_AT_LIMIT * dev.current_limit_a:
        notes.append("current at limit")
    if abs(w) >= NEAR_NO_LOAD * limit:
        notes.append("wheel near no-load speed")
    push, age = None, 0.0
    for p in result.scenario.trial.pushes:
        if 0.0 <= t_s - p.at < PUSH_SHOWN_S:
            push, age = p.impulse, t_s - p.at
    phase = tr.phases[tr.mode[k]] if tr.phases else ""
    return Readout(t_s=t_s, phase=phase, wheel_speed_rad_s=w, wheel_limit_rad_s=limit, voltage_v=v,
                   supply_v=supply, current_a=i, current_limit_a=i_lim, notes=tuple(notes),
                   push_n_m_s=push, push_age_s=age, ending=ending_text(result, t_s))


def ending_text(result, t_s: float) -> str | None:
    """"FELL: WHEEL AT SPEED LIMIT" (outcome and cause, `sim.run.causes`) on frames from the fall on, and
    in the last ENDING_SHOWN_S of any failed trial (a trial stopped at its fall has no frames after
    it); None on other frames and trials."""
    cause = getattr(result, "cause", None)
    if not cause:
        return None
    since = result.ended_at_s - ENDING_SHOWN_S
    if result.outcome == "fell" and result.fell_at_s is not None:
        since = min(since, result.fell_at_s)
    if t_s < since:
        return None
    return f"{result.outcome}: {cause}".replace("_", " ").upper()


def _font(size: int, *, mono: bool = False, bold: bool = False):
    from pathlib import Path

    import matplotlib
    from PIL import ImageFont

    name = "DejaVuSansMono" if mono else "DejaVuSans"
    name += "-Bold" if bold else ""
    path = Path(matplotlib.get_data_path()) / "fonts" / "ttf" / f"{name}.ttf"
    try:
        return ImageFont.truetype(str(path), max(6, size))
    except OSError:  # fonts missing from this matplotlib build: PIL's own bitmap face still reads
        return ImageFont.load_default()


@dataclass(frozen=True)
class PanelLayout:
    """Where the panel's pieces go, in frame pixels. Wide frames get one row, narrow ones two."""

    top: int                 # first panel row
    unit: float              # font size unit, px
    clock: tuple             # time's top-left
    phase: tuple             # phase chip's top-left
    dial_c: tuple            # dial centre (the bottom of its half circle)
    dial_r: int
    dial_text: tuple         # top-left of the dial's label, value and limit lines
    bars: tuple              # ((x0, x1, y) of the voltage bar, (x0, x1, y) of the current bar)

    @classmethod
    def for_size(cls, width: int, height: int) -> "PanelLayout":
        pad = int(0.03 * width)
        if width >= 1.4 * height:
            top = int(round(height * SCENE_FRACTION))
            ph = height - top
            r = int(min(0.52 * ph, 0.1 * width))
            cx = int(0.27 * width) + r
            bar_y = [top + int(f * ph) for f in (0.34, 0.74)]
            return cls(top, ph, (pad, top + 0.18 * ph), (pad, top + 0.62 * ph), (cx, top + int(0.78 * ph)), r,
                       (cx + 1.35 * r, top + 0.16 * ph),
                       ((int(0.62 * width), width - pad, bar_y[0]), (int(0.62 * width), width - pad, bar_y[1])))
        top = int(round(height * (SCENE_FRACTION - 0.1)))
        ph = height - top
        unit = min(0.72 * ph, 0.27 * width)
        r = int(min(0.26 * ph, 0.13 * width))
        bar_y = top + int(0.8 * ph)
        return cls(top, unit, (pad, top + 0.08 * ph), (pad, top + 0.36 * ph),
                   (width - pad - int(1.2 * r), top + int(0.55 * ph)), r, (int(0.42 * width), top + 0.08 * ph),
                   ((pad, int(0.47 * width), bar_y), (int(0.53 * width), width - pad, bar_y)))


def bar_texts(r) -> tuple[str, str]:
    """The voltage and current bars' labels: the value against its limit as given (11.1 V, not 11)."""
    return (f"{r.voltage_v:+.2f} V / {r.supply_v:.4g} V",
            f"{r.current_a:+.2f} A / {r.current_limit_a:.4g} A")


class Dashboard:
    """Draws the panel on frames of one size. The static parts are painted once, in __init__.

    Parameters
    ----------
    width, height : frame size, pixels.
    label : text for the top-left tab (a scenario or strategy name), or None.
    """

    def __init__(self, width: int, height: int, *, label: str | None = None):
        self.width, self.height = width, height
        self.lay = lay = PanelLayout.for_size(width, height)
        self.top = lay.top
        d = self._start_panel(lay.unit, label)
        self._paint_static(d)

    def _start_panel(self, u: float, label: str | None):
        """Fonts sized by the unit `u` (px), the label, the chip cache and the blank panel with its
        rule along the top; returns a drawing context on the panel."""
        from PIL import Image, ImageDraw

        self.f_big = _font(int(0.24 * u), mono=True, bold=True)
        self.f_mid = _font(int(0.13 * u), mono=True)
        self.f_small = _font(int(0.11 * u))
        self.f_tag = _font(int(0.12 * u), bold=True)
        self.label = label
        self._chips = {}
        self.panel = Image.new("RGB", (self.width, self.height - self.top), PANEL[:3])
        d = ImageDraw.Draw(self.panel)
        d.rectangle([0, 0, self.width, max(1, int(u) // 40)], fill=RULE)
        return d

    def _paint_static(self, d) -> None:
        lay, top = self.lay, self.top
        dial_track(d, lay.dial_c[0], lay.dial_c[1] - top, lay.dial_r)
        d.text((lay.dial_text[0], lay.dial_text[1] - top), "wheel speed", font=self.f_small, fill=DIM, anchor="lt")
        for (x0, x1, y), name in zip(lay.bars, ("voltage", "current")):
            y -= top
            d.text((x0, y - 0.1 * lay.unit), name, font=self.f_small, fill=DIM, anchor="ls")
            d.rectangle([x0, y, x1, y + self._bar_h()], fill=TRACK)
            mid = (x0 + x1) / 2
            d.line([mid, y - 2, mid, y + self._bar_h() + 2], fill=DIM, width=1)

    def _bar_h(self) -> int:
        return max(2, int(0.09 * self.lay.unit))

    def draw(self, frame, r: Readout, *, push_arrow=None) -> tuple[np.ndarray, Drawn]:
        """Paint the panel onto `frame`: a (height, width, 3) uint8 array (left untouched) or a PIL
        RGB image (painted in place, which saves a copy per frame).

        Returns (the frame as an array, what was drawn). The panel is opaque: whatever the frame
        held below `self.top` is covered. `push_arrow` : ((x0, y0), (x1, y1)) pixel tail and head
        of an arrow marking a push, or None.
        """
        from PIL import Image, ImageDraw

        img = frame if isinstance(frame, Image.Image) else Image.fromarray(frame)
        img.paste(self.panel, (0, self.top))
        d = ImageDraw.Draw(img)
        lay, pad = self.lay, int(0.03 * self.width)
        d.text(lay.clock, f"{r.t_s:5.2f} s", font=self.f_big, fill=TEXT, anchor="lt")
        if r.phase:
            self._tag(img, lay.phase, r.phase, fill=(40, 56, 72), ink=TEXT)
        needle, read_back = self._dial(d, r)
        volt_text, amp_text = bar_texts(r)
        self._bar(d, 0, r.voltage_v, r.supply_v, VOLT, volt_text)
        self._bar(d, 1, r.current_a, r.current_limit_a, CURR, amp_text)
        y = self.top - int(0.06 * lay.unit)
        for note in r.notes:  # stacked upwards from the panel's top edge, right-aligned
            y = self._tag(img, (self.width - pad, y), note.upper(), fill=WARN, ink=(255, 246, 240), right=True, up=True)
        if self.label:
            self._tag(img, (pad, int(0.04 * self.height)), self.label, fill=PANEL[:3], ink=TEXT)
        if r.ending:  # top right, clear of the label (top left) and the limit notes (above the panel)
            self._tag(img, (self.width - pad, int(0.04 * self.height)), r.ending, fill=WARN, ink=(255, 246, 240),
                      right=True)
        if r.push_n_m_s is not None:
            self._push(img, d, r, push_arrow)
        return np.asarray(img), Drawn(r, needle, read_back, r.notes)

    def _dial(self, d, r: Readout) -> tuple[float, float]:
        (cx, cy), rad, u = self.lay.dial_c, self.lay.dial_r, self.lay.unit
        finite = math.isfinite(r.wheel_speed_rad_s)   # a diverged trial's last row may not be
        ratio = r.wheel_speed_rad_s / r.wheel_limit_rad_s if finite else 0.0
        frac = max(-DIAL_SPAN, min(DIAL_SPAN, ratio)) / DIAL_SPAN
        needle = 90.0 - 90.0 * frac          # degrees, counter-clockwise from +x: 90 = straight up = 0 rad/s
        box = [cx - rad, cy - rad, cx + rad, cy + rad]
        colour = WARN if abs(r.wheel_speed_rad_s) >= NEAR_NO_LOAD * r.wheel_limit_rad_s else WHEEL
        start, end = sorted((270.0, 360.0 - needle))   # PIL arcs run clockwise from +x with y down
        if end - start > 0.5:
            d.arc(box, start, end, fill=colour, width=max(2, rad // 6))
        a = math.radians(needle)
        d.line([cx, cy, cx + 0.92 * rad * math.cos(a), cy - 0.92 * rad * math.sin(a)], fill=TEXT,
               width=max(1, rad // 14))
        hub = max(2, rad // 10)
        d.ellipse([cx - hub, cy - hub, cx + hub, cy + hub], fill=TEXT)
        tx, ty = self.lay.dial_text
        d.text((tx, ty + 0.17 * u), f"{r.wheel_speed_rad_s:+.0f} rad/s", font=self.f_mid, fill=TEXT, anchor="lt")
        d.text((tx, ty + 0.36 * u), f"limit {r.wheel_limit_rad_s:.0f}", font=self.f_small, fill=DIM, anchor="lt")
        # read the speed back from the needle as drawn: the tests compare this with the trace
        read_back = (90.0 - needle) / 90.0 * DIAL_SPAN * r.wheel_limit_rad_s if finite else math.nan
        return needle, read_back

    def _bar(self, d, row: int, value: float, span: float, colour, text: str) -> None:
        x0, x1, y = self.lay.bars[row]
        h = self._bar_h()
        mid = (x0 + x1) / 2
        frac = max(-1.0, min(1.0, value / span)) if span > 0 else 0.0
        end = mid + frac * (x1 - x0) / 2
        at_edge = abs(frac) >= (VOLTAGE_AT_SUPPLY if row == 0 else CURRENT_AT_LIMIT)
        d.rectangle([min(mid, end), y, max(mid, end), y + h], fill=WARN if at_edge else colour)
        d.text((x1, y - 0.1 * self.lay.unit), text, font=self.f_small, fill=TEXT, anchor="rs")

    def _tag(self, img, xy, text: str, *, fill, ink, right: bool = False, up: bool = False) -> int:
        """A rounded chip with text; returns the y where the next stacked chip goes.

        Chips repeat from frame to frame (phase, notes, label), so each is drawn once and reused.
        """
        chip = self._chips.get((text, fill, ink))
        if chip is None:
            chip = self._chips[(text, fill, ink)] = self._make_chip(text, fill, ink)
        x, y = xy
        w, h = chip.size
        x0 = x - w if right else x
        y0 = y - h if up else y
        img.paste(chip, (int(x0), int(y0)), chip)
        gap = max(2, h // 6)
        return y0 - gap if up else y0 + h + gap

    def _make_chip(self, text: str, fill, ink):
        from PIL import Image, ImageDraw

        box = self.f_tag.getbbox(text)
        w, h = box[2] - box[0], box[3] - box[1]
        px, py = int(0.5 * h) + 2, int(0.35 * h) + 2
        chip = Image.new("RGBA", (w + 2 * px, h + 2 * py), (0, 0, 0, 0))
        cd = ImageDraw.Draw(chip)
        cd.rounded_rectangle([0, 0, w + 2 * px - 1, h + 2 * py - 1], radius=h // 2 + py, fill=tuple(fill) + (255,))
        cd.text((px - box[0], py - box[1]), text, font=self.f_tag, fill=tuple(ink) + (255,))
        return chip

    def _push(self, img, d, r: Readout, arrow) -> None:
        push_arrow(d, arrow, unit=self.lay.unit, age_s=r.push_age_s)
        text = f"push {r.push_n_m_s * 1000:+.1f} mN m s"
        # bottom left, above the panel: clear of the device's upper half and of the limit notes (right)
        self._tag(img, (int(0.03 * self.width), self.top - int(0.06 * self.lay.unit)), text, fill=PUSH,
                  ink=(16, 24, 34), up=True)


def push_arrow(d, arrow, *, unit: float, age_s: float) -> None:
    """A push's arrow, ((x0, y0), (x1, y1)) pixel tail and head (None: none), thinning as the push
    ages (`age_s` of PUSH_SHOWN_S); `unit` is the panel's size unit, px."""
    if arrow is None:
        return
    fade = 1.0 - age_s / PUSH_SHOWN_S
    (x0, y0), (x1, y1) = arrow
    width = max(2, int(0.04 * unit * (0.5 + fade)))
    d.line([x0, y0, x1, y1], fill=PUSH, width=width)
    ang = math.atan2(y1 - y0, x1 - x0)
    s = 3.5 * width
    d.polygon([(x1, y1), (x1 - s * math.cos(ang - 0.45), y1 - s * math.sin(ang - 0.45)),
               (x1 - s * math.cos(ang + 0.45), y1 - s * math.sin(ang + 0.45))], fill=PUSH)


def dial_track(d, cx: float, cy: float, r: int) -> None:
    """A speed dial's half-circle track and ticks at 0, +-50 % and +-100 % of the limit (red), centre
    (cx, cy) px, radius r px; the needle reads DIAL_SPAN of the limit at either end."""
    d.arc([cx - r, cy - r, cx + r, cy + r], 180, 360, fill=TRACK, width=max(2, r // 6))
    for f in (-1.0, -0.5, 0.0, 0.5, 1.0):
        a = math.radians(90 - 90 * f / DIAL_SPAN)
        r0, r1 = r * 1.04, r * (1.18 if abs(f) in (0.0, 1.0) else 1.1)
        d.line([cx + r0 * math.cos(a), cy - r0 * math.sin(a), cx + r1 * math.cos(a), cy - r1 * math.sin(a)],
               fill=WARN if abs(f) == 1.0 else DIM, width=max(1, r // 20))
