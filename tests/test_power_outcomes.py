"""What the power chain adds to outcomes: causes, metrics, `check`'s power criteria and `sweep` over the
new keys. Devices and packs are invented for the tests."""

from __future__ import annotations

import copy
import json
import math

import pytest
from numpy.testing import assert_allclose

from conftest import make_scenario
from sim.cli import main
from sim.model.cells import open_circuit_volts_per_cell
from sim.model.scenario import validate_scenario
from sim.run.metrics import trial_metrics
from sim.run.trial import run_trial
from sim.studies.power_checks import braking_raw, run_time_s, soc_at_volts_per_cell
from test_verdicts import fast_raw, write_scenario

PACK = {"cells": 3, "chemistry": "lipo", "capacity": "450 mAh", "internal_resistance": 0.3, "state_of_charge": 0.6}
LQR_TILT = {"strategy": {"kind": "lqr"}, "trial": {"duration": 1.5, "start": {"angle": "5 deg"}}}


@pytest.mark.parametrize("case,sections,code", [
    # a nearly flat, high-resistance pack: the first correction sags it below 3 x 3.2 V
    ("cutoff", {"drive": {"supply": None}, "battery": PACK | {"internal_resistance": 1.0, "state_of_charge": 0.05}},
     "battery_cutoff"),
    ("trip", {"drive": {"supply": 12.0, "trip": {"current": 1.0, "time": "2 ms"}}}, "driver_tripped"),
    # the law brakes a fast wheel into 100 uF on a supply that cannot sink, past a 16 V limit
    ("over_voltage", {"drive": {"supply": 12.0, "bus_capacitance": "100 uF", "max_bus_voltage": "16 V"},
                      "trial": {"duration": 1.5, "start": {"angle": 0.0, "wheel_speed": 250.0}}}, "bus_over_voltage"),
])
def test_a_protection_that_switches_the_drive_off_is_the_falls_cause(case, sections, code):
    res = run_trial(make_scenario(**(LQR_TILT | sections)))
    m = trial_metrics(res)
    assert m["outcome"] == "fell" and m["cause"] == code, m["cause_detail"]
    event = m["power_events"][0]
    assert event["cause"] == code and event["at_s"] < m["fell_at_s"]
    assert f"{event['at_s']:.3f} s" in m["cause_detail"]
    assert m["driver_trips"] == (1 if code == "driver_tripped" else 0)
    after = int(round(event["at_s"] / res.trace.step_s)) + 1
    assert (res.trace.current[after:res.trace.n] == 0.0).all()       # the drive stays off
    if code == "bus_over_voltage":
        assert m["peak_supply_voltage_v"] > 16.0
    if code == "battery_cutoff":
        assert m["min_supply_voltage_v"] < 9.6


def test_metrics_and_trace_columns_only_with_the_power_chain(tmp_path):
    plain = trial_metrics(run_trial(make_scenario(**LQR_TILT)))
    assert "min_supply_voltage_v" not in plain and "charge_used_mah" not in plain
    sc = make_scenario(**(LQR_TILT | {"drive": {"supply": None}, "battery": PACK}))
    res = run_trial(sc)
    m = trial_metrics(res)
    cap_c = 0.45 * 3600.0
    # charge counting: mAh used is the state of charge drawn times the capacity (definition of capacity)
    assert_allclose(m["charge_used_mah"] * 3.6, (0.6 - m["battery_state_of_charge_end"]) * cap_c, rtol=1e-9)
    assert_allclose(m["charge_used_mah"] * 3.6, res.trace.bus_current[:res.trace.n].sum() * sc.world.step, rtol=1e-9)
    assert m["min_supply_voltage_v"] < sc.drive.supply <= m["peak_supply_voltage_v"] + 1.0
    assert m["driver_trips"] == 0 and m["pwm_dead_band_fraction"] is None
    # the bridge is lossless in the average model: V_bus I_bus = V_bus d i = v i step by step (power
    # balance of an ideal converter)
    assert_allclose(m["bus_energy_j"], m["energy_from_supply_j"], rtol=1e-9)
    from sim.run.trace import write_csv
    write_csv(res.trace, tmp_path / "t.csv")
    header = (tmp_path / "t.csv").read_text().splitlines()[0].split(",")
    assert header[-3:] == ["supply_voltage_v", "bus_current_a", "mode"]


