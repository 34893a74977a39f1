"""The power chain on 3D devices: one supply shared by every wheel's bridge (`sim.physics.drive.SharedBus`,
`shared_chains`), in trials (`sim.run.trial3d`), metrics, causes, the multi-wheel LQR's reading of the
bus, `check` and the CLI.

Devices: conftest's planar test device (invented numbers) for the bus on its own, the demo
`scenarios/cube_pack.yaml` (our own invention) shortened, and the small ball device of test_check3d.
"""

from __future__ import annotations

import json
import math
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
import yaml
from numpy.testing import assert_allclose

from conftest import make_scenario, write_scenario
from sim.cli import main
from sim.model.cells import OCV_TABLES
from sim.model.device import Device
from sim.model.scenario import validate_scenario
from sim.physics.battery import Battery
from sim.physics.drive import PowerChain, shared_chains
from sim.run.metrics3d import trial_metrics3d
from sim.run.trial import run_trial

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "scenarios" / "cube_pack.yaml"
DT = 1e-3
PACK = {"cells": 3, "chemistry": "lipo", "capacity": "850 mA*h", "internal_resistance": 0.2, "state_of_charge": 0.6}


def demo_raw(path: Path = DEMO, **trial) -> dict:
    """A 3D demo's mapping (the pack cube's by default) with `trial` keys set, pushes past its end left out."""
    raw = yaml.safe_load(path.read_text())
    raw["trial"].update(trial)
    end = float(str(raw["trial"]["duration"]).split()[0])
    raw["trial"]["pushes"] = [p for p in raw["trial"].get("pushes", []) if float(str(p["at"]).split()[0]) < end]
    return raw


def demo(**trial):
    return validate_scenario(demo_raw(**trial), where=str(DEMO))


# ----------------------------------------------------------------------------- the bus alone

def _planar_pack():
    """conftest's device on a pack, winding without inductance or current limit, wheel locked."""
    sc = make_scenario(drive={"supply": None}, battery=PACK, body={"locked": True}, world={"step": DT},
                       sensors={"rate": 1000.0}, motor={"inductance": 0.0, "current_limit": None})
    return sc, Device.from_scenario(sc)


def test_a_pack_under_three_wheels_sags_as_under_one_wheel_drawing_their_sum():
    # Thevenin: the bus is OCV(SoC) - R_int I_bus whoever draws I_bus [references.md "Power and drive",
    # battery sag; the battery model's own reference]. Three identical wheels at the same duty draw what
    # one motor with R/3 (and 3 I_w, so its in-step speed-up matches) draws; the shared bus must give the
    # one-wheel chain's voltage step for step.
    sc, dev = _planar_pack()
    bus, chains = shared_chains(sc, [dev] * 3, step_s=DT, motors=[sc.motor] * 3)
    lone = PowerChain(sc, replace(dev, resistance_ohm=dev.resistance_ohm / 3, I_w_kg_m2=3 * dev.I_w_kg_m2),
                      step_s=DT)
    for k in range(400):
        volts = 6.0 if k < 200 else -3.0
        total = sum(c.update(volts, 0.0)[0] for c in chains)
        single, _ = lone.update(volts, 0.0)
        assert_allclose(total, single, rtol=1e-12)
        assert_allclose(bus.supply.volts, lone.supply.volts, rtol=1e-12)
    assert_allclose(bus.supply.soc, lone.supply.soc, rtol=1e-12)


