"""`drive.mode: current` on 3D devices: the current-input linear model, the multi-wheel LQR designed on
it, the per-wheel bridges' current loops on the shared bus, the runner's clamps and saturated ticks,
`gains`, `check` and the CLI on the demo.

References: sympy.physics.mechanics (Kane's method, `test_linear3d.kane_reference`) and the voltage
model with the back-EMF and the winding's resistance taken out for the linear model; python-control's
`lqr`/`dlqr` for the gains (references.md "LQR"); a first-order loop's step response
1 - exp(-t / tau), tau = 1 / (2 pi f_bw) (common practice, no source; any control text, e.g. Franklin,
Powell & Emami-Naeini, Feedback Control of Dynamic Systems, first-order systems, from memory); the
bus's ceiling on the winding's voltage, R i + k_e w <= V_bus (references.md "Motor").
Devices: `test_linear3d.corner_cube`, `test_check3d.ball_raw` and the demo `scenarios/cube_torque.yaml`
(all invented).
"""

from __future__ import annotations

import json
import math
from dataclasses import replace
from pathlib import Path

import control
import numpy as np
import pytest
from numpy.testing import assert_allclose

from conftest import write_scenario
from sim.cli import main
from sim.model.device3d import Device3D
from sim.model.scenario_yaml import load_scenario
from sim.model.linear3d import linearise
from sim.model.scenario import validate_scenario
from sim.run.metrics3d import trial_metrics3d
from sim.run.trial import run_trial
from sim.strategies.base import Reading
from sim.strategies.lqr import MultiWheelLqr
from sim.strategies.lqr_design import bryson_limits, design_lqr_spec
from test_check3d import ball_raw
from test_drive3d import demo_raw
from test_linear3d import corner_cube, kane_reference

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "scenarios" / "cube_torque.yaml"
CURRENT = {"mode": "current", "current_bandwidth": 500.0}


def current_ball(**sections) -> dict:
    """test_check3d's three-wheel ball device with current-mode drivers on its 12 V supply."""
    raw = ball_raw()
    raw["drive"] = {"supply": 12.0, **CURRENT}
    raw.update(sections)
    return raw


# ----------------------------------------------------------------------------- the linear model

def test_current_input_model_matches_kanes_method():
    spec = corner_cube(drive_mode="current")
    model = linearise(spec)
    assert model.input_names == ("wheel1_current", "wheel2_current", "wheel3_current")
    assert model.input_units == ("A", "A", "A")
    A_full, B_full = kane_reference(spec, current=True)
    keep = [0, 1, 6, 7, 8, 9, 10, 11]     # the heading and the wheel angles are neutral (test_linear3d)
    A_ref, B_ref = A_full[np.ix_(keep, keep)], B_full[keep]
    # sympy.physics.mechanics, Kane's method with torque k_t i: to 1e-6 of the largest entries
    assert_allclose(model.A, A_ref, rtol=1e-6, atol=1e-6 * np.abs(A_ref).max())
    assert_allclose(model.B, B_ref, rtol=1e-6, atol=1e-6 * np.abs(B_ref).max())


@pytest.mark.parametrize("mount", ["ball", "hinge"])
def test_current_input_model_is_the_voltage_model_without_back_emf(mount):
    # tau = k_t (V - k_e w) / R is k_t i for k_e = 0 and R = 1 ohm (V then reads as amps): the same
    # plant, derived by the voltage path; the back-EMF damping k_t k_e / R leaves the A matrix
    spec = corner_cube(drive_mode="current", mount=mount)
    volts = replace(spec, drive_mode="voltage",
                    wheels=tuple(replace(w, k_e_v_s_rad=0.0, resistance_ohm=1.0) for w in spec.wheels))
    cur, ref = linearise(spec), linearise(volts)
    assert cur.state_names == ref.state_names
    assert_allclose(cur.A, ref.A, rtol=1e-9, atol=1e-12)
    assert_allclose(cur.B, ref.B, rtol=1e-9, atol=1e-12)
    # and the voltage model does differ by the back-EMF (the test would see a slip)
    assert np.abs(linearise(replace(spec, drive_mode="voltage")).A - cur.A).max() > 1e-3


