"""The scenario's 3D keys: wheels, axis, vector at and rotation, mount, start tilt, vector pushes;
every refusal is one line naming its key (common practice, no source: the house style's rule)."""

from __future__ import annotations

import pytest

from conftest import make_scenario, make_scenario3d, scenario_dict, write_scenario
from sim.cli import main
from sim.core.errors import ScenarioError

DISK = {"shape": "disk", "radius": 0.05, "thickness": 0.005, "mass": 0.1}
BALL = {"mount": "ball", "parts": [{"shape": "box", "length": 0.1, "width": 0.05, "thickness": 0.05, "mass": 0.3,
                                    "at": 0.05}]}


def test_planar_keys_keep_the_planar_path():
    sc = make_scenario()
    assert sc.is_planar and sc.wheels is None and sc.body.mount == "hinge"
    assert isinstance(sc.body.parts[0].at, float)
    assert not make_scenario(trial={"pushes": [{"at": 0.1, "impulse": [0.001, 0, 0]}]}).is_planar
    assert not make_scenario(body={"parts": [{"shape": "point", "mass": 0.1, "at": 0.2, "rotation": 0.1}]}).is_planar


def test_vector_keys_parse_with_units():
    sc = make_scenario3d([{"at": ["10 mm", "0 mm", "20 cm"], "axis": [0, 3, 4], "parts": [DISK],
                           "brake_torque": "5 mN*m"}],
                         body={"parts": [{"shape": "point", "mass": 0.1, "at": [0, "-5 mm", 0.2],
                                          "rotation": ["90 deg", 0, 0]}]})
    w = sc.wheels[0]
    assert w.at == (0.01, 0.0, 0.2) and w.brake_torque == pytest.approx(0.005)
    assert sc.body.parts[0].at == (0.0, -0.005, 0.2)
    assert sc.body.parts[0].rotation == pytest.approx((1.5707963, 0.0, 0.0))
    from sim.model.device3d import Device3D
    assert Device3D.from_scenario(sc).wheels[0].axis == pytest.approx((0.0, 0.6, 0.8))


