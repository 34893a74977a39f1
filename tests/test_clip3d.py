"""Clips and `compare` for 3D devices (sim/media/scene3d.py, clip3d.py, panel3d.py, sim/run/comparison.py).

Projection checks use outside references: scipy.spatial.transform.Rotation for the attitude (the
intrinsic z-y'-x'' sequence is R = Rz(heading) Ry(tilt_y) Rx(tilt_x), as `sim.core.frames` states)
and pybullet's own OpenGL-style view and projection matrices for the camera (computeViewMatrix and
computeProjectionMatrixFOV: a look-at view and a symmetric perspective frustum). The pinhole matrix
P = K R [I | -C] is Hartley & Zisserman, Multiple View Geometry in Computer Vision, 2nd ed., eq. 6.8.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
import yaml
from numpy.testing import assert_allclose
from scipy.spatial.transform import Rotation

from conftest import scenario_dict, write_scenario
from sim.cli import main
from sim.media.scene3d import Camera3D, FOV_DEG, Scene3D, body_to_world, frame_camera
from sim.model.device3d import Device3D
from sim.model.scenario_yaml import load_scenario

ROOT = Path(__file__).resolve().parents[1]
UNIT_BOX = np.array([(x, y, z) for x in (-0.5, 0.5) for y in (-0.5, 0.5) for z in (-0.5, 0.5)])


def _short_cube(tmp_path, *, duration=0.4) -> Path:
    """The corner-cube demo cut to `duration` s with one push inside it (a copy in tmp_path)."""
    raw = yaml.safe_load((ROOT / "scenarios" / "cube_corner.yaml").read_text())
    raw["trial"]["duration"] = f"{duration} s"
    raw["trial"]["pushes"] = [{"at": "0.1 s", "impulse": ["20 mN*m*s", 0, 0]}]
    return write_scenario(tmp_path / "cube.yaml", raw)


def _pinhole(cam: Camera3D, points) -> np.ndarray:
    """Pixels of world points through cam.matrix(): homogeneous product, divide by the third row."""
    h = np.hstack([points, np.ones((len(points), 1))]) @ cam.matrix().T
    return h[:, :2] / h[:, 2:3]


@pytest.mark.parametrize("tilt_x, tilt_y, heading", [(0.3, -0.2, 1.1), (-1.2, 0.7, -2.5), (0.0, 0.0, 0.0)])
def test_rotated_unit_box_projects_as_scipy_rotation_gives(tilt_x, tilt_y, heading):
    cam = frame_camera(UNIT_BOX * 3, preset="oblique", width=640, height=360)
    # reference: scipy's rotation of the corners, then the camera's 3x4 matrix (H&Z eq. 6.8)
    ref_world = Rotation.from_euler("ZYX", [heading, tilt_y, tilt_x]).apply(UNIT_BOX)
    ours_world = UNIT_BOX @ body_to_world(tilt_x, tilt_y, heading, np.eye(3)).T
    assert_allclose(ours_world, ref_world, atol=1e-12)
    px, _ = cam.project(ours_world)
    assert_allclose(px, _pinhole(cam, ref_world), atol=1e-9)   # pixels, within 1e-9 px


def test_camera_matches_pybullets_opengl_matrices():
    """The same view through pybullet's matrices (float32 inside pybullet, so to 1e-3 px)."""
    import pybullet as pb

    cam = frame_camera(UNIT_BOX, preset="oblique", width=800, height=450)
    view = np.array(pb.computeViewMatrix(list(cam.eye), list(cam.target), [0, 0, 1])).reshape(4, 4).T
    proj = np.array(pb.computeProjectionMatrixFOV(FOV_DEG, 800 / 450, 0.01, 100.0)).reshape(4, 4).T
    pts = Rotation.from_euler("ZYX", [0.4, 0.2, -0.3]).apply(UNIT_BOX) + [0.1, -0.2, 0.3]
    clip = np.hstack([pts, np.ones((8, 1))]) @ (proj @ view).T
    ndc = clip[:, :3] / clip[:, 3:4]
    ref = np.column_stack([(ndc[:, 0] + 1) / 2 * 800, (1 - ndc[:, 1]) / 2 * 450])
    assert_allclose(cam.project(pts)[0], ref, atol=1e-3)


