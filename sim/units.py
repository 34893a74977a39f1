"""Quantity parsing: unit strings from scenario files to SI floats, with pint.

Bare numbers are taken as SI already. Strings such as "80 g", "300 rpm/V" or "20 deg" are
parsed by pint and converted to the SI unit the key expects. Percentages ("10%") are fractions.
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
    "acceleration": ("m/s^2", "an acceleration"),
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
    if isinstance(value, (int, float)):
        number = float(value)
    elif isinstance(value, str):
        number = _parse_string(value.strip(), unit, label)
    else:
        raise ValueError(f"expected {label}, found {type(value).__name__} {value!r}")
    if not math.isfinite(number):
        raise ValueError(f"expected a finite {label.split(' ', 1)[1]}, found {value!r}")
    return number


def _parse_string(text: str, unit: str, label: str) -> float:
    if len(text) > 100:
        raise ValueError(f"expected {label}, found a string of {len(text)} characters")
    try:  # YAML 1.1 reads "2e-6" (no dot) as a string: a bare number is still SI
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
    simple = _simple_quantity(text, unit)
    if simple is not None:
        return simple
    if not powers_are_small(text):
        raise ValueError(f"expected {label}, found {text!r} (powers must be plain numbers up to "
                         f"{MAX_POWER}, at most {MAX_POWERS} of them)")
    import pint

    reg = registry()
    try:
        q = reg.Quantity(text)
        if unit:
            return float(q.to(unit).magnitude)
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
}
_SIMPLE = re.compile(r"([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(\S+)")


def _simple_quantity(text: str, unit: str) -> float | None:
    """`text` in `unit` when it is a plain number and a unit of SIMPLE_UNITS of that kind, else None."""
    m = _SIMPLE.fullmatch(text)
    entry = SIMPLE_UNITS.get(m.group(2)) if m else None
    if entry is None or entry[0] != unit:
        return None
    return float(m.group(1)) * entry[1]


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