def test_current_mode_gains_match_python_control():
    spec = corner_cube(drive_mode="current")
    des = design_lqr_spec(spec)
    model = spec.linear_model()
    n, m = model.B.shape
    # Bryson: each wheel's input limit is its current limit (5 A here, below the 12 V / 1.5 ohm stall current)
    _, u_max = bryson_limits(spec, model)
    assert_allclose(u_max, [5.0, 5.0, 5.0], rtol=1e-12)
    assert_allclose(np.diag(des.R), 1.0 / 25.0, rtol=1e-12)
    # python-control lqr and, after a zero-order hold at the loop period, dlqr (references.md "LQR")
    K, _, _ = control.lqr(model.A, model.B, des.Q, des.R)
    assert_allclose(des.K_continuous, K, rtol=1e-6, atol=1e-6 * np.abs(K).max())
    sysd = control.c2d(control.ss(model.A, model.B, np.eye(n), np.zeros((n, m))), 1.0 / spec.control_rate_hz,
                       method="zoh")
    Kd, _, _ = control.dlqr(sysd.A, sysd.B, des.Q, des.R)
    assert_allclose(des.K_discrete, Kd, rtol=1e-6, atol=1e-6 * np.abs(Kd).max())
    assert des.input_names == model.input_names


def test_the_law_answers_in_amps_and_clamps_its_predictor_to_the_current_limit():
    sc = validate_scenario(current_ball(), where="<test>")
    dev = Device3D.from_scenario(sc)
    assert dev.drive_mode == "current"
    law = sc.strategy.build(dev, rng=np.random.default_rng(0))
    assert isinstance(law, MultiWheelLqr) and law.design.input_names[0] == "wheel1_current"
    reading = Reading()
    reading.angles_rad, reading.rates_rad_s, reading.wheel_speeds_rad_s = (0.3, -0.3), (2.0, -2.0, 0.0), (0.0,) * 3
    reading.supply_v = 3.0          # a sagging bus does not clamp amps
    amps = law.decide(reading)
    assert max(abs(a) for a in amps) > 6.0                       # the law asks beyond the 6 A limit ...
    assert_allclose(np.max(np.abs(law.held_commands()[-1])), 6.0, rtol=1e-12)   # ... the drive gives 6 A


# ----------------------------------------------------------------------------- the bridges in trials

def test_a_current_step_rises_with_the_loops_time_constant_on_every_wheel():
    # fixed_current on the 3D device, body free but the step short: each wheel's recorded current is
    # the step mean of 1 - exp(-t / tau), tau = 1 / (2 pi f_bw) (first-order loop; module docstring),
    # so it crosses 63.2% within one step of tau; the bus stays far above R i + k_e w
    f_bw, dt, amps = 200.0, 1e-4, 2.0
    raw = current_ball(world={"step": dt}, sensors={"rate": 1000.0}, strategy={"kind": "fixed_current", "amps": amps},
                       drive={"supply": 12.0, "mode": "current", "current_bandwidth": f_bw},
                       trial={"duration": 0.01, "start": {"tilt": [0.0, 0.0]}})
    res = run_trial(validate_scenario(raw, where="<test>"))
    tau = 1.0 / (2.0 * math.pi * f_bw)
    k = np.arange(res.trace.n)
    step_mean = amps * (1.0 - tau / dt * (np.exp(-k * dt / tau) - np.exp(-(k + 1) * dt / tau)))
    for i in range(1, 4):
        cur = res.trace.wheel(i, "current")
        assert_allclose(cur, step_mean, rtol=1e-9)
        first = int(np.argmax(cur >= (1.0 - math.exp(-1.0)) * amps))
        assert abs(first * dt - tau) <= dt
        # the recorded voltage is what the bridge applied: R i + k_e w (references.md "Motor")
        w = res.trace.wheel(i, "speed")
        dev = res.device.wheels[i - 1]
        assert np.all(res.trace.wheel(i, "voltage") < 12.0)
        assert_allclose(res.trace.wheel(i, "voltage")[5:], dev.resistance_ohm * cur[5:] + dev.k_e_v_s_rad * w[5:],
                        rtol=1e-2)   # w is the speed at the step's start, the bridge's the step's mean


