"""A locked body on 3D devices (`body.locked` on a hinge or ball mount: `sim.physics.engine3d` builds the
body link as a fixed joint at its start attitude) and `check`'s braking trial run on it
(`sim.studies.power_checks.braking_raw3d`). Devices are invented for the tests unless a file is named."""

from __future__ import annotations

import copy
import json
import math
from pathlib import Path

import numpy as np
import pytest
import yaml
from numpy.testing import assert_allclose

from conftest import make_scenario3d
from sim.cli import main
from sim.core.frames import quat_to_matrix
from sim.model.device3d import Device3D
from sim.model.scenario import validate_scenario
from sim.physics.engine3d import Engine3D
from sim.run.trial import run_trial
from sim.run.trial3d import _held_attitude, _reset
from sim.studies.power_checks import braking_raw3d

ROOT = Path(__file__).resolve().parents[1]
CUBE_PACK = ROOT / "scenarios" / "cube_pack.yaml"
RING = {"shape": "ring", "outer_radius": 0.05, "inner_radius": 0.01, "thickness": 0.006, "mass": 0.12}
# three wheels on skew axes, none along a principal axis of the off-axis body: a free body would couple them
THREE = [{"at": [0.03, 0.0, 0.1], "axis": [1, 0.2, 0], "parts": [RING]},
         {"at": [0.0, 0.04, 0.07], "axis": [0, 1, 0.3], "parts": [RING]},
         {"at": [-0.02, 0.0, 0.12], "axis": [0.1, 0, 1], "parts": [RING]}]
OFF_AXIS = [{"shape": "box", "length": 0.12, "width": 0.08, "thickness": 0.05, "mass": 0.4,
             "at": [0.01, -0.02, 0.08], "rotation": [0.2, 0.1, -0.3]}]
MOTOR = {"speed_constant": "50 rad/s/V", "torque_constant": 0.02, "resistance": 1.0, "mass": 0.03}
TORQUES = (0.004, -0.003, 0.005)      # N m, one per wheel
DT, STEPS = 1e-3, 800


def _device(mount: str, locked: bool, start: dict) -> tuple[Device3D, object]:
    sc = make_scenario3d(THREE, body={"mount": mount, "parts": OFF_AXIS, "locked": locked}, motor=MOTOR,
                         world={"step": DT}, trial={"duration": STEPS * DT, "start": start})
    return Device3D.from_scenario(sc), sc


def _angle_between(q0, q1) -> float:
    """The rotation angle between two attitudes (quaternions x, y, z, w), rad."""
    r = np.array(quat_to_matrix(q0)).T @ np.array(quat_to_matrix(q1))
    return math.acos(max(-1.0, min(1.0, (np.trace(r) - 1.0) / 2.0)))


@pytest.mark.parametrize("mount, start", [("ball", {"tilt": [0.3, -0.2]}), ("hinge", {"angle": 0.4})])
def test_constant_torque_on_a_locked_body_spins_each_wheel_at_tau_t_over_i(mount, start):
    # Newton's second law for rotation about a fixed axis: I dw/dt = tau, so from rest w = tau t / I
    # (any dynamics text; e.g. Meriam & Kraige, Engineering Mechanics: Dynamics, rigid-body rotation,
    # from memory). The clamp takes every reaction: the body keeps its attitude and each wheel turns its
    # own spin inertia only. Tolerance: 1e-12 relative (the engine's semi-implicit Euler step is exact for
    # a constant acceleration; observed ~4e-14); attitude 1e-9 rad (the brief's bound; observed 0).
    outcomes = {}
    for locked in (True, False):
        dev, sc = _device(mount, locked, start)
        with Engine3D(dev, step_s=DT, attitude=_held_attitude(sc, dev) if locked else None) as engine:
            _reset(engine, sc, dev)
            read, advance = engine.io()
            q0 = engine.link_states()[0][1]
            for _ in range(STEPS):
                read()
                advance(None, TORQUES)
            q1, rate = engine.link_states()[0][1], engine.link_states()[0][3]
            outcomes[locked] = (np.array(engine.wheel_speeds()), _angle_between(q0, q1), rate, read())
        if locked:
            want = np.array([tau * STEPS * DT / w.spin_inertia_kg_m2 for tau, w in zip(TORQUES, dev.wheels)])
            assert_allclose(outcomes[True][0], want, rtol=1e-12)
            assert outcomes[True][1] < 1e-9 and max(map(abs, outcomes[True][2])) < 1e-9
            tilt_x, tilt_y = outcomes[True][3][:2]
            assert_allclose((tilt_x, tilt_y), (0.3, -0.2) if mount == "ball" else (0.4, 0.0), atol=1e-12)
            assert outcomes[True][3][4] == (0.0, 0.0, 0.0)
    # the check has teeth: free, the same body turns under the wheels' reaction and its wheels run
    # at other speeds relative to it
    assert outcomes[False][1] > 0.05
    assert np.max(np.abs(outcomes[False][0] / outcomes[True][0] - 1.0)) > 0.01


