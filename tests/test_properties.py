"""Property-based tests (hypothesis) of the scenario loader and the --set / --vary parsers.

The property: any input either loads to a valid scenario or raises our ScenarioError /
InputError; never another exception (house style, "Check input once, at load"). Example counts
are kept modest for CI time; hypothesis shrinks any failure to a small reproducer.
"""

from __future__ import annotations

import copy
import math

import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from conftest import scenario_dict
from sim.core.errors import InputError, ScenarioError
from sim.core.units import KINDS, parse_quantity
from sim.model.overrides import apply_overrides, parse_assignment
from sim.model.scenario import Scenario, validate_scenario
from sim.model.scenario_yaml import parse_yaml_text

SETTINGS = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])

UNIT_WORDS = ["V", "mV", "kg", "g", "mm", "m", "s", "ms", "Hz", "rpm", "rpm/V", "deg", "rad", "rad/s",
              "N*m", "mN*m", "ohm", "A", "mH", "kg*m^2", "%", "m/s^2", "furlong", "", "**", "^", "/"]
KEYS = ["name", "world", "step", "gravity", "body", "parts", "shape", "mass", "at", "wheel", "motor",
        "speed_constant", "resistance", "drive", "supply", "sensors", "rate", "delay", "strategy", "kind",
        "plugin", "trial", "duration", "pushes", "seed", "count", "material", "x", "", "1"]

numbers = st.one_of(st.integers(-10**20, 10**20), st.floats(allow_nan=True, allow_infinity=True))
unit_strings = st.builds(lambda n, u: f"{n} {u}".strip(), numbers, st.sampled_from(UNIT_WORDS))
scalars = st.one_of(st.none(), st.booleans(), numbers, unit_strings, st.text(max_size=12))
values = st.recursive(
    scalars,
    lambda inner: st.one_of(st.lists(inner, max_size=4),
                            st.dictionaries(st.sampled_from(KEYS), inner, max_size=4)),
    max_leaves=12,
)


def _paths(node, prefix=()):
    """Every key path inside a raw scenario mapping (dict keys and list indices)."""
    yield prefix
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, prefix + (i,))


BASE = scenario_dict(strategy={"kind": "lqr"})
BASE_PATHS = [p for p in _paths(BASE) if p]


def _loads_or_scenario_error(raw) -> None:
    try:
        sc = validate_scenario(raw, where="<property>")
    except ScenarioError as exc:
        assert str(exc).startswith("<property>: ") and "\n" not in str(exc)
        return
    assert isinstance(sc, Scenario)
    assert math.isfinite(sc.world.step) and sc.world.step > 0 and sc.n_steps >= 1


@SETTINGS
@given(path=st.sampled_from(BASE_PATHS), value=values)
def test_any_value_anywhere_loads_or_is_a_scenario_error(path, value):
    raw = copy.deepcopy(BASE)
    node = raw
    for key in path[:-1]:
        node = node[key]
    node[path[-1]] = value
    _loads_or_scenario_error(raw)


@SETTINGS
@given(section=st.sampled_from(sorted(BASE)), key=st.sampled_from(KEYS), value=values)
def test_any_key_added_loads_or_is_a_scenario_error(section, key, value):
    raw = copy.deepcopy(BASE)
    if isinstance(raw[section], dict):
        raw[section][key] = value
    else:
        raw[key] = value
    _loads_or_scenario_error(raw)


@SETTINGS
@given(raw=st.dictionaries(st.sampled_from(KEYS), values, max_size=6))
def test_any_mapping_loads_or_is_a_scenario_error(raw):
    _loads_or_scenario_error(raw)


YAML_BITS = ["a: 1\n", "- x\n", "&a [1]\n", "*a\n", "!!python/object:os.system\n", "{", "}", "[", "]", ": ",
             "\t", "'", '"', "? ", "---\n", "...\n", "<<: *a\n", "!tag ", "%YAML 1.1\n", "\x00", "\ufeff", "#"]


@SETTINGS
@given(text=st.one_of(st.text(max_size=80), st.lists(st.sampled_from(YAML_BITS), max_size=12).map("".join)))
def test_any_text_parses_or_is_a_scenario_error(text):
    try:
        parsed = parse_yaml_text(text, where="<text>")
    except ScenarioError:
        return
    if isinstance(parsed, dict):
        _loads_or_scenario_error(parsed)