def test_a_current_step_on_a_locked_body_spins_each_wheel_by_newtons_law():
    # The bench set-up: body clamped (body.locked), fixed_current on every wheel. Each wheel's
    # recorded current is the loop's first-order step mean as above, and with the body held its speed
    # is k_t times the current's integral over its spin inertia alone (Newton's second law for
    # rotation, any dynamics text; the engine holds each step's torque, so the sum is exact)
    f_bw, dt, amps = 200.0, 1e-4, 2.0
    raw = current_ball(world={"step": dt}, sensors={"rate": 1000.0}, strategy={"kind": "fixed_current", "amps": amps},
                       drive={"supply": 12.0, "mode": "current", "current_bandwidth": f_bw},
                       trial={"duration": 0.05, "start": {"tilt": [0.0, 0.0]}})
    raw["body"]["locked"] = True
    res = run_trial(validate_scenario(raw, where="<test>"))
    tau = 1.0 / (2.0 * math.pi * f_bw)
    k = np.arange(res.trace.n)
    step_mean = amps * (1.0 - tau / dt * (np.exp(-k * dt / tau) - np.exp(-(k + 1) * dt / tau)))
    assert np.ptp(res.trace.view("tilt")) == 0.0 and not np.any(res.trace.view("rate_x"))
    for i in range(1, 4):
        cur = res.trace.wheel(i, "current")
        assert_allclose(cur, step_mean, rtol=1e-9)
        dev = res.device.wheels[i - 1]
        spun = np.concatenate([[0.0], np.cumsum(dev.k_t_n_m_a * cur[:-1]) * dt / dev.spin_inertia_kg_m2])
        assert_allclose(res.trace.wheel(i, "speed"), spun, rtol=1e-9, atol=1e-12)


def test_each_wheel_is_clamped_to_its_own_current_limit():
    # wheel 2 has its own motor with a 3 A limit; 10 A asked of every wheel gives 6, 3 and 6 A once the
    # loops have settled (the runner's clamp per wheel, as PowerChain.command_limit on one wheel)
    raw = current_ball(strategy={"kind": "fixed_current", "amps": 10.0},
                       trial={"duration": 0.03, "start": {"tilt": [0.0, 0.0]}})
    raw["wheels"][1]["motor"] = {**raw["motor"], "current_limit": 3.0}
    res = run_trial(validate_scenario(raw, where="<test>"))
    last = [float(res.trace.wheel(i, "current")[res.trace.n - 1]) for i in range(1, 4)]
    assert_allclose(last, [6.0, 3.0, 6.0], rtol=1e-6)


def test_saturated_ticks_count_the_bus_running_out_not_the_current_limit():
    # at rest a 6 A command (the limit) needs 6 V of a 12 V bus: no saturation; with the wheels near
    # their no-load speed the loop runs out of bus voltage (R i + k_e w capped at V_bus): every tick
    slow = current_ball(strategy={"kind": "fixed_current", "amps": 6.0}, trial={"duration": 0.05, "start": {"tilt": [0.0, 0.0]}})
    res = run_trial(validate_scenario(slow, where="<test>"))
    assert res.saturated_ticks == 0 and np.max(res.trace.wheel(1, "current")) > 5.9
    fast = current_ball(strategy={"kind": "fixed_current", "amps": 6.0},
                        trial={"duration": 0.05, "start": {"tilt": [0.0, 0.0], "wheel_speed": [400.0, 400.0, 400.0]}})
    res = run_trial(validate_scenario(fast, where="<test>"))
    m = trial_metrics3d(res)
    assert res.saturated_ticks == res.control_ticks and m["voltage_saturated_fraction"] == 1.0
    assert_allclose(res.trace.wheel(1, "voltage")[:res.trace.n], 12.0, rtol=1e-12)
    assert np.max(res.trace.wheel(1, "current")) < 6.0 - 1.0        # back-EMF caps it: (12 - 10) / 1 = 2 A


def test_lqr_in_current_mode_balances_the_ball_device():
    res = run_trial(validate_scenario(current_ball(), where="<test>"))
    m = trial_metrics3d(res)
    assert m["outcome"] == "balanced" and m["final_tilt_rad"] < math.radians(0.5)
    assert m["peak_current_a"] <= 6.0 + 1e-9          # the runner's clamp: each wheel's current limit


