"""Monte Carlo over part and component tolerances.

A scenario's `tolerances` maps dotted scenario keys to a band: "10%" is relative to the nominal
value, a quantity ("1 deg", "0.1 ohm", or a bare SI number) is absolute. Each trial draws every
toleranced value uniformly within +-band (our choice: a uniform draw covers the band's edges
more often than a normal one would, which suits a go/no-go check), writes it into a copy of the
raw scenario mapping and validates that copy again, so a perturbed design is checked exactly
like a hand-written one.

Keys are checked when the scenario loads: the path must name a numeric quantity that has a
value in the scenario (a part's `mass` only when the part gives one), and the copies with each
toleranced value at either end of its band (the others nominal) must be valid scenarios, so a
band that breaks a rule (the loop-rate/step rule, a bound, a default nested strategy the file
does not write out) is refused at load instead of making every Monte Carlo draw invalid.
"""

from __future__ import annotations

import copy
import math
import typing
from dataclasses import dataclass
from typing import Any

import numpy as np
from pydantic import BaseModel, BeforeValidator

from ..core.errors import ScenarioError
from .overrides import parse_path, set_path

# Used when a scenario has no `tolerances` section. Common practice, no source: winding
# resistance is usually quoted +-10% on datasheets, motor constants +-5 to 10%, a nominal
# supply moves +-5% with charge state and load, and an IMU mounted by hand is off by about
# half a degree.
DEFAULT_TOLERANCES: dict[str, str] = {
    "motor.resistance": "10%",
    "motor.speed_constant": "5%",       # or back_emf_constant, whichever the scenario gives
    "drive.supply": "5%",
    "sensors.angle.bias": "0.5 deg",
}


ANGLE_BIAS_KEYS = {False: "sensors.angle.bias", True: "sensors.imu.orientation.roll"}
"""The key whose error is a bias of the law's angle: the encoder's bias, or, when an estimator
makes the angle from an IMU, the IMU's misalignment about the pivot axis (a tilt offset)."""


@dataclass(frozen=True)
class Tolerance:
    """One toleranced key: `relative` bands are fractions of the nominal; absolute ones are SI."""

    key: str
    path: tuple
    relative: bool
    band: float
    nominal: float


def value_at(obj: Any, path) -> Any:
    """The value at a parsed path inside a validated scenario (models, lists, the strategy spec).

    Raises KeyError naming the first part that does not exist.
    """
    for part in path:
        if isinstance(part, int):
            if not isinstance(obj, (list, tuple)) or part >= len(obj):
                raise KeyError(f"[{part}]")
            obj = obj[part]
        elif hasattr(obj, "params") and hasattr(obj, "cls"):   # the resolved strategy spec
            obj = obj.kind if part == "kind" else _attr(obj.params, part)
        elif isinstance(obj, BaseModel):
            obj = _attr(obj, part)
        elif isinstance(obj, dict) and part in obj:   # a mapping in the scenario (firmware defines)
            obj = obj[part]
        else:
            raise KeyError(part)
    return obj


def _attr(model: BaseModel, name: str) -> Any:
    if name not in type(model).model_fields and name not in (model.model_extra or {}):
        raise KeyError(name)
    return getattr(model, name)


def field_parser(obj: Any, path):
    """The unit parser of the quantity field at `path` (parse_quantity bound to its kind), or None."""
    parent = value_at(obj, path[:-1]) if len(path) > 1 else obj
    if hasattr(parent, "params") and hasattr(parent, "cls"):
        parent = parent.params
    if not isinstance(parent, BaseModel) or not isinstance(path[-1], str):
        return None
    field = type(parent).model_fields.get(path[-1])
    if field is None:
        return None
    metadata = list(field.metadata)
    for arg in typing.get_args(field.annotation):     # `Q(...) | None` keeps its metadata inside
        metadata += list(getattr(arg, "__metadata__", ()))
    for item in metadata:
        if isinstance(item, BeforeValidator):
            return item.func
    return None


def parse_tolerances(scenario, table: dict | None) -> list[Tolerance]:
    """Check a `tolerances` mapping against a validated scenario; raises ValueError("@tolerances.<key>: ...")."""
    out = []
    for key, band_text in (table or {}).items():
        where = f"@tolerances.{key}"
        try:
            path = tuple(parse_path(str(key), where="tolerances"))
            nominal = value_at(scenario, path)
        except (ScenarioError, KeyError) as exc:
            raise ValueError(f"{where}: no such scenario key ({exc})") from None
        if isinstance(nominal, bool) or not isinstance(nominal, float):
            found = "no value (give one in the scenario)" if nominal is None else f"{type(nominal).__name__} {nominal!r}"
            raise ValueError(f"{where}: expected a key holding a number, found {found}")
        relative, band = _parse_band(band_text, scenario, path, where)
        out.append(Tolerance(str(key), path, relative, band, nominal))
    return out


def _parse_band(text: Any, scenario, path, where: str) -> tuple[bool, float]:
    if isinstance(text, bool) or not isinstance(text, (int, float, str)):
        raise ValueError(f"{where}: expected a percentage or a quantity, found {text!r}")
    if isinstance(text, str) and text.strip().endswith("%"):
        try:
            band = float(text.strip()[:-1]) / 100.0
        except ValueError:
            raise ValueError(f"{where}: expected a percentage, found {text!r}") from None
        if not (0.0 <= band < 1.0):
            raise ValueError(f"{where}: a relative band must be at least 0% and below 100%, found {text!r}")
        return True, band
    parser = field_parser(scenario, path)
    try:
        band = parser(text) if parser is not None else float(text)
    except ValueError as exc:
        raise ValueError(f"{where}: {exc}") from None
    if not (math.isfinite(band) and band >= 0.0):
        raise ValueError(f"{where}: expected a band of at least 0, found {text!r}")
    return False, band