@SETTINGS
@given(value=st.one_of(scalars, unit_strings, st.text(alphabet="0123456789.eE+-*/^() VmskgHzrpd%", max_size=24)),
       kind=st.sampled_from(sorted(KINDS)))
def test_parse_quantity_returns_a_finite_float_or_value_error(value, kind):
    try:
        q = parse_quantity(value, kind)
    except ValueError:
        return
    assert isinstance(q, float) and math.isfinite(q)


set_texts = st.one_of(
    st.text(max_size=40),
    st.builds(lambda p, v: f"{p}={v}",
              st.lists(st.one_of(st.sampled_from(KEYS), st.integers(0, 3).map(lambda i: f"[{i}]")),
                       min_size=1, max_size=4).map(lambda parts: ".".join(parts).replace(".[", "[")),
              st.one_of(unit_strings, st.text(max_size=12), st.sampled_from(["[1, 2", "{a: 1}", "&a [*a]", "!!x 1"]))),
)


@SETTINGS
@given(text=set_texts)
def test_set_parses_applies_and_loads_or_is_a_scenario_error(text):
    try:
        parse_assignment(text)
        raw = apply_overrides(BASE, [text], where="<property>")
    except ScenarioError as exc:
        assert "\n" not in str(exc)
        return
    _loads_or_scenario_error(raw)


@SETTINGS
@given(text=st.one_of(
    st.text(max_size=40),
    st.builds(lambda k, lo, hi, n: f"{k}={lo}..{hi}:{n}", st.sampled_from(["drive.supply", "a..b", "x[0]", ""]),
              unit_strings, unit_strings, st.one_of(st.integers(-5, 300), st.just(100_001))),
    st.builds(lambda k, items: f"{k}=" + ",".join(items), st.sampled_from(["drive.supply", "trial.seed"]),
              st.lists(st.one_of(unit_strings, st.text(max_size=6)), max_size=4)),
))
def test_vary_parses_or_is_an_input_error(text):
    sweep = pytest.importorskip("sim.studies.sweep")
    try:
        vary = sweep.parse_vary(text)
    except InputError as exc:  # ScenarioError is an InputError
        assert "\n" not in str(exc)
        return
    assert 1 <= len(vary.values) <= 100_000
    assume(len(vary.values) <= 3)
    for value in vary.values:  # each point goes through the loader like a --set
        raw = copy.deepcopy(BASE)
        node = raw
        try:
            for key in vary.path[:-1]:
                node = node.setdefault(key, {}) if isinstance(key, str) else node[key]
            node[vary.path[-1]] = value
        except (TypeError, IndexError, KeyError):
            continue  # the path does not fit this scenario: the sweep reports that per point
        _loads_or_scenario_error(raw)


@SETTINGS
@given(unit=st.sampled_from(sorted(__import__("sim.core.units", fromlist=["SIMPLE_UNITS"]).SIMPLE_UNITS)),
       number=st.floats(min_value=-1e12, max_value=1e12, allow_nan=False).filter(lambda x: abs(x) > 1e-12))
def test_fast_unit_path_agrees_with_pint(unit, number):
    """Common units are converted without pint (start-up); pint itself is the reference.

    Agreement to 1e-15 relative: for composite units pint rounds its own factor (g/cm^3 gives
    999.9999999999999 kg/m^3 per g/cm^3), so the last bit may differ.
    """
    from numpy.testing import assert_allclose

    from sim.core.units import SIMPLE_UNITS, registry

    si = SIMPLE_UNITS[unit][0]
    text = f"{number!r} {unit}"
    expected = float(registry().Quantity(text).to(si).magnitude)
    kind = next(k for k, (u, _) in KINDS.items() if u == si)
    assert_allclose(parse_quantity(text, kind), expected, rtol=1e-15, atol=0)


# ----------------------------------------------------------------------------- issue 13 parts 3 and 4

