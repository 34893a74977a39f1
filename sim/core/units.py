"""Quantity parsing: unit strings from scenario files to SI floats, with pint.

Bare numbers are taken as SI already. Strings such as "80 g", "300 rpm/V" or "20 deg" are
parsed by pint and converted to the SI unit the key expects. Percentages ("10%") are fractions.

Two readings are this trade's, not pint's defaults:
- In a temperature difference per watt or per joule ("10 degC/W", "20 J/degC"), degC and degF
  are differences (1 degC of difference = 1 K), never absolute temperatures.
- Hz in a speed of rotation ("10 Hz" as a wheel speed, "5 Hz/V" as Kv) is revolutions per
  second: 10 Hz = 20 pi rad/s, as "600 rpm" is. Elsewhere (a loop rate) Hz is 1/s.
"""

from __future__ import annotations

import math
import re
from functools import lru_cache

# SI unit that each kind of quantity is stored in, with a readable name for messages.
KINDS: dict[str, tuple[str, str]] = {
    "length": ("m", "a length"),
    "mass": ("kg", "a mass"),
    "time": ("s", "a time"),
    "frequency": ("Hz", "a rate"),
    "angle": ("rad", "an angle"),
    "angular_speed": ("rad/s", "an angular speed"),
    "acceleration": ("m/s^2", "an acceleration (standard gravity is g0: '8 g0'; g is a gram)"),
    "torque": ("N*m", "a torque"),
    "viscous": ("N*m*s/rad", "a viscous friction coefficient"),
    "impulse": ("N*m*s", "an angular impulse"),
    "inertia": ("kg*m^2", "a moment of inertia"),
    "density": ("kg/m^3", "a density"),
    "stress": ("Pa", "a stress"),
    "voltage": ("V", "a voltage"),
    "current": ("A", "a current"),
    "resistance": ("ohm", "a resistance"),
    "inductance": ("H", "an inductance"),
    "speed_constant": ("rad/s/V", "a speed constant (e.g. '300 rpm/V')"),
    "back_emf": ("V*s/rad", "a back-EMF constant"),
    "torque_constant": ("N*m/A", "a torque constant"),
    "fraction": ("", "a fraction"),
    "temperature_rise_per_watt": ("K/W", "a thermal resistance"),
    "heat_capacity": ("J/K", "a heat capacity"),
    "temperature": ("degC", "a temperature"),
    "charge": ("C", "a charge (e.g. '2200 mAh')"),
    "capacitance": ("F", "a capacitance"),
    "rate_noise_density": ("rad/s/Hz^0.5", "a rate noise density (e.g. '0.01 deg/s/Hz^0.5')"),
    "accel_noise_density": ("m/s^2/Hz^0.5", "an acceleration noise density (e.g. '0.002 m/s^2/Hz^0.5')"),
    "rate_random_walk": ("rad/s^1.5", "a bias random walk (e.g. '0.001 deg/s/s^0.5')"),
}


@lru_cache(maxsize=1)
def registry():
    """The one pint unit registry, built lazily: importing pint and building it costs about 1 s."""
    import pint

    reg = pint.UnitRegistry(autoconvert_offset_to_baseunit=True)
    return reg


def parse_quantity(value: object, kind: str) -> float:
    """Return `value` as a finite float in the SI unit of `kind`.

    Raises ValueError with a short reason when the value has the wrong dimension, is not a
    number, or is not finite. Booleans are rejected (YAML's `yes` is not a quantity).
    """
    unit, label = KINDS[kind]
    if isinstance(value, bool) or value is None:
        raise ValueError(f"expected {label}, found {value!r}")
    if isinstance(value, int):
        number = _int_to_float(value, label)
    elif isinstance(value, float):
        number = value
    elif isinstance(value, str):
        number = _parse_string(value.strip(), unit, label, kind)
    else:
        raise ValueError(f"expected {label}, found {type(value).__name__} {value!r}")
    if not math.isfinite(number):
        raise ValueError(f"expected a finite {label.split(' ', 1)[1]}, found {value!r}")
    return number


def _int_to_float(value: int, label: str) -> float:
    """An int as a float; a ValueError (not OverflowError) when it has too many digits for one."""
    try:
        return float(value)
    except OverflowError:
        raise ValueError(f"expected {label}, found a number too large for a float "
                         f"(about 10^{value.bit_length() * 0.30103:.0f})") from None


