"""Scenario loading: units to SI, defaults, overrides, and every kind of bad input named clearly.

Unit conversions are checked against the SI definitions (1 rev = 2 pi rad, 1 min = 60 s,
1 deg = pi/180 rad: the SI Brochure, BIPM 2019, table 8), not against pint itself.
Bad input must raise ScenarioError whose one-line message names the file and the dotted key.
"""

from __future__ import annotations

import math

import pytest
from numpy.testing import assert_allclose

from conftest import make_scenario, scenario_dict, write_scenario
from sim.errors import ScenarioError
from sim.scenario import load_scenario
from sim.units import parse_quantity


# ----------------------------------------------------------------------------- units

@pytest.mark.parametrize("text, kind, si", [
    ("300 rpm/V", "speed_constant", 300 * 2 * math.pi / 60),   # rpm: 2 pi rad per 60 s (SI Brochure)
    ("20 deg", "angle", 20 * math.pi / 180),                    # degree = pi/180 rad (SI Brochure, table 8)
    ("80 g", "mass", 0.08),
    ("220 mm", "length", 0.22),
    ("0.5 mN*m", "torque", 5e-4),
    ("5e-6 kg*m^2", "inertia", 5e-6),
    ("0.2 mH", "inductance", 2e-4),
    ("10%", "fraction", 0.1),
    ("3000 rpm", "angular_speed", 3000 * 2 * math.pi / 60),
    (2.5, "resistance", 2.5),                                   # bare numbers are SI (issue 2)
])
def test_quantities_convert_to_si(text, kind, si):
    assert_allclose(parse_quantity(text, kind), si, rtol=1e-12)


@pytest.mark.parametrize("value, kind", [("2 kg", "resistance"), ("12 V", "current"), ("nan V", "voltage"),
                                         (float("inf"), "length"), (True, "mass"), ("lots", "mass"),
                                         ([1, 2], "mass"), ("10%", "length")])
def test_quantities_reject_wrong_dimension_and_non_numbers(value, kind):
    with pytest.raises(ValueError, match="expected"):
        parse_quantity(value, kind)


def test_motor_constants_from_kv_and_defaults():
    # k_e = 60 / (2 pi Kv[rpm/V]) V s/rad and k_t = k_e in SI for an ideal motor
    # (references.md, "Motor", [mem, standard]).
    sc = make_scenario(motor={"speed_constant": "300 rpm/V", "torque_constant": None})
    assert_allclose(sc.motor.k_e, 60 / (2 * math.pi * 300), rtol=1e-12)
    assert sc.motor.k_t == sc.motor.k_e
    sc = make_scenario(motor={"speed_constant": None, "back_emf_constant": 0.02, "torque_constant": "25 mN*m/A"})
    assert_allclose([sc.motor.k_e, sc.motor.k_t], [0.02, 0.025], rtol=1e-12)


def test_defaults_are_ideal_and_si():
    # Issue 2: gravity 9.81 m/s^2, step 1 ms; omitted sensors are ideal; friction 0.
    raw = scenario_dict()
    del raw["world"]
    sc = load_scenario(data=raw)
    assert_allclose([sc.world.gravity, sc.world.step], [9.81, 1e-3], rtol=0)
    assert sc.sensors.delay == 0.0 and sc.sensors.angle.counts_per_rev is None and sc.sensors.rate_gyro is None
    assert sc.body.pivot_friction.coulomb == 0.0 and sc.wheel.bearing_friction.viscous == 0.0
    assert sc.n_steps == 500 and sc.control_steps == 2  # 0.5 s at 1 ms; 500 Hz default loop


def test_scenario_is_frozen():
    from pydantic import ValidationError

    sc = make_scenario()
    with pytest.raises(ValidationError, match="frozen"):
        sc.drive.supply = 24.0


# ----------------------------------------------------------------------------- overrides

def test_overrides_set_values_with_units_and_list_items(scenario_file):
    sc = load_scenario(scenario_file, overrides=("drive.supply=24V", "wheel.parts[0].mass=200 g",
                                                 "sensors.angle.counts_per_rev=1024"))
    assert_allclose([sc.drive.supply, sc.wheel.parts[0].mass], [24.0, 0.2], rtol=1e-12)
    assert sc.sensors.angle.counts_per_rev == 1024


def test_overrides_do_not_change_the_mapping_they_are_given():
    raw = scenario_dict()
    load_scenario(data=raw, overrides=("drive.supply=24",))
    assert raw["drive"]["supply"] == 12.0


# ----------------------------------------------------------------------------- bad input

def _mutated(change) -> dict:
    raw = scenario_dict()
    change(raw)
    return raw


