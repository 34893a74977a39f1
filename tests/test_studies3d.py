"""`sweep`, `catch-map` and `tune` on 3D devices, end to end through the CLI entry (`sim.cli.main`).

Devices: the two demos (scenarios/cube_corner.yaml, scenarios/tilted_axis.yaml) and our own test
device tests/data/two_wheel_pole.yaml (a pole on a ball socket, two identical wheels on x and y at
one point: symmetric under a quarter turn about the vertical). Trials are short, grids coarse.
"""

import csv
import json
import math
from pathlib import Path

import numpy as np
import pytest
import yaml

from sim.cli import main

ROOT = Path(__file__).resolve().parents[1]
POLE = str(ROOT / "tests" / "data" / "two_wheel_pole.yaml")
CUBE = str(ROOT / "scenarios" / "cube_corner.yaml")
TILTED = str(ROOT / "scenarios" / "tilted_axis.yaml")


def _rows(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def _one_line_exit_2(capsys, argv, *, out=None, says=()):
    assert main(argv) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "Traceback" not in err, err
    for word in says:
        assert word in err, err
    if out is not None:
        assert not Path(out).exists()    # nothing half-written
    return err


# ----------------------------------------------------------------------------- sweep

def test_sweep_over_a_wheel_key_and_a_push_component_reports_each_wheel(tmp_path, capsys):
    out = tmp_path / "sw"
    argv = ["sweep", POLE, "--vary", "wheels[1].parts[0].outer_radius=40 mm,60 mm",
            "--vary", "trial.pushes[0].impulse[1]=10 mN*m*s,20 mN*m*s", "--set", "trial.start.tilt=[0.5 deg, 0]",
            "--set", "requirements.hold_time=2 s",     # short bias holds for the runaway column: a quick test
            "--out", str(out), "--workers", "1"]
    assert main(argv) == 0
    rows = _rows(out / "results.csv")
    assert len(rows) == 4
    head = list(rows[0])
    assert head[:2] == ["wheels[1].parts[0].outer_radius", "trial.pushes[0].impulse[1]"]
    assert head[-10:] == ["peak_tilt_rad", "wheel_count"] + [f"wheel{i}_{k}" for i in (1, 2) for k in (
        "peak_speed_rad_s", "speed_margin", "peak_current_a", "rms_current_a")]
    for r in rows:
        assert r["outcome"] == "balanced" and r["wheel_count"] == "2"
        assert float(r["peak_tilt_rad"]) >= math.radians(0.5) - 1e-9     # the start tilt is part of the trial
        # the worst wheel in the scalar keys (metrics3d's rule: the lowest speed margin)
        assert float(r["wheel_speed_margin"]) == min(float(r["wheel1_speed_margin"]), float(r["wheel2_speed_margin"]))
        # a push about world y is taken by the wheel on y: a wheel's reaction torque acts along its
        # own axis (Newton-Euler for a rotor on a body; common practice, no source)
        assert float(r["wheel2_peak_speed_rad_s"]) > 2.0 * float(r["wheel1_peak_speed_rad_s"])
    by = {(float(r["wheels[1].parts[0].outer_radius"]), float(r["trial.pushes[0].impulse[1]"])): r for r in rows}
    for radius in (0.04, 0.06):      # twice the push, a faster y wheel (L = I w, more momentum to take)
        assert float(by[(radius, 0.02)]["wheel2_peak_speed_rad_s"]) > float(by[(radius, 0.01)]["wheel2_peak_speed_rad_s"])
    for push in (0.01, 0.02):        # a bigger wheel takes the same momentum at a lower speed (I grows as r^4)
        assert float(by[(0.06, push)]["wheel2_peak_speed_rad_s"]) < float(by[(0.04, push)]["wheel2_peak_speed_rad_s"])
    assert (out / "sweep.png").stat().st_size > 0
    # resumable as the planar sweep: the same command again runs nothing and writes the same table
    before, journal = (out / "results.csv").read_bytes(), (out / "sweep.jsonl").read_bytes()
    assert main(argv) == 0
    assert (out / "results.csv").read_bytes() == before and (out / "sweep.jsonl").read_bytes() == journal


def test_sweep_refuses_3d_only_input_in_one_line(tmp_path, capsys):
    out = str(tmp_path / "o")
    _one_line_exit_2(capsys, ["sweep", POLE, "--vary", "drive.supply=12V,24V", "--color", "wheel3_speed_margin",
                              "--out", out], out=out, says=("--color", "2 wheel"))
    _one_line_exit_2(capsys, ["sweep", "--vary", "drive.supply=12V,24V", "--color", "peak_tilt_rad", "--out", out],
                     out=out, says=("--color", "planar"))
    # the override parser's list form is `[1]`; a dotted index names the option and the key
    _one_line_exit_2(capsys, ["sweep", POLE, "--vary", "wheels.1.parts.0.outer_radius=40mm,50mm", "--out", out],
                     out=out, says=("wheels.1.parts.0.outer_radius", "wheel.parts[0]"))


# ----------------------------------------------------------------------------- catch map

def _pole_hold_tilt(phi: float) -> float:
    """The largest tilt the pole's wheels hold about the horizontal axis at phi, by statics: the
    wheels on x and y must give a torque alpha (cos phi, sin phi) with each at most its stall
    torque k_t I_max, against m g d sin(tilt) (moment balance about the pivot; any statics text,
    e.g. Meriam & Kraige, Engineering Mechanics: Statics, equilibrium of a rigid body; from memory)."""
    from sim.model.device3d import Device3D
    from sim.model.scenario_yaml import load_scenario
    dev = Device3D.from_scenario(load_scenario(POLE))
    k_t = 60.0 / (2 * math.pi * 200.0)            # 200 rpm/V -> V s/rad = N m/A
    stall = k_t * min(24.0 / 1.2, 6.0)            # the scenario's supply, resistance, current limit
    alpha = stall / max(abs(math.cos(phi)), abs(math.sin(phi)))
    return math.asin(min(1.0, alpha / dev.gravity_torque_coeff_n_m))


def test_ball_catch_map_is_symmetric_and_catches_nothing_the_wheels_cannot_hold(tmp_path):
    from sim.model.device3d import Device3D
    from sim.model.device_figures3d import holdable_tilt_about
    from sim.model.scenario_yaml import load_scenario
    out = tmp_path / "map"
    assert main(["catch-map", POLE, "--grid", "5", "--angle-max", "24 deg", "--out", str(out), "--workers", "1"]) == 0
    rows = _rows(out / "catch_map.csv")
    assert list(rows[0])[:3] == ["tilt_x_rad", "tilt_y_rad", "caught"]
    n = 5
    caught = np.array([[rows[i * n + j]["caught"] == "True" for j in range(n)] for i in range(n)])
    assert caught[2, 2] and not caught.all()
    # The device is the same after a quarter turn about the vertical (wheel x -> wheel y, wheel y ->
    # wheel x reversed; the LQR design is symmetric alike), and the grid is square about zero, so the
    # map must be too: start (tx, ty) -> (-ty, tx), and the half turn (-tx, -ty). "Within the grid's
    # resolution": R = Ry Rx is not exactly symmetric at second order, so a cell may differ only
    # where it borders the other outcome.
    for turned in (np.rot90(caught), np.rot90(caught, 2)):
        for i, j in zip(*np.nonzero(turned != caught)):
            near = caught[max(0, i - 1):i + 2, max(0, j - 1):j + 2]
            assert near.any() and not near.all(), (i, j)
    # statics: no start tilt beyond what the stall torques can hold is caught (from rest, gravity then
    # tips the body faster than the wheels can return it)
    dev = Device3D.from_scenario(load_scenario(POLE))
    beyond = 0
    for r in rows:
        tx, ty = float(r["tilt_x_rad"]), float(r["tilt_y_rad"])
        h = (math.sin(ty) * math.cos(tx), -math.sin(tx))        # centre of mass, horizontal part
        if h == (0.0, 0.0):
            continue
        phi = math.atan2(h[0], -h[1])                            # the tipping axis u = z x h
        limit = _pole_hold_tilt(phi)
        np.testing.assert_allclose(holdable_tilt_about(dev, phi), limit, rtol=1e-6)   # the linear program agrees
        if float(r["tilt_rad"]) > limit:
            beyond += 1
            assert r["caught"] == "False", r
    assert beyond >= 4          # the check bites: the corners are past the statics
    summary = json.loads((out / "catch_map.json").read_text())
    assert summary["kind"] == "tilt" and summary["caught_cells"] == int(caught.sum())
    assert [a["label"] for a in summary["axes"]] == ["start tilt about world x [deg]", "start tilt about world y [deg]"]


def test_cube_catch_map_stays_inside_the_statics_limit(tmp_path):
    out = tmp_path / "cube"
    assert main(["catch-map", CUBE, "--grid", "5", "--angle-max", "20 deg", "--out", str(out), "--workers", "1"]) == 0
    summary = json.loads((out / "catch_map.json").read_text())
    rows = _rows(out / "catch_map.csv")
    assert rows[12]["caught"] == "True"                         # upright at rest
    # `validate`'s holdable tilt (a linear program over directions) bounds every catch from rest
    assert 0 < summary["largest_caught_tilt_rad"] <= summary["holdable_tilt_rad"] * 1.15
    assert all(r["caught"] == "False" for r in rows if float(r["tilt_rad"]) > math.radians(20))


def test_direction_map_and_a_tilted_hinge(tmp_path):
    out0, out90 = tmp_path / "d0", tmp_path / "d90"
    for out, deg in ((out0, "0 deg"), (out90, "90 deg")):
        assert main(["catch-map", POLE, "--direction", deg, "--grid", "3", "--angle-max", "10 deg",
                     "--rate-max", "1.5 rad/s", "--out", str(out), "--workers", "1"]) == 0
    r0, r90 = _rows(out0 / "catch_map.csv"), _rows(out90 / "catch_map.csv")
    assert list(r0[0])[:2] == ["tilt_along_rad", "rate_along_rad_s"]
    assert r0[4]["caught"] == "True"
    # the quarter-turn symmetry again: tilt and rate about world y map as about world x
    assert [r["caught"] for r in r0] == [r["caught"] for r in r90]
    labels = [a["label"] for a in json.loads((out90 / "catch_map.json").read_text())["axes"]]
    assert labels == ["start tilt about the axis at 90 deg from world x [deg]", "start tilt rate about that axis [rad/s]"]

    # a hinge whose wheel axis is 20 deg off the hinge: only cos 20 deg of the wheel's torque turns
    # the body, so it holds asin(k_t I_max cos 20 / m g d) by statics (the bearing takes the rest)
    from sim.model.device3d import Device3D
    from sim.model.scenario_yaml import load_scenario
    dev = Device3D.from_scenario(load_scenario(TILTED))
    k_t = 60.0 / (2 * math.pi * 300.0)
    hold = math.asin(k_t * min(12.0 / 1.8, 4.0) * math.cos(math.radians(20)) / dev.gravity_torque_coeff_n_m)
    out = tmp_path / "hinge"
    assert main(["catch-map", TILTED, "--grid", "3", "--angle-max", "25 deg", "--rate-max", "1 rad/s",
                 "--out", str(out), "--workers", "1"]) == 0
    rows = _rows(out / "catch_map.csv")
    summary = json.loads((out / "catch_map.json").read_text())
    np.testing.assert_allclose(summary["holdable_tilt_rad"], hold, rtol=1e-6)   # the file gives cos 20 deg to 7 digits
    assert list(rows[0])[:2] == ["angle_rad", "rate_rad_s"] and rows[4]["caught"] == "True"
    assert math.radians(25) > hold
    at_rest = [r for r in rows if float(r["rate_rad_s"]) == 0.0 and float(r["angle_rad"]) != 0.0]
    assert len(at_rest) == 2 and all(r["caught"] == "False" for r in at_rest)


def test_catch_map_refuses_options_that_do_not_fit_the_device(tmp_path, capsys):
    out = str(tmp_path / "o")
    _one_line_exit_2(capsys, ["catch-map", TILTED, "--direction", "30 deg", "--out", out], out=out,
                     says=("--direction", "hinge"))
    _one_line_exit_2(capsys, ["catch-map", TILTED, "--axes", "tilt-x,tilt-y", "--out", out], out=out,
                     says=("--axes", "hinge"))
    _one_line_exit_2(capsys, ["catch-map", "--direction", "30 deg", "--out", out], out=out,
                     says=("--direction", "one-wheel"))
    _one_line_exit_2(capsys, ["catch-map", POLE, "--rate-max", "1 rad/s", "--out", out], out=out,
                     says=("--rate-max", "--direction"))
    _one_line_exit_2(capsys, ["catch-map", POLE, "--axes", "tilt-z,rate", "--out", out], out=out, says=("--axes",))
    floor = str(ROOT / "scenarios" / "floor_cube.yaml")     # its start takes no rate about two axes
    _one_line_exit_2(capsys, ["catch-map", floor, "--direction", "10 deg", "--out", out], out=out,
                     says=("--direction", "floor"))
    _one_line_exit_2(capsys, ["catch-map", POLE, "--direction", "north", "--out", out], out=out, says=("--direction",))


def test_start_tilt_rate_sets_a_ball_mounts_start_rate_and_is_refused_on_a_hinge(tmp_path, capsys):
    out = tmp_path / "r"
    assert main(["run", POLE, "--set", "trial.duration=0.05 s", "--set", "trial.pushes=[]",
                 "--set", "trial.start.tilt_rate=[0.3 rad/s, -0.2 rad/s]", "--out", str(out)]) == 0
    first = _rows(out / "trace.csv")[0]
    # the first row is the state as set (the heading frame is the world frame at heading 0)
    np.testing.assert_allclose([float(first["rate_x_rad_s"]), float(first["rate_y_rad_s"])], [0.3, -0.2], atol=1e-9)
    _one_line_exit_2(capsys, ["run", TILTED, "--set", "trial.start.tilt_rate=[0.3, 0]", "--out", str(tmp_path / "h")],
                     says=("trial.start.tilt_rate", "ball"))


# ----------------------------------------------------------------------------- tune

@pytest.mark.slow
def test_tune_searches_the_multi_wheel_lqr_and_resumes(tmp_path, capsys):
    from sim.model.device3d import Device3D
    from sim.model.scenario_yaml import load_scenario
    out = tmp_path / "tune"
    short = tmp_path / "tilted.yaml"
    raw = yaml.safe_load(Path(TILTED).read_text())
    raw["trial"] |= {"duration": "2 s", "pushes": [{"at": "1 s", "impulse": "8 mN*m*s"}]}
    raw["requirements"] = {"hold_time": "20 s"}    # shorter bias holds for the runaway criterion (the loop settles in ~10 s)
    short.write_text(yaml.safe_dump(raw))
    argv = ["tune", str(short), "--trials", "2", "--mc-trials", "1", "--workers", "1", "--out", str(out)]
    assert main(argv) == 0
    rows = _rows(out / "tune.csv")
    keys = ["strategy.weights[0]", "strategy.weights[1]", "strategy.weights[2]", "strategy.effort"]
    assert list(rows[0])[2:6] == keys and len(rows) == 2
    # the first evaluation is Bryson's rule (Bryson and Ho, Applied Optimal Control, 1975; from
    # memory): 1/x_max^2 with 3 deg, 0.5 rad/s, half the wheel's no-load speed, and 1/V^2 at the supply
    dev = Device3D.from_scenario(load_scenario(short))
    start = [1 / math.radians(3) ** 2, 1 / 0.5 ** 2, 1 / (0.5 * dev.wheels[0].no_load_speed_rad_s) ** 2, 1 / 12.0 ** 2]
    np.testing.assert_allclose([float(rows[0][k]) for k in keys], start, rtol=1e-12)
    verdict = json.loads((out / "verdict.json").read_text())
    assert verdict["passed"] and verdict["wheel_count"] == 1
    assert verdict["max_push_survived_n_m_s"] >= verdict["requirements"]["min_push"]
    # the winner goes back into the scenario and holds
    patched = tmp_path / "best.yaml"
    assert main(["apply", str(short), str(out / "best_patch.yaml"), "--out", str(patched)]) == 0
    assert main(["run", str(patched), "--out", str(tmp_path / "best_run")]) == 0
    assert json.loads((tmp_path / "best_run" / "metrics.json").read_text())["outcome"] == "balanced"
    # the optuna study in tune.db resumes: one more evaluation, the first two unchanged
    assert main([*argv[:3], "3", *argv[4:]]) == 0
    again = _rows(out / "tune.csv")
    assert len(again) == 3 and again[:2] == rows


@pytest.mark.slow
def test_one_wheel_sweep_and_catch_map_files_are_unchanged(tmp_path):
    """The planar outputs byte for byte: digests of the same commands run by main at 7b62bdc,
    before sweep and catch-map learned 3D devices."""
    import hashlib
    assert main(["sweep", "--vary", "drive.supply=10V,14V", "--set", "trial.duration=1.5 s", "--set", "trial.pushes=[]",
                 "--out", str(tmp_path / "sw"), "--workers", "1"]) == 0
    assert main(["catch-map", "--grid", "3", "--out", str(tmp_path / "cm"), "--workers", "1"]) == 0
    digests = {f: hashlib.sha256((tmp_path / f).read_bytes()).hexdigest() for f in ("sw/results.csv", "cm/catch_map.csv")}
    assert digests == {"sw/results.csv": "682222c27220191bdfab356824c2b9484e6924804b07823d5bb9805da22d4f08",
                       "cm/catch_map.csv": "4b2e512d321542dc5a942839bc32e0796fb7803865b23598ccaedff2206653b0"}


def test_sweep_over_the_tilted_demos_axis_shows_what_the_tilt_costs(tmp_path):
    # axis[1] = 0 leaves [0.9396926, 0, 0], normalised to the hinge axis; the demo's 0.3420201 turns it
    # 20 deg. On a hinge only cos 20 deg of the wheel's torque turns the body (statics: the bearing
    # takes the rest), so the tilted wheel must work harder and spin faster for the same trial
    # (the demo's comment: 50.6 against 46.7 rad/s).
    out = tmp_path / "axis"
    assert main(["sweep", TILTED, "--vary", "wheels[0].axis[1]=0,0.3420201", "--set", "requirements.hold_time=2 s",
                 "--out", str(out), "--workers", "1"]) == 0
    straight, tilted = _rows(out / "results.csv")
    assert straight["wheel_count"] == tilted["wheel_count"] == "1"
    assert straight["outcome"] == tilted["outcome"] == "balanced"
    assert float(tilted["peak_wheel_speed_rad_s"]) > 1.03 * float(straight["peak_wheel_speed_rad_s"])
    assert float(tilted["wheel1_peak_speed_rad_s"]) == float(tilted["peak_wheel_speed_rad_s"])


def test_a_default_tilt_map_spans_one_and_a_half_times_the_widest_statics_limit():
    # Two equal wheels on x and y: about the horizontal axis at phi the wheels give, with nothing
    # about the axis across it, S / max(|cos phi|, |sin phi|), widest at 45 deg: sqrt(2) S (statics,
    # by hand). At rest no start tilt past asin(sqrt(2) S / m g d) can be caught, so the default map
    # spans 1.5 times it (when that is inside the law's release angle) and its cells go where the edge is.
    from sim.model.device3d import Device3D
    from sim.model.device_figures3d import stall_torque_n_m
    from sim.model.scenario import validate_scenario
    from sim.studies.catchmap3d import catch_map3d
    raw = yaml.safe_load(Path(POLE).read_text())
    raw.setdefault("drive", {})["supply"] = "3 V"          # a weak drive: the statics limit well inside 30 deg
    dev = Device3D.from_scenario(validate_scenario(raw, where=POLE))
    s = stall_torque_n_m(dev.wheels[0])
    widest = math.asin(math.sqrt(2.0) * s / dev.gravity_torque_coeff_n_m)
    result = catch_map3d(raw, POLE, grid=1)
    assert 1.5 * widest < 0.95 * math.radians(30)
    assert result["angle_max_rad"] == pytest.approx(1.5 * widest, rel=1e-6)
