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
from sim.core.errors import ScenarioError
from sim.core.units import parse_quantity
from sim.model.scenario_yaml import load_scenario


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


@pytest.mark.parametrize("spelling", ["null", "~", "NULL"])
def test_set_null_means_none_as_in_a_file(spelling):
    # YAML 1.2 core schema: null, Null, NULL and ~ are null; `--set key=null` does what `key: null` does
    raw = scenario_dict(sensors={"rate": 500, "angle": {"counts_per_rev": 4096}})
    sc = load_scenario(data=raw, overrides=(f"sensors.angle.counts_per_rev={spelling}",))
    assert sc.sensors.angle.counts_per_rev is None


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


# ----------------------------------------------------------------------------- issue 13 part 3: units and numbers

@pytest.mark.parametrize("text, kind, si", [
    # A temperature difference: 1 degC of difference = 1 K, 1 degF = 5/9 K (SI Brochure, BIPM 2019,
    # section 2.3.1 on the degree Celsius; the Fahrenheit ratio is from memory).
    ("10 degC/W", "temperature_rise_per_watt", 10.0),
    ("10 degC / W", "temperature_rise_per_watt", 10.0),
    ("20 J/degC", "heat_capacity", 20.0),
    ("36 J/degF", "heat_capacity", 36.0 * 9.0 / 5.0),
    ("0.5 kJ/degC", "heat_capacity", 500.0),
    # A rotation speed in Hz is revolutions per second: 1 rev = 2 pi rad (SI Brochure, table 8 note;
    # the Hz-as-rev/s reading is common practice, no source).
    ("10 Hz", "angular_speed", 20 * math.pi),
    ("1.5 kHz", "angular_speed", 3000 * math.pi),
    ("10 Hz ", "angular_speed", 20 * math.pi),
    ("5 Hz/V", "speed_constant", 10 * math.pi),
    ("5 Hz / V", "speed_constant", 10 * math.pi),
    ("1 V/Hz", "back_emf", 1 / (2 * math.pi)),
    ("10 s^-1", "angular_speed", 10.0),        # no Hz: the radian is 1, as SI has it
    ("500 Hz", "frequency", 500.0),            # a loop rate stays 1/s
    ("25 degC", "temperature", 25.0),          # an absolute temperature stays one
])
def test_temperature_differences_and_hz_speeds_mean_what_they_say(text, kind, si):
    assert_allclose(parse_quantity(text, kind), si, rtol=1e-12)


def test_a_scenario_reads_degc_per_watt_and_a_wheel_speed_in_hz():
    sc = make_scenario(motor={"thermal": {"thermal_resistance": "10 degC/W", "thermal_capacity": "20 J/degC"}},
                       trial={"start": {"wheel_speed": "10 Hz"}})
    # thermal: 10 K/W and 20 J/K (differences); 10 rev/s = 20 pi rad/s (as above)
    assert_allclose([sc.motor.thermal.thermal_resistance, sc.motor.thermal.thermal_capacity], [10.0, 20.0], rtol=1e-12)
    assert_allclose(sc.trial.start.wheel_speed, 20 * math.pi, rtol=1e-12)


@pytest.mark.parametrize("text, expected", [
    # YAML 1.2.2, section 10.3.2 (core schema): 012 is decimal, 0o and 0x are octal and hex; the
    # YAML 1.1 forms (base 60, 0b, underscores, yes/on, dates) are plain strings.
    ("v: 012", 12), ("v: 0o14", 12), ("v: 0x0C", 12), ("v: -7", -7), ("v: 2e-6", 2e-6), ("v: .5", 0.5),
    ("v: 1:30", "1:30"), ("v: 0b1100", "0b1100"), ("v: 1_2", "1_2"), ("v: yes", "yes"), ("v: on", "on"),
    ("v: 2001-12-14", "2001-12-14"), ("v: true", True), ("v: False", False), ("v: ~", None), ("v: .inf", math.inf),
])
def test_scenario_numbers_are_read_as_yaml_1_2(text, expected):
    from sim.model.scenario_yaml import parse_yaml_text
    value = parse_yaml_text(text, where="<t>")["v"]
    assert value == expected and type(value) is type(expected)