def scenario_tolerances(scenario) -> list[Tolerance]:
    """The scenario's tolerances, or the defaults that apply to it when it has none."""
    if scenario.tolerances is not None:
        return parse_tolerances(scenario, scenario.tolerances)
    table = dict(DEFAULT_TOLERANCES)
    if scenario.motor.speed_constant is None:
        table["motor.back_emf_constant"] = table.pop("motor.speed_constant")
    if scenario.sensors.estimator is not None:   # the law's angle comes from the IMU: its mounting is the bias
        table[ANGLE_BIAS_KEYS[True]] = table.pop(ANGLE_BIAS_KEYS[False])
    if scenario.battery is not None:
        # a pack's supply is its charge state and sag: its resistance moves with temperature and age
        # (common practice, no source), and drive.supply is not the scenario's to give
        del table["drive.supply"]
        b = scenario.battery
        table["battery.internal_resistance" if b.internal_resistance is not None else "battery.cell_resistance"] = "20%"
    return parse_tolerances(scenario, table)


def perturbed_raw(raw: dict, tolerances: list[Tolerance], rng: np.random.Generator) -> tuple[dict, dict]:
    """A deep copy of `raw` with each toleranced value drawn uniformly within its band.

    Returns (mapping, drawn values by key in SI). Values are written as bare SI numbers.
    """
    out = copy.deepcopy(raw)
    drawn = {}
    for tol in tolerances:
        u = rng.uniform(-1.0, 1.0)
        value = tol.nominal * (1.0 + u * tol.band) if tol.relative else tol.nominal + u * tol.band
        set_path(out, list(tol.path), float(value), where=f"tolerances.{tol.key}")
        drawn[tol.key] = float(value)
    return out, drawn


def trial_seed(base_seed: int, *index: int) -> int:
    """A seed for one trial derived from the base seed and its indices, independent of run order."""
    return int(np.random.SeedSequence([int(base_seed), *[int(i) for i in index]]).generate_state(1, dtype=np.uint64)[0] >> 1)


# Two-sided 95% normal quantile, scipy.stats.norm.ppf(0.975) = 1.959964 (to 7 figures).
Z_95 = 1.959963984540054


def wilson_interval(passed: int, trials: int, *, z: float = Z_95) -> tuple[float, float]:
    """95% Wilson score interval (low, high) for `passed` successes in `trials` trials.

    (p + z^2/(2n) -+ z sqrt(p(1-p)/n + z^2/(4n^2))) / (1 + z^2/n), p = k/n (Wilson, "Probable
    inference, the law of succession, and statistical inference", JASA 22 (1927) 209-212). Unlike
    p +- z sqrt(p(1-p)/n) it stays inside [0, 1] and is not zero-width at 0 or n passes.
    """
    if trials <= 0:
        raise ValueError("trials must be positive")
    n, p = float(trials), passed / trials
    centre = p + z * z / (2.0 * n)
    half = z * math.sqrt(p * (1.0 - p) / n + z * z / (4.0 * n * n))
    scale = 1.0 + z * z / n
    return max(0.0, (centre - half) / scale), min(1.0, (centre + half) / scale)


def interval_note(passed: int, trials: int, limit: float) -> str:
    """The pass fraction's interval in words, suggesting more trials when it straddles `limit`."""
    low, high = wilson_interval(passed, trials)
    note = f"95% interval {100 * low:.1f}-{100 * high:.1f}% (Wilson)"
    if low < limit <= high:
        note += f": straddles the {100 * limit:.0f}% limit, run more trials (e.g. --trials {4 * trials})"
    return note


def check_band_ends(raw: dict, scenario, *, where: str, validate) -> None:
    """Refuse, at load, tolerances whose band ends make the scenario invalid.

    Validates (with `validate(mapping)`, which raises ScenarioError) a copy of `raw` for each
    tolerance (the scenario's own, or the defaults that apply) at each end of its band, the other
    values nominal and `tolerances` removed. Raises ScenarioError naming `tolerances.<key>`.
    """
    table = scenario.tolerances
    for tol in scenario_tolerances(scenario):
        for u, end in ((-1.0, "low"), (1.0, "high")):
            value = tol.nominal * (1.0 + u * tol.band) if tol.relative else tol.nominal + u * tol.band
            trial = copy.deepcopy(raw)
            trial.pop("tolerances", None)
            set_path(trial, list(tol.path), float(value), where=f"{where}: tolerances.{tol.key}")
            try:
                validate(trial)
            except ScenarioError as exc:
                problem = str(exc).removeprefix(f"{where}: ")
                origin = "" if table is not None else " (a default tolerance: give a `tolerances` section to change it)"
                raise ScenarioError(f"{where}: tolerances.{tol.key}: at the {end} end of its band ({value:.6g} SI) "
                                    f"the scenario is invalid{origin}{_unwritten_hint(raw, tol.path)}: {problem}") from None


def _unwritten_hint(raw: dict, path) -> str:
    """A note when a mapping on `path` is a default the file does not write (e.g. a nested strategy)."""
    if path[0] != "strategy":  # elsewhere a missing mapping is filled in with its defaults
        return ""
    node: Any = raw
    for i, part in enumerate(path[:-1]):
        nxt = node[part] if isinstance(part, int) and isinstance(node, list) and part < len(node) else \
            node.get(part) if isinstance(node, dict) else None
        if nxt is None:
            shown = ".".join(str(x) for x in path[:i + 1])
            return f" ({shown} is a default the file does not write out; write it, with its kind, to tolerance its keys)"
        node = nxt
    return ""