def test_the_shared_bus_is_the_pack_fed_the_sum_of_the_wheels_bus_currents():
    # Kirchhoff's current law at the bus node: I_bus = sum of the bridges' d_i i_i (average H-bridge
    # model, references.md "Power and drive"); the pack then sags by R_int I_bus below its open-circuit
    # voltage, read from the chemistry's table (cells.py; common practice, no source)
    sc, dev = _planar_pack()
    bus, chains = shared_chains(sc, [dev, replace(dev, resistance_ohm=2 * dev.resistance_ohm), dev], step_s=DT,
                                motors=[sc.motor] * 3)
    ref = Battery(chemistry="lipo", cells=3, capacity_c=850 * 3.6, resistance_ohm=0.2, soc=0.6, capacitance_f=None)
    table = np.array(OCV_TABLES["lipo"])
    for k in range(300):
        v_start = bus.supply.volts
        commands = (5.0, -2.0 + 0.01 * k, 8.0 * math.sin(k / 30.0))
        speeds = (0.0, 30.0, -20.0)
        out = [c.update(v, w) for c, v, w in zip(chains, commands, speeds)]
        i_bus = sum(c.applied_v * i / v_start for c, (i, _) in zip(chains, out))
        assert_allclose(bus.bus_current_a, i_bus, rtol=1e-12, atol=1e-15)
        ref.draw(i_bus, DT)
        assert_allclose(bus.supply.volts, ref.volts, rtol=1e-12)
        ocv = 3 * np.interp(ref.soc, table[:, 0], table[:, 1])
        assert_allclose(bus.supply.volts, ocv - 0.2 * i_bus, rtol=1e-12)


# ----------------------------------------------------------------------------- trials

def test_the_bus_current_is_the_sum_of_the_wheels_and_its_power_their_winding_power():
    # energy balance: P_bus = V_bus I_bus = sum_i v_i i_i + losses, the average model's switches
    # lossless (losses 0; dead time and quantisation are in v_i) [references.md "Power and drive",
    # average H-bridge model; Mohan, Undeland & Robbins, Power Electronics; from memory]
    result = run_trial(demo(duration=2.5))      # the catch from the start tilt and the push at 2 s
    tr = result.trace
    n = tr.n
    wheel_power = sum(tr.wheel(i, "voltage") * tr.wheel(i, "current") for i in (1, 2, 3))
    assert_allclose(tr.bus_current[:n] * tr.supply_voltage[:n], wheel_power, rtol=1e-9, atol=1e-9)
    m = trial_metrics3d(result)
    assert_allclose(m["bus_energy_j"], m["energy_from_supply_j"], rtol=1e-9)
    # the charge counted is the bus current's integral (coulomb counting)
    assert_allclose(m["charge_used_mah"], float(np.sum(tr.bus_current[:n])) * DT / 3.6, rtol=1e-9)
    # the catch draws on all three wheels at once: more than any one wheel's share
    assert float(np.max(tr.bus_current[:n])) > 2.0 * max(w["peak_current_a"] for w in m["wheels"]) * 0.5


def test_the_demo_balances_while_its_pack_sags_and_names_every_key():
    result = run_trial(demo())
    m = trial_metrics3d(result)
    assert m["outcome"] == "balanced", m["cause_detail"]
    assert m["min_supply_voltage_v"] < m["supply_v"] - 1.0          # sags by more than a volt
    assert m["peak_supply_voltage_v"] > m["supply_v"]              # regeneration lifts it
    assert m["power_events"] == [] and m["driver_trips"] == 0
    for w, unit in zip(m["wheels"], result.device.wheels):
        # the margin at the sagged bus: 1 - peak |w| k_e / V_min (the one-wheel criterion's formula)
        assert_allclose(w["sag_speed_margin"], 1 - w["peak_speed_rad_s"] * unit.k_e_v_s_rad / m["min_supply_voltage_v"],
                        rtol=1e-12)
        assert w["sag_speed_margin"] < w["speed_margin"]
    assert "supply_voltage_v" in result.trace.columns() and "bus_current_a" in result.trace.columns()


def test_a_tired_pack_cuts_every_bridge_off_and_the_cause_names_the_wheel():
    raw = demo_raw(duration=1.0)
    raw["battery"]["internal_resistance"] = "0.12 ohm"
    result = run_trial(validate_scenario(raw, where="tired.yaml"))
    assert result.outcome == "fell" and result.cause == "battery_cutoff", result.cause_detail
    event = result.power["power_events"][0]
    assert event["cause"] == "battery_cutoff" and event["wheel"] is None
    assert "wheel " in result.cause_detail and "drew the most from the bus" in result.cause_detail
    k = int(round(event["at_s"] / DT))
    for i in (1, 2, 3):      # every bridge off from the cut-off on
        assert not np.any(result.trace.wheel(i, "current")[k:]), i
    assert result.power["min_supply_voltage_v"] < 3 * 3.2


