"""The supply as firmware reads it: `wb_input_t.bus_v` is the drive's bus at the tick (a sagging pack),
so firmware writing PWM duties can scale them to the volts it means.

Reference: the PWM bridge's average model, V_applied = d V_bus (Mohan, Undeland & Robbins, Power
Electronics, the switching-average model; references.md "PWM"). A duty scaled by nominal / bus then
gives the wanted volts within the duty's rounding (half a count, bus / pwm_max per count) plus d times the
bus's change between the tick that read it and the steps that apply it; a duty left at
wanted / nominal gives wanted * bus / nominal, short by the pack's sag.
"""

from __future__ import annotations

import numpy as np
import pytest
import yaml

from sim.model.scenario_yaml import load_scenario
from sim.run.trial import run_trial
from test_check3d import ball_raw

FIRMWARE = """
#include "wheelbench.h"
static int32_t pwm_max;
static float nominal;
void wb_init(const wb_config_t *cfg) { pwm_max = cfg->pwm_max; nominal = cfg->supply_v; }
static int32_t to_counts(float x) { return (int32_t)(x + (x >= 0.0f ? 0.5f : -0.5f)); }
void wb_step(const wb_input_t *in, wb_output_t *out) {
    float share = WANT_V / (COMPENSATE ? in->bus_v : nominal);
    int i;
    out->duty = to_counts(share * pwm_max);
    for (i = 0; i < WHEELS; i++)
        out->wheels_duty[i] = out->duty;
}
"""
WANT_V = 6.0
PACK = {"cells": 3, "chemistry": "lipo", "capacity": "450 mAh", "internal_resistance": "0.5 ohm", "state_of_charge": 0.6}
PWM = {"resolution_bits": 10, "frequency": "20 kHz"}     # no dead time, no dropped pulses: the average model exactly
ONE_WHEEL = {
    "name": "bench wheel on a tired pack",
    "body": {"locked": True, "parts": [{"name": "arm", "shape": "box", "length": "200 mm", "width": "20 mm",
                                        "thickness": "6 mm", "material": "aluminium", "at": "100 mm"}]},
    "wheel": {"at": "200 mm", "parts": [{"name": "disk", "shape": "disk", "radius": "50 mm", "thickness": "5 mm",
                                         "material": "aluminium"}]},
    "motor": {"speed_constant": "200 rpm/V", "resistance": "1.8 ohm", "inductance": "0.2 mH", "current_limit": "4 A",
              "rotor_inertia": "8e-6 kg*m^2", "mass": "55 g"},
    "drive": {"pwm": PWM}, "battery": PACK, "sensors": {"rate": "500 Hz"},
    "trial": {"duration": "0.4 s"},
}


def _three_wheels() -> dict:
    raw = ball_raw()
    raw["body"]["locked"] = True
    raw["trial"] = {"duration": 0.4, "start": {"tilt": [0.0, 0.0]}}
    raw["drive"] = {"pwm": PWM}
    raw["battery"] = dict(PACK, internal_resistance="0.1 ohm")   # three wheels' 18 A stall: 1.8 V of sag, above cut-off
    raw["world"] = {"step": 0.001}
    raw.pop("requirements", None)
    return raw


def _trial(tmp_path, raw: dict, *, compensate: bool, wheels: int):
    (tmp_path / "fw.c").write_text(FIRMWARE)
    raw = dict(raw, strategy={"kind": "firmware", "sources": ["fw.c"],
                              "defines": {"WANT_V": f"{WANT_V}f", "COMPENSATE": int(compensate), "WHEELS": wheels}})
    path = tmp_path / "scenario.yaml"
    path.write_text(yaml.safe_dump(raw, sort_keys=False))
    return run_trial(load_scenario(path))


@pytest.mark.parametrize("device", ["one wheel", "three wheels"])
def test_duty_scaled_by_the_bus_gives_the_wanted_volts_on_a_sagging_pack(tmp_path, device):
    raw, wheels = (ONE_WHEEL, 1) if device == "one wheel" else (_three_wheels(), 3)
    sagged = False
    for compensate in (True, False):
        res = _trial(tmp_path, raw, compensate=compensate, wheels=wheels)
        assert not res.power["power_events"], res.power["power_events"]     # no cut-off, no trip
        t = res.trace
        bus = t.view("supply_voltage") if device == "one wheel" else t.view("bus_volts")
        count = bus / 1023.0
        columns = [t.view("voltage")] if device == "one wheel" else [t.wheel(i, "voltage") for i in (1, 2, 3)]
        after = slice(10, None)       # past the first ticks, where the pack's sag outruns a one-tick-old reading
        cs = res.scenario.control_steps
        at_tick = bus[(np.arange(bus.size) // cs) * cs]        # the bus the tick's firmware read
        # half a count of rounding (of the tick's bus) plus the bus's drift since that tick, times d
        allowed = 0.5 * at_tick / 1023.0 + WANT_V * np.abs(bus - at_tick) / at_tick + 1e-6
        for applied in columns:
            error_counts = np.abs(applied[after] - WANT_V) / count[after]
            if compensate:
                assert np.all(np.abs(applied - WANT_V)[after] <= allowed[after]), error_counts.max()
                assert error_counts.max() <= 2.0, error_counts.max()
            else:
                # short by the sag: d V_bus with d = wanted / nominal
                nominal = bus[0]
                assert np.abs(applied[after] - WANT_V * bus[after] / nominal).max() <= count.max()
                assert error_counts.max() > 10.0
                sagged = True
    assert sagged
