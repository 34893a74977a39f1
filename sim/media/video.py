"""Clips of finished trials: MP4 (imageio with imageio-ffmpeg) or GIF, chosen by the file's suffix.

Frame i shows the recorded state at t = i / fps (the trace row nearest that time): nothing is
simulated again. A clip of a trial lasting D seconds has round(D * fps) frames. Side-by-side
clips put two trials in one frame, each in its own labelled half; the shorter trial holds its
last state until the longer one ends.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..core.errors import InputError
from ..core.outputs import MARKER, atomic_path, check_name_lengths, probe_writable, remove_stale_temps
from ..core.progress import progress_bar
from .overlay import Dashboard, readout, row_index
from .render import CAMERAS, Scene

SUFFIXES = (".mp4", ".gif")
DEFAULT_FPS = 30
DEFAULT_SIZE = (960, 540)
RENDER_PIXELS = 600_000
"""Frames up to this many pixels have their moving parts drawn at full resolution; larger ones
draw them smaller and scale up. The renderer's cost follows the pixels it covers (see
benchmarks/render_speed.py for the time against the clip's duration at the default size)."""


def render_scale_for(width: int, height: int) -> float:
    """The renderer's share of a frame's size: 1 up to RENDER_PIXELS, smaller above."""
    return min(1.0, math.sqrt(RENDER_PIXELS / (width * height)))


@dataclass(frozen=True)
class ClipInfo:
    """What was written: path, frame count, clip length s, frames per second, wall time s."""

    path: Path
    frames: int
    duration_s: float
    fps: int
    wall_s: float


def parse_size(text: str) -> tuple[int, int]:
    """'960x540' -> (960, 540). Both even (the MP4 encoder's colour format needs it), 64..4096 px."""
    parts = str(text).lower().replace(" ", "").split("x")
    try:
        w, h = (int(p) for p in parts)
    except ValueError:
        raise InputError(f"--size {text}: expected WIDTHxHEIGHT in pixels, e.g. 960x540") from None
    if not (64 <= w <= 4096 and 64 <= h <= 4096) or w % 2 or h % 2:
        raise InputError(f"--size {text}: width and height must be even numbers from 64 to 4096")
    return w, h


def check_fps(fps: int) -> int:
    """A clip's frame rate, frames per second: a whole number from 1 to 240, else InputError."""
    if not 1 <= fps <= 240:
        raise InputError(f"--fps {fps}: expected a whole number from 1 to 240")
    return int(fps)


def check_target(path: str | Path, *, force: bool = False) -> Path:
    """Check a clip's path before anything is simulated; returns it as a Path.

    The suffix picks the format. An existing file is replaced only inside a folder that
    Wheelbench wrote (it holds our marker) or with `force`, so a user's file is never lost silently.
    """
    p = Path(path)
    check_name_lengths(p, option="--video")
    if p.suffix.lower() not in SUFFIXES:
        raise InputError(f"--video {p}: the suffix picks the format; use .mp4 or .gif")
    if p.is_dir():
        raise InputError(f"--video {p}: is a folder; give a file name ending in .mp4 or .gif")
    for parent in p.parents:
        if parent.exists():
            if not parent.is_dir():
                raise InputError(f"--video {p}: {parent} is a file, not a folder")
            break
    if p.exists() and not force and not (p.parent / MARKER).exists():
        raise InputError(f"--video {p}: the file exists; choose another name or pass --force to replace it")
    if not p.parent.exists():
        try:
            p.parent.mkdir(parents=True)
        except OSError as exc:
            raise InputError(f"--video {p}: cannot create its folder ({exc.strerror or exc})") from None
    probe_writable(p.parent, option=f"--video {p}")
    remove_stale_temps(p.parent)   # a killed clip's temporary, proven ours by the folder's registry
    return p


def clip_duration_s(result) -> float:
    """How long a trial's clip runs: the recorded span, s."""
    return result.trace.n * result.trace.step_s


def frame_count(duration_s: float, fps: int) -> int:
    """Frames in a clip of `duration_s` at `fps`: duration times fps, rounded."""
    return int(round(duration_s * fps))