def _ball(wheel_motors, **sections) -> dict:
    from test_check3d import ball_raw
    raw = ball_raw()
    for w, motor in zip(raw["wheels"], wheel_motors):
        if motor is not None:
            w["motor"] = {**raw["motor"], **motor}
    raw.update(sections)
    return raw


def test_a_trip_switches_off_only_its_own_wheel_and_is_named():
    # wheel 2's winding has a third of the others' resistance: at 6 V it alone passes the 8 A trip
    # (stall current V / R, references.md "Motor")
    raw = _ball([None, {"resistance": 0.33, "current_limit": 30.0}, None],
                drive={"supply": 12.0, "trip": {"current": 8.0, "time": 0.004}},
                strategy={"kind": "fixed_voltage", "volts": 6.0})
    raw["trial"] = {"duration": 0.2, "start": {"tilt": [0.0, 0.0]}}
    result = run_trial(validate_scenario(raw, where="trip.yaml"))
    events = result.power["power_events"]
    assert [(e["cause"], e["wheel"]) for e in events] == [("driver_tripped", 2)]
    assert result.power["wheels"][1]["driver_trips"] == 1 and result.power["wheels"][0]["driver_trips"] == 0
    k = int(round(events[0]["at_s"] / 0.002))
    assert not np.any(result.trace.wheel(2, "current")[k:])
    assert np.all(np.abs(result.trace.wheel(1, "current")[k:]) > 0.1)     # the others keep driving
    from sim.run.causes import _power_event
    from sim.run.causes3d import _wheel_words
    result.fell_at_s = 0.2
    code, text = _power_event(result, who=lambda e: _wheel_words(result, e))
    assert code == "driver_tripped" and "driver (wheel 2) tripped" in text


def test_an_ideal_bench_supply_through_the_chain_matches_the_ideal_path():
    # a bench supply with no capacitance and no other limit is the ideal source: the chain's duty
    # (v / V_bus) times V_bus gives back v to rounding, so the two paths agree to rounding
    raw = yaml.safe_load((ROOT / "scenarios" / "cube_corner.yaml").read_text())
    raw["trial"]["duration"] = 0.5
    raw["trial"]["pushes"] = []
    ideal = run_trial(validate_scenario(raw, where="ideal.yaml"))
    raw["drive"]["max_bus_voltage"] = "1000 V"
    chain = run_trial(validate_scenario(raw, where="chain.yaml"))
    assert ideal.power is None and not ideal.trace.has_power_columns and chain.trace.has_power_columns
    for name in ("tilt", "w1_speed", "w2_current", "w3_voltage"):
        assert_allclose(getattr(chain.trace, name)[: chain.trace.n], getattr(ideal.trace, name)[: ideal.trace.n],
                        rtol=1e-7, atol=1e-9)
    assert_allclose(chain.trace.supply_voltage[: chain.trace.n], 24.0)


def test_the_multi_wheel_lqr_clamps_its_predictor_to_the_bus_it_reads():
    # the delay predictor holds what the bridges will apply; a bridge gives at most the bus (duty 1)
    from sim.model.device3d import Device3D
    from sim.strategies.base import Reading
    sc = demo()
    dev = Device3D.from_scenario(sc)
    law = sc.strategy.cls(device=dev, params=sc.strategy.params, rng=np.random.default_rng(0))
    reading = Reading()
    reading.angles_rad, reading.rates_rad_s, reading.wheel_speeds_rad_s = (0.2, -0.2), (1.0, -1.0, 0.0), (0.0,) * 3
    reading.supply_v = math.inf
    law.decide(reading)
    assert np.max(np.abs(law.held_commands()[-1])) == pytest.approx(dev.supply_v)   # clamped at the supply
    reading.supply_v = 9.0
    law.decide(reading)
    assert np.max(np.abs(law.held_commands()[-1])) == pytest.approx(9.0)


# ----------------------------------------------------------------------------- CLI

