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
    """The one pint unit registry (built lazily: pint's start-up costs ~0.3 s)."""
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