# Kinds whose SI unit counts radians of wheel or body rotation: there "Hz" means revolutions/s.
HERTZ_IS_REVOLUTIONS = {"angular_speed", "speed_constant", "back_emf"}
# Kinds that hold a temperature difference: degC and degF in them are differences.
TEMPERATURE_DIFFERENCES = {"temperature_rise_per_watt", "heat_capacity"}
_OFFSET_UNIT = re.compile(r"(?<![A-Za-z_])(degC|degF|celsius|fahrenheit|degree_Celsius|degree_Fahrenheit)(?![A-Za-z_])")


# YAML 1.1 integer and float forms that YAML 1.2 (and so our loader, `sim.core.yaml12`) reads as strings.
_YAML11_NUMBER = re.compile(r"[-+]?(?:0b[01_]+|0x[0-9a-fA-F_]*_[0-9a-fA-F_]*|[0-9][0-9_]*(?::[0-5]?[0-9])+(?:\.[0-9_]*)?"
                            r"|[0-9]*_[0-9_]*(?:\.[0-9_]*)?(?:[eE][-+]?[0-9]+)?|[0-9_]*\.[0-9]*_[0-9_]*)")


def _parse_string(text: str, unit: str, label: str, kind: str = "") -> float:
    if len(text) > 100:
        what = "digits" if text.lstrip("+-").isdigit() else "characters"
        raise ValueError(f"expected {label}, found {len(text)} {what}")
    if _YAML11_NUMBER.fullmatch(text):
        raise ValueError(f"expected {label}, found {text!r}, a YAML 1.1 number form (base 60, binary or with "
                         "underscores) that is not read as a number here; write the number in plain decimal")
    try:  # a bare number in a string ("2e-6") is still SI; Python's float() also takes "1_2": refused above
        return float(text)
    except ValueError:
        pass
    if text.endswith("%"):
        try:
            number = float(text[:-1]) / 100.0
        except ValueError:
            raise ValueError(f"expected {label}, found {text!r}") from None
        if unit:
            raise ValueError(f"expected {label} in {unit}, found a percentage {text!r}")
        return number
    simple = _simple_quantity(text, unit, kind)
    if simple is not None:
        return simple
    if kind in TEMPERATURE_DIFFERENCES:
        text = _OFFSET_UNIT.sub(lambda m: "delta_" + m.group(1), text)
    if not powers_are_small(text):
        raise ValueError(f"expected {label}, found {text!r} (powers must be plain numbers up to "
                         f"{MAX_POWER}, at most {MAX_POWERS} of them)")
    import pint

    reg = registry()
    try:
        q = reg.Quantity(text)
        if unit:
            return float(q.to(unit).magnitude) * _hertz_factor(q, kind)
        return float(q.to("dimensionless").magnitude)
    except pint.DimensionalityError:
        expect = f"{label} in {unit}" if unit else label
        raise ValueError(f"expected {expect}, found {text!r}") from None
    except Exception:  # pint raises several kinds for unparsable text
        expect = f"{label} in {unit}" if unit else label
        raise ValueError(f"expected {expect}, found unreadable {text!r}") from None


# "number unit" with one of these common units is converted without pint: importing pint and
# building its registry costs about a second at every start-up, and most scenarios need nothing
# more. unit as written -> (the SI unit it converts to, factor). The factors are the SI
# definitions; tests/test_properties.py checks every entry against pint. Anything else goes to pint.
_PI = math.pi
SIMPLE_UNITS: dict[str, tuple[str, float]] = {
    "m": ("m", 1.0), "cm": ("m", 1e-2), "mm": ("m", 1e-3), "um": ("m", 1e-6), "km": ("m", 1e3),
    "kg": ("kg", 1.0), "g": ("kg", 1e-3), "mg": ("kg", 1e-6),
    "s": ("s", 1.0), "ms": ("s", 1e-3), "us": ("s", 1e-6), "min": ("s", 60.0),
    "Hz": ("Hz", 1.0), "kHz": ("Hz", 1e3),
    "rad": ("rad", 1.0), "mrad": ("rad", 1e-3), "deg": ("rad", _PI / 180.0),
    "rad/s": ("rad/s", 1.0), "deg/s": ("rad/s", _PI / 180.0), "rpm": ("rad/s", 2.0 * _PI / 60.0),
    "m/s^2": ("m/s^2", 1.0),
    "N*m": ("N*m", 1.0), "mN*m": ("N*m", 1e-3),
    "N*m*s/rad": ("N*m*s/rad", 1.0), "N*m*s": ("N*m*s", 1.0), "mN*m*s": ("N*m*s", 1e-3),
    "kg*m^2": ("kg*m^2", 1.0), "g*cm^2": ("kg*m^2", 1e-7),
    "kg/m^3": ("kg/m^3", 1.0), "g/cm^3": ("kg/m^3", 1e3),
    "Pa": ("Pa", 1.0), "kPa": ("Pa", 1e3), "MPa": ("Pa", 1e6), "GPa": ("Pa", 1e9),
    "V": ("V", 1.0), "mV": ("V", 1e-3), "A": ("A", 1.0), "mA": ("A", 1e-3),
    "ohm": ("ohm", 1.0), "mohm": ("ohm", 1e-3), "H": ("H", 1.0), "mH": ("H", 1e-3), "uH": ("H", 1e-6),
    "rpm/V": ("rad/s/V", 2.0 * _PI / 60.0), "V*s/rad": ("V*s/rad", 1.0),
    "N*m/A": ("N*m/A", 1.0), "mN*m/A": ("N*m/A", 1e-3), "K/W": ("K/W", 1.0), "J/K": ("J/K", 1.0),
    "C": ("C", 1.0), "mAh": ("C", 3.6), "Ah": ("C", 3600.0), "mA*h": ("C", 3.6), "A*h": ("C", 3600.0),
    "F": ("F", 1.0), "mF": ("F", 1e-3), "uF": ("F", 1e-6),
}
_SIMPLE = re.compile(r"([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(\S+)")


