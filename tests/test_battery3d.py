"""The 3D judge of sweep and tune (sim/studies/battery3d.py) judges burst, runaway and headroom as `check`
does, through the same functions (sim/studies/criteria3d.py); what is left is named in `not_judged`."""

from __future__ import annotations

import copy
from pathlib import Path

import numpy as np
import pytest
import yaml
from numpy.testing import assert_allclose

from sim.model.device3d import Device3D
from sim.model.scenario import validate_scenario
from sim.run.trial import run_trial
from sim.studies import battery3d, criteria3d
from sim.studies.verdicts import with_trial

TILTED = Path(__file__).resolve().parents[1] / "scenarios" / "tilted_axis.yaml"


@pytest.fixture(scope="module")
def quick():
    raw = yaml.safe_load(TILTED.read_text())
    raw["trial"] |= {"duration": "2 s", "pushes": [{"at": "1 s", "impulse": "8 mN*m*s"}]}
    raw["requirements"] = {"hold_time": "4 s"}        # short bias holds: a quick test
    return raw


def test_the_battery_judges_burst_runaway_and_headroom_as_check_does(quick):
    outcome = battery3d.run_battery3d(quick, "quick.yaml")
    v = outcome.verdict
    names = [c["name"] for c in v["criteria"]]
    # check's criteria in check's order (sim/studies/verdicts3d.py), less its step halving
    assert names == ["hold_max_tilt_rad", "settle_time_s", "max_push_survived_n_m_s", "wheel_speed_margin",
                     "wheel_runaway_time_s", "voltage_headroom", "current_headroom", "winding_temperature_c",
                     "wheel_burst_safety_factor"]
    assert v["not_judged"] == ["step_halving_change"]
    crit = {c["name"]: c for c in v["criteria"]}
    sc = validate_scenario(copy.deepcopy(quick), where="quick.yaml")
    dev = Device3D.from_scenario(sc)
    # the same function on the same trials gives check's figure exactly (deterministic seeds)
    again = criteria3d.runaway_criterion3d(sc, criteria3d.runaway_holds3d(sc, dev, seed=sc.trial.seed))
    assert crit["wheel_runaway_time_s"] == again
    assert "the law predicts a steady wheel offset" in crit["wheel_runaway_time_s"]["note"]
    assert crit["wheel_burst_safety_factor"] == criteria3d.burst_criterion(sc, criteria3d.wheel_bursts(sc, dev))
    assert crit["wheel_burst_safety_factor"]["value"] > sc.requirements.burst_safety_factor
    # headroom, recomputed here from the battery's hold: 1 - p99(|V|)/supply and 1 - p99(|i|)/I_max
    # (the drive's reserve over 99% of the samples; common practice, no source)
    hold = run_trial(with_trial(sc, duration=battery3d.HOLD_S, start=battery3d.upright_start(sc), pushes=[]),
                     seed=sc.trial.seed, stop_early=True)
    w = dev.wheels[0]
    volts, amps = hold.trace.wheel(1, "voltage"), hold.trace.wheel(1, "current")
    assert_allclose(crit["voltage_headroom"]["value"], 1 - np.percentile(np.abs(volts), 99) / w.supply_v, rtol=1e-12)
    assert_allclose(crit["current_headroom"]["value"], 1 - np.percentile(np.abs(amps), 99) / w.current_limit_a,
                    rtol=1e-12)
    assert v["passed"] == all(c["passed"] for c in v["criteria"])


def test_a_sweep_point_fills_the_burst_and_runaway_columns_and_fails_a_weak_wheel(quick):
    sc = validate_scenario(copy.deepcopy(quick), where="quick.yaml")
    row = battery3d.sweep_row3d(sc, quick, "quick.yaml", seed=1, trials=0)
    dev = Device3D.from_scenario(sc)
    assert row["wheel_burst_safety_factor"] == criteria3d.burst_criterion(sc, criteria3d.wheel_bursts(sc, dev))["value"]
    assert row["wheel_runaway_time_s"] is None or row["wheel_runaway_time_s"] > 0    # None: no drift (settles)
    assert "burst" not in row["fail_reasons"]
    # the same wheel asked for a safety factor of 100 fails the burst criterion by name, as a planar point does
    strict = copy.deepcopy(quick)
    strict["requirements"]["burst_safety_factor"] = 100
    sc = validate_scenario(strict, where="strict.yaml")
    row = battery3d.sweep_row3d(sc, strict, "strict.yaml", seed=1, trials=0)
    assert not row["passed"] and "burst safety factor" in row["fail_reasons"].split(";")