def test_run_on_the_demo_writes_the_bus_columns(tmp_path):
    raw = demo_raw(duration=0.5, pushes=[])
    path = write_scenario(tmp_path / "pack.yaml", raw)
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 0
    header = (tmp_path / "out" / "trace.csv").read_text().splitlines()[0].split(",")
    assert header[-3:] == ["supply_voltage_v", "bus_current_a", "mode"]
    m = json.loads((tmp_path / "out" / "metrics.json").read_text())
    assert m["min_supply_voltage_v"] < m["supply_v"] and len(m["wheels"]) == 3 and "sag_speed_margin" in m["wheels"][0]


def test_check_on_a_3d_pack_shows_the_power_criteria(tmp_path, monkeypatch):
    from sim.studies import check3d
    from test_check3d import FOUR
    monkeypatch.setattr(check3d, "BALL_DIRECTIONS", FOUR)
    raw = _ball([None, None, None], drive={"supply": None, "bus_capacitance": "1000 uF"},
                battery={"cells": 4, "chemistry": "li-ion", "capacity": "2 A*h", "internal_resistance": 0.1})
    path = write_scenario(tmp_path / "ball.yaml", raw)
    code = main(["check", str(path), "--trials", "1", "--workers", "1", "--out", str(tmp_path / "out")])
    v = json.loads((tmp_path / "out" / "verdict.json").read_text())
    crit = {c["name"]: c for c in v["criteria"]}
    assert {"battery_run_time_s", "sag_wheel_speed_margin", "peak_bus_voltage_v", "driver_trips"} <= set(crit)
    assert "wheel" in crit["sag_wheel_speed_margin"]["note"]
    assert "every wheel braked at once" in crit["peak_bus_voltage_v"]["note"]
    # braking three wheels into the pack lifts the bus above its rest voltage (regeneration)
    assert crit["peak_bus_voltage_v"]["value"] > validate_scenario(raw, where="x").drive.supply
    assert code in (0, 1) and (tmp_path / "out" / "braking.png").stat().st_size > 100


@pytest.mark.parametrize("settings, key", [
    (("battery.cells=0",), "battery.cells"),
    (("drive.mode=current",), "drive.current_bandwidth"),     # current mode without its loop's bandwidth
    (("drive.trip.curent=3",), "drive.trip.curent"),
    # current mode with a law that commands volts only (tests/test_current3d.py: current mode on 3D)
    (("drive.mode=current", "drive.current_bandwidth=1kHz",
      "strategy={kind: fixed_voltage, volts: 1}"), "drive.mode: strategy 'fixed_voltage' commands volts only"),
])
def test_bad_power_keys_on_a_3d_device_are_one_line_and_exit_2(tmp_path, capsys, settings, key):
    out = tmp_path / "out"
    code = main(["run", str(DEMO), *[a for s in settings for a in ("--set", s)], "--out", str(out)])
    err = capsys.readouterr().err.strip()
    assert code == 2 and len(err.splitlines()) == 1 and key in err, err
    assert not out.exists()


def test_run_tells_a_cut_off_even_when_a_locked_body_holds(tmp_path, capsys):
    # A bench rig (body locked) on a tired pack: the pack cuts every bridge off in the spin-up, and
    # the locked body cannot fall, so the outcome alone would read as a hold; the terminal names the
    # event (the pack's figures are the demo's; the cut-off is its 3.2 V a cell, references.md "Cells")
    raw = demo_raw(duration=0.3, pushes=[])
    raw["battery"]["internal_resistance"] = "0.5 ohm"
    raw["body"]["locked"] = True
    raw["trial"]["start"] = {"tilt": [0.0, 0.0]}
    raw["strategy"] = {"kind": "fixed_voltage", "volts": 11.0}
    path = write_scenario(tmp_path / "bench.yaml", raw)
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 0
    out = capsys.readouterr().out
    m = json.loads((tmp_path / "out" / "metrics.json").read_text())
    assert m["power_events"] and m["power_events"][0]["cause"] == "battery_cutoff"
    assert "power events" in out and "battery cut-off at" in out and "every bridge off" in out