def test_run_time_on_one_charge_and_the_cutoff_state_of_charge():
    # run time = usable charge / mean current (definition of capacity); the cut-off's state of charge is
    # the open-circuit table read backwards
    for v in (3.3, 3.6, 3.8, 4.1):
        assert_allclose(open_circuit_volts_per_cell("lipo", soc_at_volts_per_cell("lipo", v)), v, rtol=1e-12)
    sc = make_scenario(drive={"supply": None}, battery=PACK | {"cutoff": "3.6 V"})
    usable = (0.6 - soc_at_volts_per_cell("lipo", 3.6)) * 0.45 * 3600.0
    assert_allclose(run_time_s(sc, 0.25), usable / 0.25, rtol=1e-12)
    assert run_time_s(sc, -0.1) == math.inf
    assert run_time_s(make_scenario(), 0.25) is None


def test_braking_trial_regenerates_at_half_the_back_emf():
    # v (v - k_e w)/R, the power into the winding, is most negative at v = k_e w / 2 (calculus)
    raw = fast_raw(drive={"supply": None}, battery=PACK)
    sc = validate_scenario(raw, where="<test>")
    braking = validate_scenario(braking_raw(raw, sc), where="<test>")
    w0 = braking.trial.start.wheel_speed
    assert_allclose(w0, 0.8 * sc.drive.supply / sc.motor.k_e, rtol=1e-12)     # the margin's speed
    assert_allclose(braking.strategy.params.volts, 0.5 * sc.motor.k_e * w0, rtol=1e-12)
    m = trial_metrics(run_trial(braking))
    assert m["peak_supply_voltage_v"] > sc.drive.supply                       # pushed back into the pack
    assert m["charge_used_mah"] < 0


def test_each_power_criterion_passes_and_fails_on_its_side_of_the_limit():
    # the criteria's values from one set of runs, judged against lenient and strict limits
    from sim.studies.power_checks import braking_trial, power_criteria
    from sim.studies.verdicts import _criterion, hold_scenario
    raw = fast_raw(drive={"supply": None, "trip": {"current": "3.9 A", "time": "1 s"}}, battery=PACK)
    sc = validate_scenario(raw, where="<test>")
    metrics = {"nominal": trial_metrics(run_trial(sc)), "hold": trial_metrics(run_trial(hold_scenario(sc)))}
    braking = braking_trial(raw, sc, "<test>")[1]

    def judged(**changes):
        req = sc.requirements.model_copy(update={k: v for k, v in changes.items() if k != "drive"})
        s = sc.model_copy(update={"requirements": req, "drive": sc.drive.model_copy(update=changes.get("drive", {}))})
        return {c["name"]: c for c in power_criteria(s, metrics, braking, _criterion)}

    lenient = judged(run_time=1.0, wheel_speed_margin=0.01)
    strict = judged(run_time=1e9, wheel_speed_margin=0.999, drive={"max_bus_voltage": sc.drive.supply})
    for name in ("battery_run_time_s", "sag_wheel_speed_margin", "peak_bus_voltage_v"):
        assert lenient[name]["passed"] and not strict[name]["passed"], (lenient[name], strict[name])
        assert lenient[name]["value"] == strict[name]["value"]
    assert lenient["driver_trips"]["value"] == 0 and lenient["driver_trips"]["passed"]
    tripped = dict(braking, driver_trips=2)
    s = sc.model_copy(update={"requirements": sc.requirements.model_copy(update={"run_time": 1.0})})
    trips = {c["name"]: c for c in power_criteria(s, metrics, tripped, _criterion)}["driver_trips"]
    assert trips["value"] == 2 and not trips["passed"]


@pytest.mark.slow
def test_check_judges_the_power_criteria(tmp_path):
    raw = fast_raw(drive={"supply": None}, battery=PACK)
    raw["requirements"] = {"hold_time": "1 s"}
    path = write_scenario(tmp_path / "pack.yaml", raw)
    main(["check", path, "--out", str(tmp_path / "ck"), "--trials", "1", "--workers", "1"])
    v = json.loads((tmp_path / "ck" / "verdict.json").read_text())
    crit = {c["name"]: c for c in v["criteria"]}
    assert {"battery_run_time_s", "sag_wheel_speed_margin", "peak_bus_voltage_v", "driver_trips"} <= set(crit)
    assert crit["peak_bus_voltage_v"]["limit"] == pytest.approx(3 * 4.20)   # references.md safety: 4.20 V per cell
    assert crit["sag_wheel_speed_margin"]["value"] < v["runs"]["nominal"]["wheel_speed_margin"]
    plain = write_scenario(tmp_path / "plain.yaml", fast_raw())
    main(["check", plain, "--out", str(tmp_path / "plain"), "--trials", "1", "--workers", "1"])
    names = {c["name"] for c in json.loads((tmp_path / "plain" / "verdict.json").read_text())["criteria"]}
    assert not names & {"battery_run_time_s", "sag_wheel_speed_margin", "peak_bus_voltage_v", "driver_trips"}