@pytest.mark.parametrize("demo", ["tilted_axis.yaml", "floor_cube.yaml"])
def test_lqr_in_current_mode_balances_the_hinge_and_floor_demos(demo):
    # the hinge with a tilted wheel axis and the floor cube on its corner (our demos)
    from sim.model.scenario_yaml import load_scenario
    sc = load_scenario(ROOT / "scenarios" / demo, overrides=("drive.mode=current", "drive.current_bandwidth=1kHz",
                                                             "trial.duration=2", "trial.pushes=[]"))
    res = run_trial(sc)
    assert res.outcome == "balanced" and res.device.drive_mode == "current", res.message
    limits = [w.command_limit("current") for w in res.device.wheels]
    for i, lim in enumerate(limits, start=1):
        assert np.max(np.abs(res.trace.wheel(i, "current"))) <= lim * (1 + 1e-9)


# ----------------------------------------------------------------------------- CLI

def _demo_raw(**trial) -> dict:
    return demo_raw(DEMO, **trial)


def test_run_and_gains_on_the_demo(tmp_path, capsys):
    path = write_scenario(tmp_path / "torque.yaml", _demo_raw(duration="2.5 s"))
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 0
    m = json.loads((tmp_path / "out" / "metrics.json").read_text())
    assert m["outcome"] == "balanced" and m["pushes"][0]["survived"] and len(m["wheels"]) == 3
    header = (tmp_path / "out" / "trace.csv").read_text().splitlines()[0].split(",")
    assert "wheel1_current_a" in header and header[-3:] == ["supply_voltage_v", "bus_current_a", "mode"]
    capsys.readouterr()
    assert main(["gains", str(path)]) == 0
    g = json.loads(capsys.readouterr().out)
    assert g["drive_mode"] == "current" and g["discrete"]["rows"] == ["wheel1_current", "wheel2_current",
                                                                       "wheel3_current"]
    assert g["gain_units"][:2] == ["A/rad", "A/rad"] and g["gain_units"][-1] == "A s/rad"
    assert g["input"][0]["unit"] == "A" and g["input"][0]["limit_a"] == pytest.approx(8.0)
    assert main(["gains", str(path), "--format", "c"]) == 0
    header_c = capsys.readouterr().out
    assert "wb_balance_amps" in header_c and "WB_CURRENT_LIMIT_A" in header_c and "WB_SUPPLY_V" not in header_c


def test_check_in_current_mode_shows_the_power_criteria_and_brakes_with_amps(tmp_path, monkeypatch):
    from sim.studies import check3d
    from test_check3d import FOUR
    monkeypatch.setattr(check3d, "BALL_DIRECTIONS", FOUR)
    raw = current_ball(drive={"supply": None, "bus_capacitance": "1000 uF", **CURRENT},
                       battery={"cells": 4, "chemistry": "li-ion", "capacity": "2 A*h", "internal_resistance": 0.1})
    path = write_scenario(tmp_path / "ball.yaml", raw)
    code = main(["check", str(path), "--trials", "1", "--workers", "1", "--out", str(tmp_path / "out")])
    v = json.loads((tmp_path / "out" / "verdict.json").read_text())
    crit = {c["name"]: c for c in v["criteria"]}
    assert {"voltage_headroom", "current_headroom", "battery_run_time_s", "sag_wheel_speed_margin",
            "peak_bus_voltage_v", "driver_trips"} <= set(crit)
    # the braking trial commands each wheel's full reverse current (a current-mode drive's braking)
    assert crit["peak_bus_voltage_v"]["value"] > validate_scenario(raw, where="x").drive.supply
    assert crit["max_push_survived_n_m_s"]["value"] > 0.0
    assert code in (0, 1)


def test_tune_names_the_effort_as_a_weight_on_the_current():
    # In current mode the LQR's effort weighs amps (1/A^2), not volts: tune's explanation of the key
    # says so (our wording; no outside reference applies)
    from sim.studies.tune import default_space
    sc = load_scenario(DEMO)
    texts = {p.key: p.does for p in default_space(sc, Device3D.from_scenario(sc))}
    assert "weight on the current" in texts["strategy.effort"]
    voltage = load_scenario(DEMO, overrides=("drive.mode=voltage", "drive.current_bandwidth=null"))
    texts = {p.key: p.does for p in default_space(voltage, Device3D.from_scenario(voltage))}
    assert "weight on the voltage" in texts["strategy.effort"]
