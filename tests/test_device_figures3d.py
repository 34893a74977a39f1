"""`validate`'s figures for 3D devices (sim.model.device_figures3d): the largest tilt the wheels can
hold, by static torque balance (common practice, no source): m g d sin(tilt) = the wheels' stall
torques acting about the tilt's axis."""

from __future__ import annotations

import math

import pytest

from conftest import make_scenario3d
from sim.cli import main
from sim.model.device3d import Device3D
from sim.model.device_figures3d import holdable_tilt, stall_torque_n_m

RING = {"shape": "ring", "outer_radius": 0.05, "inner_radius": 0.04, "thickness": 0.006, "mass": 0.1}
MOTOR = {"speed_constant": "250 rpm/V", "resistance": 1.5, "current_limit": 2.0, "mass": 0.05}


def _device(wheels, mount):
    sc = make_scenario3d(wheels, body={"mount": mount, "parts": [{"shape": "point", "mass": 0.4, "at": 0.2}]},
                         motor=MOTOR, drive={"supply": 12.0}, strategy={"kind": "lqr"})
    return Device3D.from_scenario(sc)


def test_a_tilted_axis_on_a_hinge_holds_with_the_hinge_component_of_its_torque():
    # only the torque's component along the hinge turns a hinge body (the rest goes into the bearing)
    d = _device([{"at": [0, 0, 0.2], "axis": [math.cos(0.35), math.sin(0.35), 0], "parts": [RING]}], "hinge")
    stall = stall_torque_n_m(d.wheels[0])
    assert stall == pytest.approx(d.wheels[0].k_t_n_m_a * MOTOR["current_limit"], rel=1e-12)  # k_t I_max: 2 A < 12 V / 1.5 ohm
    tilt, phi = holdable_tilt(d)
    assert phi is None
    assert math.sin(tilt) == pytest.approx(stall * math.cos(0.35) / d.gravity_torque_coeff_n_m, rel=1e-9)


def test_two_orthogonal_wheels_on_a_ball_hold_least_about_a_wheel_axis():
    # wheels on x and y at the top of an upright pole: about x only wheel 1 acts, about y only wheel 2;
    # about a diagonal both do, so the worst directions are the wheel axes: sin(tilt) = stall / m g d
    d = _device([{"at": [0, 0, 0.2], "axis": [1, 0, 0], "parts": [RING]},
                 {"at": [0, 0, 0.2], "axis": [0, 1, 0], "parts": [RING]}], "ball")
    tilt, phi = holdable_tilt(d)
    stall = stall_torque_n_m(d.wheels[0])
    assert math.sin(tilt) == pytest.approx(stall / d.gravity_torque_coeff_n_m, rel=1e-6)
    assert min(abs(phi), abs(phi - math.pi / 2), abs(phi - math.pi)) < 1e-9


def test_validate_prints_a_3d_devices_figures(capsys):
    from pathlib import Path
    demo = Path(__file__).resolve().parents[1] / "scenarios" / "cube_corner.yaml"
    assert main(["validate", str(demo)]) == 0
    out = capsys.readouterr().out
    assert "valid." in out and "wheel 3: axis" in out and "largest tilt the wheels can hold" in out


def test_validate_prints_a_3d_devices_supply_drive_and_lock(capsys):
    # The power chain's set-up and a locked body are told for a 3D device as for one wheel (the
    # pack's figures are the scenario's own; no outside reference applies to the wording).
    from pathlib import Path
    demo = Path(__file__).resolve().parents[1] / "scenarios" / "cube_torque.yaml"
    assert main(["validate", str(demo), "--set", "body.locked=true"]) == 0
    out = capsys.readouterr().out
    assert "supply: 3-cell lipo pack at 60% charge" in out
    assert "drive: current mode, current loop 1000 Hz" in out
    assert "body locked at its start attitude" in out
    assert main(["validate", str(demo.parent / "cube_corner.yaml")]) == 0
    out = capsys.readouterr().out
    assert "supply:" not in out and "drive:" not in out and "body locked" not in out   # the ideal source, free