def test_a_locked_wheel_follows_the_motor_equation_through_the_runner():
    # The DC motor on a locked wheel, no inductance and no friction (references.md, "Motor"):
    # w(t) = (V / k_e) (1 - exp(-t / tau_m)), tau_m = I_s R / (k_t k_e), with I_s the wheel's spin inertia
    # alone: the motor's step-exact mean current (`sim.physics.motor`) must be told the inertia the wheel
    # really turns (`Device3D.inertia_seen_by_wheel_kg_m2`). Tolerance: 1e-9 of V/k_e (observed ~1e-13).
    volts = 3.0
    sc = make_scenario3d(THREE, body={"mount": "ball", "parts": OFF_AXIS, "locked": True}, motor=MOTOR,
                         world={"step": DT}, strategy={"kind": "fixed_voltage", "volts": volts},
                         trial={"duration": 0.3, "start": {"tilt": [0.1, 0.05]}})
    result = run_trial(sc)
    dev, trace = result.device, result.trace
    t = np.arange(trace.n) * DT
    for i, w in enumerate(dev.wheels):
        assert dev.inertia_seen_by_wheel_kg_m2(i) == w.spin_inertia_kg_m2
        tau_m = w.spin_inertia_kg_m2 * w.resistance_ohm / (w.k_t_n_m_a * w.k_e_v_s_rad)
        want = volts / w.k_e_v_s_rad * (1.0 - np.exp(-t / tau_m))
        assert_allclose(getattr(trace, f"w{i + 1}_speed")[: trace.n], want, rtol=0, atol=1e-9 * volts / w.k_e_v_s_rad)
    assert np.all(trace.tilt_x[: trace.n] == trace.tilt_x[0]) and np.all(trace.rate_x[: trace.n] == 0.0)
    assert_allclose((trace.tilt_x[0], trace.tilt_y[0]), (0.1, 0.05), atol=1e-12)
    # free, the body is in series with each wheel: its motor sees less than the spin inertia
    free = Device3D.from_scenario(sc.model_copy(update={"body": sc.body.model_copy(update={"locked": False})}))
    assert all(free.inertia_seen_by_wheel_kg_m2(i) < 0.99 * w.spin_inertia_kg_m2 for i, w in enumerate(free.wheels))


def _braking(raw: dict, *, locked: bool):
    """The braking trial of `raw` (with the body as asked) and its regenerated and balanced energies, J."""
    sc = validate_scenario(raw, where="<test>")
    braking = braking_raw3d(raw, sc)
    assert braking["body"]["locked"] is True      # as `check` runs it
    braking["body"]["locked"] = locked
    result = run_trial(validate_scenario(braking, where="<test>"))
    trace, dev, n = result.trace, result.device, result.trace.n
    # rows 0 .. n-2 are the steps that take the wheels from row 0's speeds to row n-1's
    into_bus = -float(np.sum(trace.bus_volts[: n - 1] * trace.bus_amps[: n - 1])) * DT_PACK
    spin = winding = 0.0
    for i, w in enumerate(dev.wheels, start=1):
        s, c = getattr(trace, f"w{i}_speed")[:n], getattr(trace, f"w{i}_current")[: n - 1]
        spin += 0.5 * w.spin_inertia_kg_m2 * (s[0] ** 2 - s[-1] ** 2)
        winding += w.resistance_ohm * float(np.sum(c * c)) * DT_PACK
    return result, into_bus, spin - winding


DT_PACK = 1e-3     # cube_pack.yaml's step (the world default); checked below