@pytest.mark.parametrize("change, key", [
    (lambda raw: raw.update(wheels=[{"at": 0.2, "parts": [DISK]}]), "wheels: give either wheel"),
    (lambda raw: raw.pop("wheel"), "wheel: missing"),
    (lambda raw: raw.update(wheels=[{"at": 0.2, "axis": [0, 0, 0], "parts": [DISK]}], wheel=None), "wheels[0].axis: expected a direction"),
    (lambda raw: raw.update(wheels=[{"at": [0.1, 0.2], "parts": [DISK]}], wheel=None), "wheels[0].at: expected a number or a list of three"),
    (lambda raw: raw.update(wheels=[{"at": 0.2, "parts": [DISK]}] * 4, wheel=None), "wheels"),
    (lambda raw: raw["body"]["parts"][0].update(at=[0, 0, "1e9 m"]), "body.parts[0].at: expected values within"),
    (lambda raw: raw["wheel"]["parts"][0].update(rotation=0.2), "wheel.parts[0].rotation"),
    (lambda raw: raw["trial"].update(start={"tilt": [0.1, 0.0]}), "trial.start.tilt"),
    (lambda raw: raw.update(body=BALL, strategy={"kind": "pid"}), "strategy.kind: pid works on one wheel"),
    # a locked body (a bench clamp) is held at rest, on a hinge or a ball; a floor body is not clamped
    (lambda raw: raw.update(body={**BALL, "mount": "floor", "locked": True}, floor={"friction": 0.8, "restitution": 0.1}),
     "body.locked: a body on the floor"),
    (lambda raw: raw.update(body={**BALL, "locked": True}, trial={"start": {"tilt_rate": [0.1, 0.0]}}),
     "trial.start.tilt_rate: a locked body is held at rest"),
    (lambda raw: raw.update(body=BALL, trial={"start": {"angle": 0.1}}), "trial.start.angle"),
    (lambda raw: raw.update(wheels=[{"at": 0.2, "parts": [DISK]}], wheel=None,
                            trial={"start": {"wheel_speed": [1.0, 2.0]}}), "trial.start.wheel_speed"),
    (lambda raw: raw.update(wheels=[{"at": 0.2, "parts": [{"shape": "point", "mass": 0.1}]}], wheel=None),
     "wheels[0].parts: the wheel's spin inertia is 0"),
    (lambda raw: raw.update(body=BALL, sensors={"imu": {"at": [0, 0, 0.1]}, "estimator": {"kind": "kalmann"}}),
     "sensors.estimator.kind: unknown estimator"),
    (lambda raw: raw.update(body=BALL, sensors={"imu": {"gyro": {"nois_density": 0.01}}}), "sensors.imu.gyro"),
    (lambda raw: raw.update(body=BALL, timing={"jitter": 1.0}), "timing.jitter"),
    (lambda raw: raw.update(body=BALL, sensors={"wheel": {"max_speed": -100.0}}), "sensors.wheel.max_speed"),
    # current mode on a 3D device: a law that commands amps, the loop's bandwidth, no datasheet curve
    (lambda raw: raw.update(body=BALL, drive={"supply": 12.0, "mode": "current", "current_bandwidth": 2000.0},
                            strategy={"kind": "fixed_voltage", "volts": 1.0}),
     "drive.mode: strategy 'fixed_voltage' commands volts only"),
    (lambda raw: raw.update(body=BALL, drive={"supply": 12.0, "mode": "current"}), "drive.current_bandwidth"),
    (lambda raw: raw.update(wheels=[{"at": 0.2, "parts": [DISK], "motor": {
        "speed_constant": "300 rpm/V", "resistance": 2.0,
        "curve": {"voltage": 12.0, "points": [{"speed": 0.0, "torque": 0.1}, {"speed": 100.0, "torque": 0.0}]}}}],
        wheel=None, body=BALL, drive={"supply": 12.0, "mode": "current", "current_bandwidth": 2000.0}),
     "wheels[0].motor.curve: applies to drive.mode voltage"),
    (lambda raw: raw.update(wheels=[{"at": 0.2, "parts": [DISK], "motor": {
        "speed_constant": "300 rpm/V", "resistance": 2.0, "thermal": {"coupled": True},
        "curve": {"voltage": 12.0, "points": [{"speed": 0.0, "torque": 0.1}, {"speed": 100.0, "torque": 0.0}]}}}],
        wheel=None, body=BALL), "wheels[0].motor.thermal.coupled"),
])
def test_bad_3d_keys_are_refused_in_one_line_naming_the_key(change, key):
    raw = scenario_dict()
    change(raw)
    if raw.get("wheel", 0) is None:
        raw.pop("wheel")
    with pytest.raises(ScenarioError) as info:
        from sim.model.scenario import validate_scenario
        validate_scenario(raw, where="s.yaml")
    msg = str(info.value)
    assert "\n" not in msg and msg.startswith("s.yaml: ")
    assert key in msg, msg


def test_every_wheel_with_its_own_motor_needs_no_shared_motor():
    motor = {"speed_constant": "300 rpm/V", "resistance": 2.0}
    raw = scenario_dict()
    raw.pop("wheel")
    raw.pop("motor")
    raw["wheels"] = [{"at": 0.2, "parts": [DISK], "motor": motor}, {"at": [0, 0.02, 0.15], "axis": [0, 1, 0],
                                                                      "parts": [DISK], "motor": motor}]
    from sim.model.scenario import validate_scenario
    sc = validate_scenario(raw, where="s.yaml")
    assert sc.motor is None and sc.wheel_motor(1).resistance == 2.0
    raw["wheels"][1].pop("motor")
    with pytest.raises(ScenarioError, match="motor: required key is missing"):
        validate_scenario(raw, where="s.yaml")


def test_cli_reports_a_bad_3d_key_in_one_line(tmp_path, capsys):
    raw = scenario_dict()
    raw.pop("wheel")
    raw["wheels"] = [{"at": 0.2, "axis": [1, 0], "parts": [DISK]}]
    path = write_scenario(tmp_path / "bad.yaml", raw)
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "wheels[0].axis" in err and str(path) in err
    assert not (tmp_path / "out").exists()