BAD_MAPPINGS = {
    # name: (change to the test mapping, key path the message must name, a word it must contain)
    "unknown key": (lambda r: r["wheel"].update(bearing_fricton={"viscous": 1}),
                    "wheel.bearing_fricton", "did you mean 'bearing_friction'"),
    "unknown top key": (lambda r: r.update(sensor={}), "sensor", "did you mean 'sensors'"),
    "wrong unit": (lambda r: r["motor"].update(resistance="2 kg"), "motor.resistance", "ohm"),
    "negative size": (lambda r: r["body"]["parts"][0].update(length=-0.2), "body.parts[0].length", "greater than 0"),
    "zero size": (lambda r: r["wheel"]["parts"][0].update(radius="0 mm"), "wheel.parts[0].radius", "greater than 0"),
    "zero mass": (lambda r: r["body"]["parts"][1].update(mass=0), "body.parts[1].mass", "greater than 0"),
    "negative mass": (lambda r: r["motor"].update(mass="-5 g"), "motor.mass", "greater than or equal"),
    "NaN": (lambda r: r["drive"].update(supply=float("nan")), "drive.supply", "finite"),
    "NaN string": (lambda r: r["motor"].update(resistance="nan ohm"), "motor.resistance", "finite"),
    "absurd duration": (lambda r: r["trial"].update(duration="1e6 s"), "trial.duration", "steps"),
    "absurd step": (lambda r: r["world"].update(step="1 ns"), "trial.duration", "steps"),
    "missing section": (lambda r: r.pop("motor"), "motor", "missing"),
    "shape size": (lambda r: r["body"]["parts"][0].update(width=0.1), "body.parts[0].width", "takes no"),
    "unknown shape": (lambda r: r["body"]["parts"][0].update(shape="cone"), "body.parts[0].shape", "cone"),
    "unknown material": (lambda r: r["body"]["parts"][0].update(material="unobtainium"),
                         "body.parts[0].material", "unobtainium"),
    "unbalanced wheel": (lambda r: r["wheel"]["parts"][0].update(at=0.01), "wheel.parts[0].at", "count"),
    "two speed constants": (lambda r: r["motor"].update(back_emf_constant=0.02), "motor.speed_constant", "exactly one"),
    "unknown strategy": (lambda r: r.update(strategy={"kind": "hover"}), "strategy", "hover"),
    "ring inside out": (lambda r: r["wheel"]["parts"].__setitem__(0, {"shape": "ring", "outer_radius": 0.02,
                                                                       "inner_radius": 0.03, "mass": 0.1}),
                        "wheel.parts[0].inner_radius", "smaller"),
    "loop rate": (lambda r: r.update(sensors={"rate": "300 Hz"}), "sensors.rate", "whole number"),
    "push after end": (lambda r: r["trial"].update(pushes=[{"at": 2.0, "impulse": 0.01}]), "trial.pushes", "after"),
    "bool for number": (lambda r: r["drive"].update(supply=True), "drive.supply", "voltage"),
}


@pytest.mark.parametrize("name", list(BAD_MAPPINGS))
def test_bad_values_name_the_file_and_key(tmp_path, name):
    change, key, word = BAD_MAPPINGS[name]
    path = write_scenario(tmp_path / "bad.yaml", _mutated(change))
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    msg = str(info.value)
    assert "\n" not in msg
    assert msg.startswith(f"{path}: {key}")
    assert word in msg


BAD_TEXTS = {
    # name: (file text, a word the message must contain)
    "YAML syntax": ("name: x\nbody: [1, 2\n", "line 3"),
    "tab indentation": ("name: x\nbody:\n\tparts: []\n", "syntax"),
    "python object tag": ("name: !!python/object/apply:os.system ['echo hacked > {canary}']\n", "tags"),
    "python name tag": ("strategy: !!python/name:os.system\n", "tags"),
    "empty file": ("", "empty"),
    "comments only": ("# nothing here\n", "empty"),
    "a list at the top": ("- 1\n- 2\n", "mapping"),
    "alias bomb": ("a: &a [x, x, x, x, x, x, x, x, x, x]\n"
                   + "".join(f"b{i}: &b{i} [*{'a' if i == 0 else f'b{i - 1}'}, *{'a' if i == 0 else f'b{i - 1}'}]\n"
                             for i in range(120)), "aliases"),
}


@pytest.mark.parametrize("name", list(BAD_TEXTS))
def test_bad_files_name_the_file(tmp_path, name):
    text, word = BAD_TEXTS[name]
    canary = tmp_path / "canary"
    path = tmp_path / "bad.yaml"
    path.write_text(text.replace("{canary}", str(canary)))
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    msg = str(info.value)
    assert "\n" not in msg and msg.startswith(f"{path}:") and word in msg
    assert not canary.exists()  # nothing in the file was executed


def test_missing_file_names_the_file(tmp_path):
    path = tmp_path / "nope.yaml"
    with pytest.raises(ScenarioError, match="nope.yaml: cannot read"):
        load_scenario(path)


def test_a_folder_is_not_a_scenario(tmp_path):
    with pytest.raises(ScenarioError, match="not a file"):
        load_scenario(tmp_path)


@pytest.mark.parametrize("override, word", [
    ("drive.supply", "expected key.path=value"),
    ("drive..supply=3", "malformed key path"),
    ("=3", "empty key path"),
    ("[0]=3", "malformed key path"),
    ("wheel.parts[7].mass=1", "no such list item"),
    ("drive.suply=3", "did you mean 'supply'"),
    ("drive.supply=[1, ", "not readable"),
    ("drive.supply=-5 V", "greater than 0"),
])
def test_bad_overrides_name_the_file_and_the_override(scenario_file, override, word):
    with pytest.raises(ScenarioError) as info:
        load_scenario(scenario_file, overrides=(override,))
    msg = str(info.value)
    assert "\n" not in msg and msg.startswith(str(scenario_file)) and word in msg