def _ideal_pack() -> dict:
    """scenarios/cube_pack.yaml with an ideal chain: no PWM, no trip, no inductance, no bearing friction,
    so the wheels' spin energy goes to the bus or the windings only."""
    raw = yaml.safe_load(CUBE_PACK.read_text())
    raw["drive"] = {k: v for k, v in raw["drive"].items() if k not in ("pwm", "trip")}
    raw["motor"]["inductance"] = 0.0
    for w in raw["wheels"]:
        w["bearing_friction"] = {"coulomb": 0.0, "viscous": 0.0}
    return raw


def test_braking_on_a_locked_body_returns_the_spin_energy_less_the_winding_losses():
    # Energy balance of the braking trial (common practice, no source): with the body locked, the energy the
    # bus takes, -int V_bus I_bus dt, is the wheels' spin energy given up, sum 1/2 I_s (w0^2 - w_T^2),
    # less the windings' heat sum int R i^2 dt (nothing else moves and nothing else dissipates here).
    # Tolerance: 1e-5 relative (the heat is summed from each step's mean current; observed ~8e-7).
    raw = _ideal_pack()
    assert validate_scenario(raw, where="<test>").world.step == DT_PACK
    locked, into_bus, balance = _braking(raw, locked=True)
    assert locked.outcome == "completed" and into_bus > 10.0
    assert_allclose(into_bus, balance, rtol=1e-5)
    assert float(np.max(np.abs(locked.trace.tilt[: locked.trace.n]))) == 0.0
    # free, the body takes up part of the wheels' momentum (and their relative speeds miss its share):
    # the same balance is off by percents
    free, into_bus_free, balance_free = _braking(raw, locked=False)
    assert abs(into_bus_free / balance_free - 1.0) > 0.01
    assert float(np.max(locked.trace.bus_volts[: locked.trace.n])) > float(np.max(free.trace.bus_volts[: free.trace.n]))


def test_the_braking_trial_locks_a_hinge_or_ball_body_and_leaves_a_floor_body_free():
    from test_check3d import ball_raw
    raw = ball_raw()
    out = braking_raw3d(raw, validate_scenario(raw, where="<test>"))
    assert out["body"]["locked"] is True and out["trial"]["start"]["tilt"] == [0.0, 0.0]
    assert "locked" not in raw["body"]      # the user's mapping is untouched
    floor = yaml.safe_load((ROOT / "scenarios" / "floor_cube.yaml").read_text())
    out = braking_raw3d(floor, validate_scenario(floor, where="<test>"))
    assert not out["body"].get("locked", False)


@pytest.mark.slow
def test_check_on_cube_pack_shows_the_locked_braking_trial(tmp_path, monkeypatch):
    # End to end from the CLI on the demo scenario: the braking trial runs on the locked body (its trace
    # holds the tilt at 0), its peak bus voltage is judged against 3 x 4.20 V (references.md, safety:
    # LiPo 4.20 V per cell) and the note says the body is locked.
    from sim.studies import check3d
    from test_check3d import FOUR
    monkeypatch.setattr(check3d, "BALL_DIRECTIONS", FOUR)
    out = tmp_path / "out"
    code = main(["check", str(CUBE_PACK), "--trials", "1", "--workers", "1", "--out", str(out)])
    assert code in (0, 1)
    crit = {c["name"]: c for c in json.loads((out / "verdict.json").read_text())["criteria"]}
    peak = crit["peak_bus_voltage_v"]
    assert "the body locked" in peak["note"] and "every wheel braked at once" in peak["note"]
    assert peak["limit"] == pytest.approx(3 * 4.20)
    # the same trial run here: the bus's peak is the check's figure, and above the pack's rest voltage
    raw = yaml.safe_load(CUBE_PACK.read_text())
    sc = validate_scenario(raw, where=str(CUBE_PACK))
    result = run_trial(validate_scenario(braking_raw3d(copy.deepcopy(raw), sc), where=str(CUBE_PACK)))
    assert peak["value"] == pytest.approx(float(np.max(result.trace.bus_volts[: result.trace.n])), rel=1e-12)
    assert peak["value"] > sc.drive.supply and float(np.max(np.abs(result.trace.tilt[: result.trace.n]))) == 0.0
    assert (out / "braking.png").stat().st_size > 100
    assert "the body locked" in (out / "report.md").read_text()