# The YAML 1.2.2 core schema (yaml.org/spec/1.2.2, section 10.3.2): the reference reading of a
# plain scalar. Anything that is not one of these is a string.
_YAML12_INT10 = r"[-+]?[0-9]+"
_YAML12_FLOAT = r"[-+]?(\.[0-9]+|[0-9]+(\.[0-9]*)?)([eE][-+]?[0-9]+)?"


def _yaml12_reference(text: str):
    import re
    if re.fullmatch(_YAML12_INT10, text):
        return int(text, 10)
    if re.fullmatch(r"0o[0-7]+", text):
        return int(text[2:], 8)
    if re.fullmatch(r"0x[0-9a-fA-F]+", text):
        return int(text[2:], 16)
    if re.fullmatch(_YAML12_FLOAT, text):
        return float(text)
    return None  # a string: the supply's unit parser must refuse it or read it as a quantity


number_like = st.text(alphabet="0123456789_:.+-eEbxo", min_size=1, max_size=12)


@SETTINGS
@given(text=number_like)
def test_supply_numbers_are_read_as_yaml_1_2_or_refused(text):
    """A number-like supply in a file loads to its YAML 1.2 value, or is refused with the key
    named; never YAML 1.1's octal, base-60 or underscore reading (issue 13, part 3)."""
    base = yaml_text_of(BASE)
    try:
        raw = parse_yaml_text(base.replace("supply: 12.0", f"supply: {text}"), where="<property>")
    except ScenarioError:
        return
    expected = _yaml12_reference(text)
    try:
        sc = validate_scenario(raw, where="<property>")
    except ScenarioError as exc:
        assert "\n" not in str(exc)
        if expected is not None and 0 < expected <= 1000:
            raise AssertionError(f"{text!r} is {expected} V in YAML 1.2, yet refused: {exc}")
        return
    assert expected is not None, f"{text!r} is a string in YAML 1.2, yet loaded as {sc.drive.supply} V"
    assert sc.drive.supply == float(expected)


def yaml_text_of(mapping: dict) -> str:
    import yaml
    return yaml.safe_dump(mapping, sort_keys=False)


@SETTINGS
@given(digits=st.integers(1, 6000))
def test_integers_of_any_length_load_or_give_one_line(digits):
    text = "9" * digits
    for raw in (parse_yaml_text(yaml_text_of(BASE).replace("supply: 12.0", f"supply: {text}"), where="<property>"),
                apply_overrides(BASE, [f"drive.supply={text}"], where="<property>"),
                apply_overrides(BASE, [f"trial.seed={text}"], where="<property>")):
        _loads_or_scenario_error(raw)


SIZE_PATHS = [("wheel", "at"), ("body", "parts", 0, "length"), ("body", "parts", 0, "mass"), ("body", "parts", 1, "at"),
              ("wheel", "parts", 0, "radius"), ("wheel", "parts", 0, "thickness"), ("motor", "rotor_inertia"),
              ("motor", "resistance"), ("sensors", "angle", "noise"), ("sensors", "wheel", "noise"),
              ("trial", "start", "wheel_speed"), ("wheel", "inertia_correction")]


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(path=st.sampled_from(SIZE_PATHS),
       value=st.one_of(st.floats(allow_nan=False, allow_infinity=False),
                       st.sampled_from([1e300, -1e300, 1e308, 1e-300, 5e-324, 0.0])))
def test_any_finite_size_is_refused_or_gives_a_physical_device(path, value):
    """Bounds at load (issue 13, part 4): a value either is refused with its key, or the device
    built from it has finite, positive masses and inertias (no overflow, no zero spin inertia)."""
    from sim.model.device import Device
    raw = copy.deepcopy(BASE)
    raw.setdefault("sensors", {}).setdefault("angle", {})
    raw["sensors"].setdefault("wheel", {})
    node = raw
    for key in path[:-1]:
        node = node[key]
    node[path[-1]] = value
    try:
        sc = validate_scenario(raw, where="<property>")
    except ScenarioError as exc:
        assert "\n" not in str(exc) and ".".join(str(p) for p in path if isinstance(p, str))[:5] in str(exc)
        return
    dev = Device.from_scenario(sc)
    for v in (dev.J_kg_m2, dev.I_w_kg_m2):
        assert math.isfinite(v) and v > 0, (path, value, v)