# Units read differently by kind (see the module docstring): unit as written -> factor to SI.
KIND_UNITS: dict[str, dict[str, float]] = {
    "angular_speed": {"Hz": 2.0 * _PI, "kHz": 2.0 * _PI * 1e3, "rev/s": 2.0 * _PI},
    "speed_constant": {"Hz/V": 2.0 * _PI},
    "temperature_rise_per_watt": {"degC/W": 1.0, "degC/mW": 1e3},
    "heat_capacity": {"J/degC": 1.0, "kJ/degC": 1e3},
}


def _simple_quantity(text: str, unit: str, kind: str = "") -> float | None:
    """`text` in `unit` when it is a plain number and a unit of SIMPLE_UNITS of that kind, else None."""
    m = _SIMPLE.fullmatch(text)
    if m is None:
        return None
    factor = KIND_UNITS.get(kind, {}).get(m.group(2))
    if factor is not None:
        return float(m.group(1)) * factor
    entry = SIMPLE_UNITS.get(m.group(2))
    if entry is None or entry[0] != unit:
        return None
    return float(m.group(1)) * entry[1]


def _hertz_factor(q, kind: str) -> float:
    """(2 pi)^p for Hz^p (any prefix) in `q`'s units when `kind` counts rotation, else 1.

    pint takes the radian as dimensionless, so "10 Hz" would become 10 rad/s; a speed in Hz is
    revolutions per second in this trade (common practice, no source). A unit that already
    names an angle ("rad*Hz") is left as pint reads it.
    """
    if kind not in HERTZ_IS_REVOLUTIONS:
        return 1.0
    units = dict(q._units)
    if any(a in name for name in units for a in ("radian", "degree", "revolution", "turn", "rpm")):
        return 1.0
    power = sum(exp for name, exp in units.items() if name.endswith("hertz"))
    return (2.0 * _PI) ** power


MAX_POWER = 6      # m^3, s^-2 need little; pint evaluates 10**10**10 exactly and never returns
MAX_POWERS = 3
_POWER_OP = re.compile(r"\*\*|\^")
_CHAINED = re.compile(r"\s*(\*\*|\^)")
_EXPONENT = re.compile(r"\s*\(?\s*([-+]?\d+(?:\.\d+)?)\s*\)?")


def powers_are_small(text: str) -> bool:
    """True when every power in `text` has a plain-number exponent of at most MAX_POWER."""
    ops = list(_POWER_OP.finditer(text))
    if len(ops) > MAX_POWERS:
        return False
    for op in ops:
        m = _EXPONENT.match(text, op.end())
        if m is None or abs(float(m.group(1))) > MAX_POWER:
            return False
        if _CHAINED.match(text, m.end()):  # a**b**c is a**(b**c): exponents multiply up
            return False
    return True


def Q(kind: str, **limits: float):
    """A pydantic float field type holding a quantity of `kind`, parsed to SI, with bounds
    (`gt`, `ge`, `lt`, `le`, in SI). Used by scenario sections and strategy parameters alike."""
    from typing import Annotated

    from pydantic import BeforeValidator, Field

    return Annotated[float, BeforeValidator(lambda v: parse_quantity(v, kind)), Field(**limits)]