def test_scene_poses_the_cube_shell_by_its_upright_attitude_and_the_trace_angles():
    sc = load_scenario(ROOT / "scenarios" / "cube_corner.yaml")
    dev = Device3D.from_scenario(sc)
    scene = Scene3D(sc, dev, width=320, height=200, supersample=1)
    shell = scene.body.faces[:6]    # the first part: the 150 mm shell, corner at the pivot
    corners = np.unique(np.round(np.concatenate([f.verts for f in shell]), 12), axis=0)
    assert_allclose(corners.min(axis=0), [0, 0, 0], atol=1e-12)
    assert_allclose(corners.max(axis=0), [0.15, 0.15, 0.15], atol=1e-12)
    r_wb = scene.attitude(0.05, -0.03, 0.4)
    ref = Rotation.from_euler("ZYX", [0.4, -0.03, 0.05]).apply(corners @ np.asarray(dev.upright()).T)
    assert_allclose(corners @ r_wb.T, ref, atol=1e-12)
    # upright (zero tilts): the centre of mass straight above the pivot (the definition in sim.core.frames)
    com = scene.attitude(0.0) @ np.asarray(dev.com_m)
    assert_allclose(com[:2], [0.0, 0.0], atol=1e-12)
    assert com[2] > 0.1


def test_short_3d_clip_has_its_frames_size_and_dials_reading_the_trace(tmp_path, capsys):
    path = _short_cube(tmp_path)
    clip = tmp_path / "cube.gif"
    code = main(["run", str(path), "--out", str(tmp_path / "out"), "--video", str(clip), "--fps", "10",
                 "--size", "320x180"])
    assert code == 0, capsys.readouterr().err
    from PIL import Image
    with Image.open(clip) as im:
        assert im.size == (320, 180)
        assert im.n_frames == 4                 # 0.4 s at 10 fps
    # the panel's dials read back each wheel's speed from the trace row the frame shows
    from sim.media.clip3d import TrialPainter3D
    from sim.run.trial import run_trial
    result = run_trial(load_scenario(path))
    painter = TrialPainter3D(result, width=320, height=180, fps=10, supersample=1)
    assert painter.paint(0.05)[1].readout.push_n_m_s is None     # before the push at 0.1 s
    frame, drawn = painter.paint(0.2)
    assert frame.shape == (180, 320, 3)
    k = int(round(0.2 / result.trace.step_s))
    speeds = [result.trace.wheel(i, "speed")[k] for i in (1, 2, 3)]
    assert_allclose(drawn.dial_speeds_rad_s, speeds, rtol=1e-12)
    assert_allclose(drawn.readout.push_n_m_s, (0.02, 0.0, 0.0))   # a push stays marked for 0.4 s


def test_compare_a_3d_and_a_planar_scenario_writes_one_table_with_both(tmp_path, capsys):
    cube = _short_cube(tmp_path, duration=0.3)
    planar = write_scenario(tmp_path / "planar.yaml", scenario_dict(trial={"duration": 0.3}))
    out = tmp_path / "cmp"
    code = main(["compare", str(cube), str(planar), "--out", str(out), "--label", "cube", "--label", "rod"])
    assert code == 0, capsys.readouterr().err
    table = json.loads((out / "compare.json").read_text())
    rows = {r["quantity"]: (r["a"], r["b"]) for r in table["rows"]}
    assert rows["wheel_count"] == (3, 1) and rows["mount"] == ("ball", "hinge")
    # per-wheel rows: three for the cube, the planar side's one wheel in the first
    for i in (1, 2, 3):
        assert rows[f"wheel{i}_peak_speed_rad_s"][0] == table["metrics"]["a"]["wheels"][i - 1]["peak_speed_rad_s"]
    assert rows["wheel1_peak_speed_rad_s"][1] == table["metrics"]["b"]["peak_wheel_speed_rad_s"]
    assert rows["wheel2_peak_speed_rad_s"][1] is None
    assert rows["peak_tilt_deg"][0] == pytest.approx(math.degrees(table["metrics"]["a"]["peak_tilt_rad"]), rel=1e-12)
    md = (out / "compare.md").read_text()
    assert "| quantity | cube | rod |" in md and "| wheel3_speed_margin |" in md
    assert (out / "compare.png").stat().st_size > 10_000
    printed = capsys.readouterr().out
    assert "wheel3_peak_current_a" in printed


