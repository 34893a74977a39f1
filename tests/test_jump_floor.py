"""`kind: jump` on the floor (`body.mount: floor`, the floating body on a plane): from lying on a face
up to the balance edge. The device is our own invention, the needed speed is the momentum-and-energy figure checked against
Gajamohan, Merz, Thommen & D'Andrea (IROS 2012) in tests/test_jump_figures.py."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from conftest import make_scenario3d
from test_jump3d import CUBE, MOTOR, WHEEL


def _floor(strategy: dict, duration: float, gyro_noise: float = 0.0):
    from sim.run.trial import run_trial
    sc = make_scenario3d(WHEEL, body={**CUBE, "mount": "floor", "balance_on": "edge"}, motor=MOTOR,
                         floor={"friction": 0.8, "restitution": 0.1},
                         drive={"supply": 24.0, "brake_torque": 20.0, "brake_engage_time": 0.002},
                         sensors={"rate": 500.0, "rate_gyro": {"noise": gyro_noise}},
                         strategy={"kind": "jump", **strategy},
                         trial={"duration": duration, "start": {"resting_on": "face"}})
    res = run_trial(sc)
    return res, res.strategy.extra_metrics


@pytest.mark.parametrize("margin,balanced", [(1.1, True), (0.9, False)])
def test_on_the_floor_ten_percent_over_gets_up_and_ten_under_falls_back(margin, balanced):
    res, m = _floor({"margin": margin, "max_attempts": 1}, 2.0)
    assert m["jump_attempts"] == 1
    # the cube lies 45 deg from its edge (centre of mass on the face diagonal): the need from there
    assert m["needed_wheel_speed_rad_s"] == pytest.approx(120.87, rel=2e-3)
    if balanced:
        assert res.outcome == "balanced" and res.floor["slipped_at_s"] is None
        assert abs(res.trace.tilt_x[res.trace.n - 1]) < math.radians(3)
    else:
        assert res.outcome == "not_caught" and res.floor["rest_face"] is not None
        assert 0.5 < m["jump_energy_ratios"][0] < 0.9 ** 2


def test_on_the_floor_a_short_jump_is_corrected():
    res, m = _floor({"margin": 0.8, "max_attempts": 3}, 3.2)
    assert res.outcome == "balanced" and m["jump_attempts"] == 2


def test_a_noisy_gyro_still_sees_the_fallen_cube_at_rest_and_it_jumps_again():
    # 0.03 rad/s of gyro noise at 500 Hz (a MEMS gyro's, common practice, no source) crosses the 0.05 rad/s
    # rest threshold every few ticks: judged on the raw rate, the cube never looked still for 0.3 s and
    # the law waited on its face for ever after the short first jump
    res, m = _floor({"margin": 0.8, "max_attempts": 3}, 3.2, gyro_noise=0.03)
    assert res.outcome == "balanced" and m["jump_attempts"] == 2


def test_a_jump_to_a_corner_builds_the_edge_to_corner_law():
    # no longer refused at load: a floor device balancing on a corner gets the edge-to-corner law
    # (tests/test_jump_corner.py runs it)
    from sim.strategies.jump_corner import JumpToCorner
    sc = make_scenario3d(WHEEL, body={**CUBE, "mount": "floor", "balance_on": "corner"}, motor=MOTOR,
                         floor={"friction": 0.8, "restitution": 0.1}, drive={"supply": 24.0, "brake_torque": 20.0},
                         strategy={"kind": "jump"}, trial={"start": {"resting_on": "face"}, "duration": 0.01})
    from sim.run.trial import run_trial
    res = run_trial(sc)
    # this cube's centre of mass is above the middle of its edge (x = 0): standing on the corner at the
    # origin raises it nothing, which the figures say in one line, as the trial's outcome
    assert res.outcome == "strategy_failed" and "no rise to the corner" in res.message
    assert sc.strategy.cls.__name__ == "BrakeJump" and JumpToCorner.kind == "jump"


def test_validate_gives_the_jump_from_the_face_the_floor_body_rests_on(tmp_path, capsys):
    from conftest import scenario_dict, write_scenario
    from sim.cli import main
    raw = scenario_dict(body={**CUBE, "mount": "floor", "balance_on": "edge"}, motor=MOTOR,
                        floor={"friction": 0.8, "restitution": 0.1}, drive={"supply": 24.0, "brake_torque": 20.0},
                        strategy={"kind": "jump"}, trial={"start": {"resting_on": "face"}})
    raw.pop("wheel")
    raw["wheels"] = WHEEL
    try:
        code = main(["validate", str(write_scenario(tmp_path / "cube.yaml", raw))])
    except SystemExit as exc:
        code = exc.code
    # the cube's face lies 45 deg from its edge (centre of mass on the face diagonal; hand geometry)
    assert code in (0, None) and "jump face to edge from 45 deg: needs 120.9 rad/s" in capsys.readouterr().out


def test_the_bundled_floor_jump_demo_gets_up_on_its_first_try():
    # scenarios/floor_jump.yaml: its comment says the cube jumps from its face and balances
    from sim.model.scenario_yaml import load_scenario
    from sim.run.metrics3d import trial_metrics3d
    from sim.run.trial import run_trial
    sc = load_scenario(Path(__file__).resolve().parents[1] / "scenarios" / "floor_jump.yaml")
    m = trial_metrics3d(run_trial(sc))
    assert m["outcome"] == "balanced" and m["jump_attempts"] == 1
    assert m["reached_wheel_speed_rad_s"] > m["needed_wheel_speed_rad_s"] and m["jump_margin"] > 0
    assert m["slip_m"] < 1e-3 and m["lift_off_s"] == 0.0
