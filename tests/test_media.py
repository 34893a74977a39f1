"""Clips and pictures: frame counts, moving frames, the panel's dial against the trace, file formats, CLI.

Small sizes and short trials keep these fast. The test device comes from conftest (invented).
"""

from __future__ import annotations

import math

import imageio.v2 as iio
import numpy as np
import pytest
from numpy.testing import assert_allclose

from sim.cli import main
from sim.media.overlay import DIAL_SPAN, PANEL, TEXT, Dashboard, readout
from sim.media.render import Scene
from sim.media.video import TrialPainter, clip_duration_s, frame_count, write_clip, write_side_by_side
from sim.run.trial import run_trial

from conftest import make_scenario, scenario_dict, write_scenario

SMALL = (160, 90)


def _falling():
    # tilted 10 deg with the motor off: the body falls, so the picture must change
    return run_trial(make_scenario(trial={"duration": 0.6, "start": {"angle": "10 deg"}}))


def _spinning():
    # body clamped, 6 V on the wheel: the wheel spins up while the body stays put
    return run_trial(make_scenario(body={"locked": True}, strategy={"kind": "fixed_voltage", "volts": 6.0},
                                   trial={"duration": 0.5}))


def _count_frames(path) -> int:
    with iio.get_reader(str(path)) as reader:
        return sum(1 for _ in reader)


def _first_frame(path) -> np.ndarray:
    # read to the end: an ffmpeg reader closed mid-stream leaves its pipes to the garbage collector
    with iio.get_reader(str(path)) as reader:
        frames = [frame[..., :3] for frame in reader]
    return frames[0]