class TrialPainter:
    """Paints the frames of one trial at one size: the 3D scene plus the instrument panel."""

    def __init__(self, result, *, width: int, height: int, camera: str = "axis", label: str | None = None,
                 render_scale: float | None = None, fps: int = DEFAULT_FPS):
        self.result, self.fps = result, fps
        render_scale = render_scale_for(width, height) if render_scale is None else render_scale
        self.dash = Dashboard(width, height, label=label)
        self._last_pose = (0.0, 0.0)
        self.scene = Scene(result.scenario, width=width, height=height, camera=camera, render_scale=render_scale,
                           scene_rows=self.dash.top)

    def paint(self, t_s: float):
        """(frame, Drawn) at time `t_s`: (height, width, 3) uint8 RGB and what the panel shows."""
        tr = self.result.trace
        k = row_index(tr, t_s)
        angle, wheel = float(tr.angle[k]), float(tr.wheel_angle[k])
        if not (math.isfinite(angle) and math.isfinite(wheel)):
            angle, wheel = self._last_pose   # a diverged trial's last row: hold the last drawable pose
        self._last_pose = (angle, wheel)
        frame = self.scene.draw_image(angle, wheel, wheel_step_rad=float(tr.wheel_speed[k]) / self.fps)
        r = readout(self.result, t_s)
        arrow = self._push_arrow(angle, r.push_n_m_s) if r.push_n_m_s else None
        return self.dash.draw(frame, r, push_arrow=arrow)

    def _push_arrow(self, angle: float, impulse: float):
        """Pixel tail and head of an arrow at the wheel, along the way the push turns the body."""
        lay = self.scene.layout
        # a positive impulse turns the body about +x: the tip moves along (0, -cos a, -sin a)
        way = math.copysign(1.0, impulse) * np.array([0.0, -math.cos(angle), -math.sin(angle)])
        hub = self.scene.wheel_centre(angle)
        head = hub - way * 1.2 * lay.wheel_radius_m
        tail = head - way * 0.45 * lay.reach_m
        (x0, y0), (x1, y1) = self.scene.camera.project([tail, head])
        return (x0, y0), (x1, y1)

    def close(self) -> None:
        self.scene.close()


def make_painter(result, *, width: int, height: int, camera: str | None, label: str | None, fps: int,
                 render_scale: float | None = None):
    """The painter of one trial: `TrialPainter` for a planar device, `clip3d.TrialPainter3D` for a 3D
    one (`result.is_3d`). `camera` None picks each kind's own default (axis for planar, oblique for 3D)."""
    if getattr(result, "is_3d", False):
        from .clip3d import TrialPainter3D
        return TrialPainter3D(result, width=width, height=height, camera=camera, label=label, fps=fps)
    return TrialPainter(result, width=width, height=height, camera=camera or "axis", label=label,
                        render_scale=render_scale, fps=fps)


def _check_camera(camera: str | None) -> None:
    if camera is not None and camera not in CAMERAS:
        raise InputError(f"--camera {camera}: expected one of {', '.join(CAMERAS)}")


class _Sink:
    """Frames to a file as they are painted: MP4 streams to ffmpeg, GIF to the file frame by
    frame (`_GifStream`), so memory stays flat however long the clip.

    x264's fastest preset: it takes about a third less of the frame budget than
    'veryfast' (measured with benchmarks/render_speed.py), for larger but still small files.
    """

    def __init__(self, path: Path, fps: int, *, colours=()):
        self.path, self.fps = path, fps
        self.gif = path.suffix.lower() == ".gif"
        if self.gif:
            self._writer = _GifStream(path, delay_ms=max(20, round(1000 / fps / 10) * 10),  # whole hundredths
                                      colours=colours)
        else:
            import imageio.v2 as iio
            self._writer = iio.get_writer(str(path), format="FFMPEG", mode="I", fps=fps, codec="libx264",
                                          pixelformat="yuv420p", macro_block_size=2, quality=None,
                                          ffmpeg_log_level="error", output_params=["-preset", "ultrafast", "-crf", "23"])

    def add(self, frame: np.ndarray) -> None:
        self._writer.append_data(frame)

    def close(self) -> None:
        self._writer.close()


class _GifStream:
    """A looping GIF written one frame at a time: the header with one palette for the whole clip
    (from the first frame, `_gif_palette`; no flicker between frames), then each frame as the
    rectangle that changed since the previous one, then the trailer. Only the previous frame's
    palette indices stay in memory.

    No dithering: the scene's colours are flat, and undithered frames compress far better.
    """

    def __init__(self, path: Path, *, delay_ms: int, colours=()):
        self.fh = open(path, "wb")
        self.delay_ms = delay_ms
        self.colours = tuple(colours)
        self._palette = None
        self._previous: np.ndarray | None = None

    def append_data(self, frame: np.ndarray) -> None:
        from PIL import GifImagePlugin, Image
        if self._palette is None:
            self._palette = _gif_palette(frame, self.colours)
        image = Image.fromarray(frame).quantize(palette=self._palette, dither=Image.Dither.NONE)
        index = np.asarray(image)
        info = {"duration": self.delay_ms, "disposal": 1}   # 1: keep the frame; the next draws over it
        if self._previous is None:
            header, _ = GifImagePlugin.getheader(image, info={"optimize": False, "loop": 0, **info})
            self.fh.write(b"".join(header))
            box = (0, 0, index.shape[1], index.shape[0])
        else:
            box = _changed_box(self._previous, index)
        self._previous = index
        part = image.crop(box)
        part.palette = image.palette
        self.fh.write(b"".join(GifImagePlugin.getdata(part, offset=box[:2], **info)))

    def close(self) -> None:
        if self._previous is not None:
            self.fh.write(b";")   # the GIF trailer
        self.fh.close()