def test_compare_without_a_clip_or_a_folder_is_one_line_and_exit_2(tmp_path, capsys):
    planar = write_scenario(tmp_path / "planar.yaml", scenario_dict(trial={"duration": 0.3}))
    assert main(["compare", str(planar)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "--video" in err and "--out" in err


@pytest.mark.parametrize("name", ["cube_corner.yaml", "tilted_axis.yaml"])
def test_clip_poses_the_body_as_the_engine_had_it(name):
    """The picture is posed from the trace alone; it must agree with pybullet's own attitude
    (`Engine3D.attitude`, read through the runner's on_step hook after each step)."""
    from sim.media.clip3d import TrialPainter3D
    from sim.run.trial3d import run_trial3d
    sc = load_scenario(ROOT / "scenarios" / name, overrides=("trial.duration=0.25", "trial.pushes=[]"))
    seen = {}

    def record(k, engine):
        if k % 50 == 0:
            seen[k + 1] = np.array(engine.attitude())   # after step k: the state of trace row k + 1
    result = run_trial3d(sc, on_step=record)
    painter = TrialPainter3D(result, width=160, height=120, supersample=1)
    assert len(seen) >= 4
    for row, r_wb in seen.items():
        assert_allclose(painter.pose_at(row)[0], r_wb, atol=1e-9)


def test_a_floor_mount_stands_on_the_ground_plane_without_a_stand():
    """A body on the floor (`body.mount: floor`) is drawn on the ground plane z = 0, with no stand."""
    sc = load_scenario(ROOT / "scenarios" / "floor_cube.yaml")
    scene = Scene3D(sc, Device3D.from_scenario(sc), width=320, height=200, supersample=1)
    assert scene.mount == "floor"
    assert scene.layout.floor_z_m == 0.0 and scene.stand.faces == [] and scene.stand.spheres == []
    corner = load_scenario(ROOT / "scenarios" / "cube_corner.yaml")
    ball = Scene3D(corner, Device3D.from_scenario(corner), width=320, height=200, supersample=1)
    assert ball.layout.floor_z_m < 0 and len(ball.stand.faces) > 0 and len(ball.stand.spheres) == 1
    # the ground plane is drawn at z = 0: a point of it in front of the device shows the floor colour
    img = np.asarray(scene.draw_image(scene.attitude(0.0), [0.0]))
    x, y = scene.camera.project([[0.1, -0.15, 0.0]])[0][0]   # before the device, on the ground, off the grid lines
    from sim.media.render import COLOURS
    floor_rgb = 255 * np.array(COLOURS["floor"][:3])
    assert np.abs(img[int(y), int(x)].astype(float) - floor_rgb).max() < 3


def test_a_cube_that_fell_on_the_floor_is_drawn_lying_on_it():
    # Left alone at 15 deg the floor cube tips onto a face. The clip poses it from the trace (its whole
    # attitude and where its frame's origin is): resting, its lowest drawn point is on the floor
    # (geometry: a body lying on a plane touches it; 2 mm for the engine's contact tolerance).
    from sim.media.clip3d import TrialPainter3D
    from sim.run.trial3d import run_trial3d
    sc = load_scenario(ROOT / "scenarios" / "floor_cube.yaml",
                       overrides=("trial.start.angle=15 deg", "strategy.kind=coast", "trial.pushes=[]",
                                  "trial.duration=1.5"))
    result = run_trial3d(sc)
    painter = TrialPainter3D(result, width=160, height=120, supersample=1)
    r_wb, _, origin = painter.pose_at(result.trace.n - 1)
    verts = painter.scene.body.verts @ r_wb.T + origin
    assert math.degrees(float(result.trace.tilt[result.trace.n - 1])) > 35     # it did fall
    assert abs(float(verts[:, 2].min())) < 2e-3


def test_a_floor_clip_marks_the_balancing_contact_on_the_floor():
    # the ring sits where the trace puts the contact (the body frame's origin), in the touching colour
    from sim.media.clip3d import CONTACT_RGB, TrialPainter3D
    from sim.run.trial3d import run_trial3d
    sc = load_scenario(ROOT / "scenarios" / "floor_cube.yaml", overrides=("trial.duration=0.2", "trial.pushes=[]"))
    result = run_trial3d(sc)
    painter = TrialPainter3D(result, width=480, height=320, supersample=1)
    k = result.trace.n - 1
    _, _, origin = painter.pose_at(k)
    scene = painter.scene.draw_image(*painter.pose_at(k)[:2], origin=origin)
    painter._mark_contact(scene, origin, touching=True)
    (x, y), _ = (v[0] for v in painter.scene.camera.project([[origin[0], origin[1], 0.0]]))
    img = np.asarray(scene).astype(int)
    near = img[int(y) - 8:int(y) + 9, int(x) - 8:int(x) + 9].reshape(-1, 3)
    assert np.min(np.abs(near - np.array(CONTACT_RGB)).max(axis=1)) <= 2   # the ring passes within 8 px