def test_octal_looking_supply_is_twelve_volts_in_the_file_and_in_set(tmp_path):
    path = write_scenario(tmp_path / "s.yaml", scenario_dict())
    path.write_text(path.read_text().replace("supply: 12.0", "supply: 012"))
    assert load_scenario(path).drive.supply == 12.0                 # YAML 1.2.2 core schema, as above
    assert load_scenario(path, overrides=["drive.supply=010"]).drive.supply == 10.0


def test_demo_scenarios_load_to_the_same_values_as_before(tmp_path):
    """The YAML 1.2 reading and the new bounds move no value of a shipped scenario: each loads to
    exactly what PyYAML's YAML 1.1 reading (the loader before issue 13) gives, validated alike."""
    from pathlib import Path

    import yaml

    from sim.model.scenario import validate_scenario
    root = Path(__file__).parent.parent
    files = sorted((root / "scenarios").glob("*.yaml")) + sorted((root / "sim" / "data").glob("*.yaml"))
    assert files
    for path in files:
        old = validate_scenario(yaml.safe_load(path.read_text(encoding="utf-8")), where=str(path))
        new = load_scenario(path)
        assert new.model_dump(exclude={"strategy"}) == old.model_dump(exclude={"strategy"}), path
        assert (new.strategy.kind, new.strategy.params.model_dump()) == (old.strategy.kind, old.strategy.params.model_dump())


# ----------------------------------------------------------------------------- issue 13 part 4: bounds

def test_wheel_of_point_masses_on_its_axis_is_refused_but_copies_off_axis_load():
    with pytest.raises(ScenarioError, match=r"wheel\.parts: the wheel's spin inertia is 0"):
        make_scenario(wheel={"parts": [{"shape": "point", "mass": 0.1}]})
    # the same mass as 4 copies at 5 cm: I = m r^2 = 0.1 * 0.05^2 (point masses, any mechanics handbook)
    from sim.model.massprops import wheel_props
    sc = make_scenario(wheel={"parts": [{"shape": "point", "mass": 0.025, "at": 0.05, "count": 4}]})
    assert_allclose(wheel_props(sc.wheel.parts, rotor_inertia=0.0).inertia_com[0], 0.1 * 0.05**2, rtol=1e-12)


@pytest.mark.parametrize("sections, key", [
    ({"body": {"parts": [{"shape": "rod", "length": 1e300, "mass": 0.05, "at": 0.1}]}}, "body.parts[0].length"),
    ({"body": {"parts": [{"shape": "point", "mass": 1e300, "at": 0.1}]}}, "body.parts[0].mass"),
    ({"sensors": {"angle": {"noise": 1e308}}}, "sensors.angle.noise"),
    ({"sensors": {"angle": {"bias": "200 deg"}}}, "sensors.angle.bias"),
    ({"sensors": {"wheel": {"noise": 1e300}}}, "sensors.wheel.noise"),
    ({"motor": {"inductance": 1e300}}, "motor.inductance"),
    ({"wheel": {"inertia_correction": -1e300}}, "wheel.inertia_correction"),
    ({"trial": {"pushes": [{"at": 0.1, "impulse": 1e300}]}}, "trial.pushes[0].impulse"),
])
def test_absurd_finite_values_are_refused_at_load(sections, key):
    with pytest.raises(ScenarioError, match=r"^<test scenario>: " + key.replace(".", r"\.").replace("[", r"\[")):
        make_scenario(**sections)


def test_a_push_on_the_last_step_or_later_is_refused_and_one_before_loads():
    # 0.5 s at 1 ms is steps 0..499: a push rounds to step round(at / step) (sim/run/trial.py)
    with pytest.raises(ScenarioError, match=r"trial\.pushes\[0\]\.at: a push at 0\.5 s"):
        make_scenario(trial={"pushes": [{"at": 0.5, "impulse": 0.01}]})
    assert make_scenario(trial={"pushes": [{"at": 0.499, "impulse": 0.01}]}).trial.pushes[0].at == 0.499