def _changed_box(before: np.ndarray, after: np.ndarray) -> tuple[int, int, int, int]:
    """(left, top, right, bottom) of the pixels that differ; one pixel when none does."""
    rows = np.nonzero((before != after).any(axis=1))[0]
    if rows.size == 0:
        return (0, 0, 1, 1)
    cols = np.nonzero((before[rows[0]:rows[-1] + 1] != after[rows[0]:rows[-1] + 1]).any(axis=0))[0]
    return (int(cols[0]), int(rows[0]), int(cols[-1]) + 1, int(rows[-1]) + 1)


def _gif_palette(first: np.ndarray, extra=()):
    """A 255-colour palette from the first frame plus swatches of the panel's colours and `extra` ones.

    The swatches keep colours that appear later (a push, a limit note) in the palette.
    """
    from PIL import Image

    from . import overlay

    colours = [overlay.WARN, overlay.PUSH, overlay.VOLT, overlay.CURR, overlay.WHEEL, overlay.TEXT, overlay.DIM,
               overlay.TRACK, overlay.RULE[:3], (255, 246, 240), (16, 24, 34), *extra]
    block = 24
    swatch = np.zeros((block, block * len(colours), 3), np.uint8)
    for i, c in enumerate(colours):
        swatch[:, i * block:(i + 1) * block] = c
    width = max(first.shape[1], swatch.shape[1])
    sheet = np.zeros((first.shape[0] + block, width, 3), np.uint8)
    sheet[:first.shape[0], :first.shape[1]] = first
    sheet[first.shape[0]:, :swatch.shape[1]] = swatch
    return Image.fromarray(sheet).quantize(colors=255, method=Image.Quantize.FASTOCTREE, dither=Image.Dither.NONE)


def _write(path: Path, painters, fps: int, duration_s: float, progress: bool) -> ClipInfo:
    n = frame_count(duration_s, fps)
    if n < 1:
        raise InputError(f"--video {path}: the trial lasted {duration_s:g} s, too short for one frame at {fps} fps")
    wall0 = time.perf_counter()
    with atomic_path(path) as tmp, progress_bar(enabled=progress) as bar:
        task = bar.add_task(f"rendering {path.name}", total=n)
        sink = _Sink(tmp, fps, colours=[c for p in painters for c in getattr(p, "palette_colours", ())])
        try:
            for i in range(n):
                frames = [p.paint(i / fps)[0] for p in painters]
                sink.add(frames[0] if len(frames) == 1 else _side_by_side(frames))
                bar.advance(task)
        finally:
            sink.close()
    return ClipInfo(path, n, n / fps, fps, time.perf_counter() - wall0)


def _side_by_side(frames) -> np.ndarray:
    out = np.concatenate(frames, axis=1)
    x = frames[0].shape[1]
    out[:, max(0, x - 1): x + 1] = (16, 24, 34)   # a dark seam between the halves
    return out


def write_clip(result, path: str | Path, *, fps: int = DEFAULT_FPS, size: tuple[int, int] = DEFAULT_SIZE,
               camera: str | None = None, label: str | None = None, progress: bool = True,
               render_scale: float | None = None) -> ClipInfo:
    """Write a clip of one finished trial (a TrialResult, planar or 3D) to `path` (.mp4 or .gif), atomically.

    `label` defaults to the scenario's name and strategy; `camera` None: axis for a planar device,
    oblique for a 3D one. Returns a ClipInfo.
    """
    _check_camera(camera)
    width, height = size
    label = label if label is not None else f"{result.scenario.name} | {result.scenario.strategy.kind}"
    painter = make_painter(result, width=width, height=height, camera=camera, label=label, render_scale=render_scale,
                           fps=check_fps(fps))
    try:
        return _write(Path(path), [painter], check_fps(fps), clip_duration_s(result), progress)
    finally:
        painter.close()


def write_side_by_side(results, labels, path: str | Path, *, fps: int = DEFAULT_FPS,
                       size: tuple[int, int] = DEFAULT_SIZE, camera: str | None = None, progress: bool = True,
                       render_scale: float | None = None) -> ClipInfo:
    """Write two finished trials side by side, each half labelled, to `path` (.mp4 or .gif).

    `size` is the whole frame; each trial gets half its width. The clip runs as long as the
    longer trial.
    """
    if len(results) != 2 or len(labels) != 2:
        raise ValueError("a side-by-side clip takes two trials and two labels")
    _check_camera(camera)
    width, height = size
    halves = (width // 2, width - width // 2)
    painters = []
    try:
        for res, lab, w in zip(results, labels, halves):
            painters.append(make_painter(res, width=w, height=height, camera=camera, label=lab, fps=check_fps(fps),
                                         render_scale=render_scale))
        duration = max(clip_duration_s(r) for r in results)
        return _write(Path(path), painters, check_fps(fps), duration, progress)
    finally:
        for p in painters:
            p.close()


def clip_options(video: str | Path, *, fps: int = DEFAULT_FPS, size: str = "960x540", camera: str | None = None,
                 force: bool = False) -> dict:
    """Check the command line's clip options before anything is simulated.

    Returns keyword arguments for `write_clip` / `write_side_by_side`; raises InputError naming
    the option at fault.
    """
    _check_camera(camera)
    return dict(path=check_target(video, force=force), fps=check_fps(fps), size=parse_size(size), camera=camera)