def _label_chip_widths(frame: np.ndarray) -> list[int]:
    """Widest run of the label chip's fill colour (PANEL, within 10 per channel after the GIF's
    palette) in the top 20% of each half of a side-by-side frame, pixels."""
    near = np.abs(frame[: frame.shape[0] // 5].astype(int) - np.array(PANEL[:3])).max(axis=2) <= 10
    half = frame.shape[1] // 2
    return [int(near[:, x0:x0 + half].sum(axis=1).max()) for x0 in (0, half)]


@pytest.mark.parametrize("suffix", [".gif", ".mp4"])
def test_clip_frame_count_is_duration_times_fps(tmp_path, suffix):
    result = _falling()
    fps = 20
    info = write_clip(result, tmp_path / f"clip{suffix}", fps=fps, size=SMALL, progress=False)
    # a clip of D seconds at f frames per second has D * f frames (common practice, no source)
    duration = result.trace.n * result.scenario.world.step
    assert_allclose(duration, 0.6, rtol=1e-9)
    assert info.frames == round(duration * fps) == 12
    # both formats open with imageio and hold that many frames of the requested size
    assert _count_frames(info.path) == info.frames
    assert _first_frame(info.path).shape[:2] == (SMALL[1], SMALL[0])


def test_frames_change_while_the_body_moves_and_not_otherwise():
    moving, still = _falling(), run_trial(make_scenario(trial={"duration": 0.6}))
    for result, should_move in ((moving, True), (still, False)):
        painter = TrialPainter(result, width=192, height=108, render_scale=1.0)
        try:
            top = painter.dash.top          # compare the scene only; the panel's clock always changes
            a, _ = painter.paint(0.0)
            b, _ = painter.paint(0.55)
        finally:
            painter.close()
        changed = np.abs(a[:top].astype(int) - b[:top].astype(int)).max(axis=2) > 30
        assert (changed.sum() > 50) == should_move, (should_move, int(changed.sum()))
    # the fall itself: 10 deg at the start, well past it 0.55 s later
    assert abs(moving.trace.state_at(0.55)["angle_rad"]) > math.radians(30)


def test_dial_reads_the_trace_wheel_speed():
    result = _spinning()
    painter = TrialPainter(result, width=480, height=270, render_scale=1.0)
    try:
        for t in (0.05, 0.2, 0.45):
            frame, drawn = painter.paint(t)
            want = result.trace.state_at(t)["wheel_speed_rad_s"]
            assert abs(want) > 5.0                      # the wheel is really turning
            assert_allclose(drawn.dial_wheel_speed_rad_s, want, rtol=1e-9)
            # and the needle is painted where that speed belongs: sample the frame along it
            lay = painter.dash.lay
            a = math.radians(90.0 - 90.0 * want / result.device.no_load_speed_rad_s / DIAL_SPAN)
            x = lay.dial_c[0] + 0.6 * lay.dial_r * math.cos(a)
            y = lay.dial_c[1] - 0.6 * lay.dial_r * math.sin(a)
            near = frame[int(round(y)) - 1: int(round(y)) + 2, int(round(x)) - 1: int(round(x)) + 2].reshape(-1, 3)
            assert np.abs(near.astype(int) - TEXT).max(axis=1).min() <= 40     # a needle pixel within 1 px
    finally:
        painter.close()


def test_dial_limit_is_the_no_load_speed():
    r = readout(_spinning(), 0.1)
    # ideal DC motor no-load speed = Kv * V: 300 rpm/V * 12 V = 3600 rpm = 376.99 rad/s
    # (common practice, no source; ignores friction)
    assert_allclose(r.wheel_limit_rad_s, 3600 * 2 * math.pi / 60, rtol=1e-9)
    assert_allclose(r.supply_v, 12.0)


def test_notes_flag_voltage_at_supply():
    result = run_trial(make_scenario(body={"locked": True}, strategy={"kind": "fixed_voltage", "volts": 12.0},
                                     trial={"duration": 0.2}))
    assert "voltage at supply" in readout(result, 0.1).notes
    assert "voltage at supply" not in readout(_spinning(), 0.1).notes


def test_camera_projects_positive_angle_to_the_left_in_axis_view():
    with Scene(make_scenario(), width=192, height=108, camera="axis") as scene:
        pivot, up, tilted = scene.camera.project([[0, 0, 0], scene.wheel_centre(0.0), scene.wheel_centre(0.5)])
    assert up[1] < pivot[1]                     # upright: the wheel is above the pivot on screen
    # +0.5 rad about +x moves the tip towards -y, which is screen-left with the camera on +x
    assert tilted[0] < up[0] - 5


def test_side_by_side_is_one_labelled_clip_as_long_as_the_longer_trial(tmp_path):
    short, long_ = _spinning(), _falling()
    info = write_side_by_side([short, long_], ["short", "long"], tmp_path / "both.gif", fps=10, size=(192, 108),
                              progress=False)
    assert info.frames == frame_count(max(clip_duration_s(short), clip_duration_s(long_)), 10) == 6
    assert _count_frames(info.path) == 6
    assert _first_frame(info.path).shape[:2] == (108, 192)


def test_side_by_side_labels_each_half_with_its_own_label(tmp_path):
    # Each half carries its label in a chip at its top left: a one-letter label gives a narrow chip,
    # a long one a wide chip, in the half given; swapping the labels swaps the chips. The chip holds
    # the text's ink (TEXT colour). Seen at 384x216: 12 and 64 pixels wide.
    short, long_ = _spinning(), _falling()
    widths = {}
    for labels in (("A", "A LONGER LABEL"), ("A LONGER LABEL", "A")):
        info = write_side_by_side([short, long_], list(labels), tmp_path / f"{len(labels[0])}.gif", fps=2,
                                  size=(384, 216), progress=False)
        frame = _first_frame(info.path)
        widths[labels] = _label_chip_widths(frame)
        for x0 in (0, 192):   # the ink of the text inside each chip
            top = frame[: 216 // 5, x0:x0 + 192].astype(int)
            assert (np.abs(top - np.array(TEXT[:3])).max(axis=2) <= 40).sum() >= 10
    narrow, wide = widths[("A", "A LONGER LABEL")]
    assert 5 <= narrow and wide > 3 * narrow
    assert widths[("A LONGER LABEL", "A")] == [wide, narrow]


def test_dashboard_leaves_an_array_input_untouched():
    frame = np.full((90, 160, 3), 200, np.uint8)
    out, _ = Dashboard(160, 90).draw(frame, readout(_spinning(), 0.1))
    assert (frame == 200).all() and not (out == 200).all()


def test_cli_run_writes_a_clip(tmp_path, scenario_file):
    out, clip = tmp_path / "run", tmp_path / "clip.gif"
    code = main(["run", str(scenario_file), "--out", str(out), "--video", str(clip), "--size", "128x72",
                 "--fps", "10"])
    assert code == 0
    assert _count_frames(clip) == 5                 # 0.5 s at 10 fps


def test_cli_refuses_bad_clip_options_before_simulating(tmp_path, scenario_file, capsys):
    out = tmp_path / "run"
    assert main(["run", str(scenario_file), "--out", str(out), "--video", str(tmp_path / "c.avi")]) == 2
    assert main(["run", str(scenario_file), "--out", str(out), "--video", str(tmp_path / "c.gif"),
                 "--size", "100x51"]) == 2
    assert "--size" in capsys.readouterr().err
    assert not out.exists()                          # nothing was simulated or written
    mine = tmp_path / "mine.mp4"
    mine.write_bytes(b"user data")
    assert main(["run", str(scenario_file), "--out", str(out), "--video", str(mine)]) == 2
    assert mine.read_bytes() == b"user data"


def test_cli_compare_two_strategies(tmp_path):
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(trial={"duration": 0.3}))
    clip = tmp_path / "cmp.gif"
    code = main(["compare", str(path), "--set-b", "strategy.volts=3", "--video", str(clip), "--size", "192x108",
                 "--fps", "10", "--label", "off", "--label", "3 V"])
    assert code == 0
    assert _count_frames(clip) == 3


def test_fast_wheel_washes_out_its_marks_slow_one_does_not():
    with Scene(make_scenario(), width=640, height=360, camera="axis") as scene:   # big enough to show spokes
        sharp = scene.draw(0.0, 0.3)
        slow = scene.draw(0.0, 0.3, wheel_step_rad=0.3)     # 0.3 rad a frame: spokes still read right
        fast = scene.draw(0.0, 0.3, wheel_step_rad=3.0)     # past the 120-deg spoke spacing: aliasing
    assert (sharp == slow).all()
    assert np.abs(sharp.astype(int) - fast.astype(int)).max() > 30


# --------------------------------------------------------------------- streamed GIF, stale clip temporaries (issue 13)

def _noisy_frames(n: int, shape=(108, 192)):
    """Frames of coloured noise with a moving block: large after compression, different each frame."""
    rng = np.random.default_rng(5)
    frames = []
    for k in range(n):
        f = rng.integers(0, 256, (*shape, 3), dtype=np.uint8)
        f[10:40, 8 * k % shape[1]:8 * k % shape[1] + 20] = (200, 30, 30)
        frames.append(f)
    return frames


def test_gif_frames_reach_the_file_as_they_are_painted_and_decode_as_pillows_own(tmp_path):
    """A GIF clip is written frame by frame (the file grows before the clip ends, so memory stays
    flat in its length), and decodes to the same pixels as Pillow's own whole-clip GIF writer
    given the same palette frames (the reference: Pillow, a general-purpose imaging library)."""
    from PIL import Image

    from sim.media.video import _gif_palette, _Sink
    frames = _noisy_frames(6)
    path = tmp_path / "s.gif"
    sink = _Sink(path, fps=10)
    sizes = []
    for f in frames:
        sink.add(f)
        sizes.append(path.stat().st_size)
    sink.close()
    assert sizes[2] > 0 and sizes[-1] > sizes[2], sizes        # on disk before the end
    palette = _gif_palette(frames[0])
    quantised = [Image.fromarray(f).quantize(palette=palette, dither=Image.Dither.NONE) for f in frames]
    quantised[0].save(tmp_path / "ref.gif", format="GIF", save_all=True, append_images=quantised[1:], duration=100,
                      loop=0)
    with Image.open(path) as ours, Image.open(tmp_path / "ref.gif") as ref:
        assert ours.n_frames == ref.n_frames == 6
        for i in range(6):
            ours.seek(i)
            ref.seek(i)
            assert ours.info["duration"] == 100                # 10 fps: 100 ms a frame
            assert (np.asarray(ours.convert("RGB")) == np.asarray(ref.convert("RGB"))).all(), i


def test_stale_clip_temporaries_beside_a_video_are_cleaned_by_the_next_clip(tmp_path, scenario_file):
    """Issue 13 part 8: a killed `run --video` leaves its hidden temporary in the clip's folder
    (outside --out); the next clip written there removes it, as the folder's registry proves it
    ours; a user's file of the same look stays."""
    import subprocess
    import sys

    from sim.core.outputs import register_temp
    clips = tmp_path / "clips"
    clips.mkdir()
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    stale = clips / f".c.gif.{dead.pid}.1a2b3c4d.tmp.gif"
    register_temp(clips, stale.name)                  # as atomic_path does before the kill
    stale.write_bytes(b"GIF89a half a clip")
    user = clips / ".notes.999999.keepthis.tmp"
    user.write_text("mine")
    code = main(["run", str(scenario_file), "--out", str(tmp_path / "run"), "--video", str(clips / "c.gif"),
                 "--size", "128x72", "--fps", "10"])
    assert code == 0
    assert sorted(p.name for p in clips.iterdir()) == [".notes.999999.keepthis.tmp", "c.gif"]


def test_a_gif_frame_that_repeats_the_one_before_stays_a_frame(tmp_path):
    """A frame with no change is written as a one-pixel update: the clip keeps its frame count
    (duration x fps) and decodes to the same picture twice."""
    from PIL import Image

    from sim.media.video import _Sink
    frames = _noisy_frames(3)
    frames.insert(2, frames[1].copy())
    sink = _Sink(tmp_path / "r.gif", fps=25)
    for f in frames:
        sink.add(f)
    sink.close()
    with Image.open(tmp_path / "r.gif") as gif:
        assert gif.n_frames == 4
        pictures = []
        for i in range(4):
            gif.seek(i)
            pictures.append(np.asarray(gif.convert("RGB")).copy())
    assert (pictures[1] == pictures[2]).all() and not (pictures[2] == pictures[3]).all()