def test_tolerance_bands_that_stay_valid_load():
    sc = make_scenario(tolerances={"motor.resistance": "10%", "drive.supply": "1 V", "sensors.angle.bias": "1 deg"})
    assert set(sc.tolerances) == {"motor.resistance", "drive.supply", "sensors.angle.bias"}


# ----------------------------------------------------------------------------- issue 14 items 6, 9, 10

def test_set_kind_drops_the_old_kinds_parameters_with_a_note(scenario_file, capsys):
    path = write_scenario(scenario_file, scenario_dict(strategy={"kind": "pid", "kp": 30.0, "kd": 1.0}))
    sc = load_scenario(path, overrides=["strategy.kind=lqr"])
    assert sc.strategy.kind == "lqr"
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "strategy.kind=lqr" in err and "kp, kd" in err
    # the same kind again keeps its parameters, silently; a later --set gives the new kind's
    sc = load_scenario(path, overrides=["strategy.kind=pid", "strategy.kp=20"])
    assert (sc.strategy.kind, sc.strategy.params.kp, sc.strategy.params.kd) == ("pid", 20.0, 1.0)
    assert capsys.readouterr().err == ""
    assert load_scenario(path, overrides=["strategy={kind: lqr}"]).strategy.kind == "lqr"


def test_rate_that_does_not_fit_the_step_suggests_steps_and_rates():
    from sim.model.scenario import step_suggestion
    # 400 Hz is a 2.5 ms period: 2.5/4 = 0.625 ms is the largest round divisor below 1 ms; at 1 ms
    # the periods 2 ms and 3 ms (500 Hz, 333.3 Hz) fit (plain arithmetic).
    assert step_suggestion(400.0, 1e-3) == "a world.step of 0.625 ms divides it, or use a rate of 333.333 Hz or 500 Hz"
    with pytest.raises(ScenarioError, match="0.625 ms divides it"):
        make_scenario(sensors={"rate": 400})


def test_every_problem_in_one_line_unknown_key_first(tmp_path):
    mapping = scenario_dict()
    mapping["motr"] = mapping.pop("motor")
    mapping["drive"]["supply"] = -1
    path = write_scenario(tmp_path / "s.yaml", mapping)
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    msg = str(info.value)
    assert "\n" not in msg
    assert msg.startswith(f"{path}: motr: unknown key (did you mean 'motor'?); ")
    assert "; motor: required key is missing" in msg and "; drive.supply: must be greater than 0" in msg


def test_union_keys_are_named_by_the_field_not_by_a_type_branch():
    # issue 13 part 9: an inline material was reported as `material.str`
    with pytest.raises(ScenarioError, match=r"body\.parts\[0\]\.material: expected a string or a mapping, found 5$"):
        make_scenario(body={"parts": [{"shape": "rod", "length": 0.2, "radius": 0.005, "material": 5}]})
    with pytest.raises(ScenarioError, match=r"tolerances\.Drive: expected a number or a string, found \[1\]$"):
        make_scenario(tolerances={"Drive": [1]})


def test_largest_sensor_noise_allowed_ends_as_an_outcome():
    """At the bound (angle noise pi rad, rate noise 1e5 rad/s) a trial still ends with an outcome."""
    from sim.run.trial import run_trial
    sc = make_scenario(strategy={"kind": "lqr"}, trial={"duration": 0.2},
                       sensors={"angle": {"noise": math.pi}, "rate_gyro": {"noise": 1e5}, "wheel": {"noise": 1e5}})
    assert run_trial(sc).outcome in {"balanced", "fell", "diverged", "not_caught"}


def test_validate_refuses_requirements_whose_check_trials_break_the_step_limit(tmp_path, capsys):
    # check runs a swing-up of swing_up_time + settle_time + 1 s and holds of hold_time: each obeys
    # the step limit a loaded trial does (sim.scenario.MAX_STEPS), so validate refuses them at load
    from sim.cli import main
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(requirements={"swing_up_time": "1e9 s"}))
    assert main(["validate", str(path)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "requirements.swing_up_time" in err[0] and "limit" in err[0]