@pytest.mark.slow
def test_sweep_varies_a_battery_key(tmp_path):
    import csv
    raw = fast_raw(drive={"supply": None}, battery=PACK)
    raw["trial"] = copy.deepcopy(raw["trial"]) | {"duration": "0.5 s"}
    path = write_scenario(tmp_path / "pack.yaml", raw)
    assert main(["sweep", path, "--vary", "battery.state_of_charge=0.3..0.9:3", "--out", str(tmp_path / "sw"),
                 "--workers", "1"]) == 0
    with open(tmp_path / "sw" / "results.csv") as fh:
        rows = list(csv.DictReader(fh))
    assert [float(r["battery.state_of_charge"]) for r in rows] == pytest.approx([0.3, 0.6, 0.9])
    # the pack's rest voltage rises with its charge (sim.model.cells), and so does the lowest bus
    lows = [float(r["min_supply_voltage_v"]) for r in rows]
    assert lows == sorted(lows) and all(r["driver_trips"] == "0" for r in rows)


def test_the_hobby_demos_do_what_their_comments_say():
    # scenarios/hobby_3s_pwm.yaml and its bench twin: the pack's sag eats the margin the bench leaves;
    # regeneration charges the bench's bus capacitance far above its supply, the pack takes it back
    from pathlib import Path

    from sim.model.scenario_yaml import load_scenario
    root = Path(__file__).resolve().parent.parent / "scenarios"
    got = {}
    for name in ("hobby_3s_pwm", "hobby_3s_bench"):
        sc = load_scenario(str(root / f"{name}.yaml"))
        m = trial_metrics(run_trial(sc))
        assert m["outcome"] == "balanced"
        got[name] = (m, 1.0 - m["peak_wheel_speed_rad_s"] / (m["min_supply_voltage_v"] / sc.motor.k_e))
    pack, bench = got["hobby_3s_pwm"], got["hobby_3s_bench"]
    assert pack[1] < 0.1 < 0.2 < bench[1]
    assert pack[0]["min_supply_voltage_v"] < 10.8 and pack[0]["peak_supply_voltage_v"] < 12.6
    assert bench[0]["peak_supply_voltage_v"] > 40.0
    assert pack[0]["pwm_dead_band_fraction"] > 0.0


def test_validate_states_the_supply_and_the_drive(tmp_path, capsys):
    path = write_scenario(tmp_path / "pack.yaml", fast_raw(drive={"supply": None, "reversal_delay": "2 ms"}, battery=PACK))
    assert main(["validate", path]) == 0
    out = capsys.readouterr().out
    # 0.6 charge of a LiPo: 3.90 V per cell at rest (sim.model.cells), 3 x 3.2 V cut-off (references.md)
    assert "3-cell lipo pack at 60% charge, 11.70 V at rest" in out and "cut-off 9.60 V" in out
    assert "drive: voltage mode; reversal 2 ms" in out
    plain = write_scenario(tmp_path / "plain.yaml", fast_raw())
    assert main(["validate", plain]) == 0
    assert "supply:" not in capsys.readouterr().out


def test_an_isolated_trial_brings_the_power_columns_and_summary_back():
    # a plug-in's trial runs in a forked child writing a shared trace (sim.core.isolation): the power
    # columns must be in that shared trace and the chain's summary in the result sent back
    import numpy as np
    sc = make_scenario(drive={"supply": None}, battery=PACK, body={"locked": True},
                       strategy={"kind": "fixed_voltage", "volts": 5.0})
    here, child = run_trial(sc, isolate=False), run_trial(sc, isolate=True)
    assert child.power == here.power and child.trace.n == here.trace.n
    for col in ("supply_voltage", "bus_current", "voltage", "current"):
        assert np.array_equal(child.trace.view(col), here.trace.view(col)), col


def test_gains_refuses_a_current_mode_law_in_one_line(tmp_path, capsys):
    raw = fast_raw(drive={"mode": "current", "current_bandwidth": "1 kHz"})
    path = write_scenario(tmp_path / "cur.yaml", raw)
    assert main(["gains", path]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "drive.mode" in err and "Traceback" not in err
