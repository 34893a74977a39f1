"""`--set key.path=value` overrides, applied to a scenario's raw mapping before validation.

Paths are dotted keys with list indices: `drive.supply`, `wheel.parts[0].mass`. Values are read
as YAML 1.2 scalars or flow collections ("24V" stays a string for the unit parser; "3" is a
number; "012" is 12, as in a scenario file, see `sim.core.yaml12`).
"""

from __future__ import annotations

import copy
import re
import sys
from typing import Any

import yaml

from ..core.errors import ScenarioError
from ..core.yaml12 import load_yaml12

_TOKEN = re.compile(r"([A-Za-z_][A-Za-z0-9_]*)|\[(\d{1,6})\]")


def parse_path(path: str, *, where: str) -> list[str | int]:
    """Split 'a.b[0].c' into ['a', 'b', 0, 'c']; ScenarioError when malformed."""
    parts: list[str | int] = []
    pos = 0
    text = path.strip()
    if not text:
        raise ScenarioError(f"{where}: empty key path")
    while pos < len(text):
        if parts and text[pos] == ".":
            pos += 1
        m = _TOKEN.match(text, pos)
        if not m or (m.group(2) is not None and not parts):
            raise ScenarioError(f"{where}: malformed key path {path!r} (expected e.g. wheel.parts[0].mass)")
        parts.append(m.group(1) if m.group(1) is not None else int(m.group(2)))
        pos = m.end()
    return parts


YAML_NULLS = ("null", "Null", "NULL", "~")   # YAML 1.2 core schema: `--set key=null` as in a file


def parse_assignment(text: str, *, where: str = "--set") -> tuple[list[str | int], Any]:
    """Split 'key.path=value' into (path, value)."""
    if "=" not in text:
        raise ScenarioError(f"{where} {text!r}: expected key.path=value")
    key, _, value = text.partition("=")
    path = parse_path(key, where=f"{where} {text!r}")
    try:
        parsed = load_yaml12(value) if value.strip() else None
    except (yaml.YAMLError, RecursionError):
        raise ScenarioError(f"{where} {text!r}: the value is not readable") from None
    if value.strip() and parsed is None and value.strip() not in YAML_NULLS:
        parsed = value.strip()     # e.g. a lone '#...': the text as given
    return path, parsed


def set_path(raw: dict, path: list[str | int], value: Any, *, where: str) -> None:
    """Set `value` at `path` inside `raw`, creating missing mappings; lists must already hold the index."""
    node: Any = raw
    shown = ""
    for i, key in enumerate(path):
        last = i == len(path) - 1
        shown += f"[{key}]" if isinstance(key, int) else (("." if shown else "") + key)
        if isinstance(key, int):
            if not isinstance(node, list) or key >= len(node):
                raise ScenarioError(f"{where}: {shown}: no such list item")
        elif not isinstance(node, dict):
            raise ScenarioError(f"{where}: {shown}: the parent is not a mapping")
        if last:
            node[key] = value
            return
        nxt = node[key] if isinstance(key, int) else node.get(key)
        if nxt is None:
            if isinstance(path[i + 1], int):
                raise ScenarioError(f"{where}: {shown}: no such list")
            nxt = {}
            node[key] = nxt
        node = nxt


def apply_overrides(raw: dict, overrides, *, where: str, notes: list[str] | None = None) -> dict:
    """A deep copy of `raw` with each 'key.path=value' override applied in order.

    Notes for the user (a changed strategy kind dropped parameters) are appended to `notes`, or
    printed on stderr when no list is given.
    """
    if not overrides:
        return raw
    out = copy.deepcopy(raw)
    for text in overrides:
        path, value = parse_assignment(text, where=f"{where}: --set")  # name the file, as every error does
        note = _drop_other_kind(out, path, value, text)
        if note and notes is not None:
            notes.append(note)
        elif note:
            print(note, file=sys.stderr)
        bare = bare_number_note(out, path, [value], option="--set", text=text)
        if bare and notes is not None:
            notes.append(bare)
        elif bare:
            print(bare, file=sys.stderr)
        set_path(out, path, value, where=f"{where} (--set {text})")
    return out


_NUMBER_THEN_UNIT = re.compile(r"^\s*[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?\s*(?P<unit>[A-Za-z%°µΩ].*)$")


def bare_number_note(raw: dict, path: list, values: list, *, option: str, text: str) -> str | None:
    """A one-line note when bare numbers replace a value the file gives with a unit.

    A bare number is read in SI units (`sim.core.units`): `--set motor.speed_constant=300` over a file's
    `400 rpm/V` means 300 rad/s per volt, 2865 rpm/V, not 300 rpm/V. Said, not refused: SI is what the
    number means. None when any value carries its own unit, the file's value has none, or the path is
    not in the file."""
    if not values or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values):
        return None
    node = _node_at(raw, path)
    m = _NUMBER_THEN_UNIT.match(node) if isinstance(node, str) else None
    if m is None:
        return None
    unit = m.group("unit").strip()
    try:
        from ..core.units import registry
        one, two = (float(registry().Quantity(x, unit).to_base_units().magnitude) for x in (1.0, 2.0))
    except Exception:  # pint raises many kinds for a unit it cannot read; the validator words those
        return None
    if not two == 2.0 * one or one == 0.0 or abs(one - 1.0) < 1e-12:   # an offset unit (degC), or SI itself
        return None
    per_si = 1.0 / one
    shown = ", ".join(f"{v:g} = {v * per_si:.4g} {unit}" for v in values[:3]) + (", ..." if len(values) > 3 else "")
    return (f"note: {option} {text}: a bare number is in SI units ({shown}); the file gives "
            f"{node.strip()!r}: write the unit (e.g. {values[0]:g} {unit}) to mean {unit}")


STRATEGY_NAMES = ("kind", "plugin")


def _drop_other_kind(raw: dict, path: list, value: Any, text: str) -> str | None:
    """`--set strategy.kind=lqr` on a `pid` strategy: the old kind's parameters do not fit the new
    kind, so the mapping is replaced by `{kind: lqr}`; returns a one-line note naming what was
    dropped (None when nothing was). Applies to any mapping naming a strategy by `kind` or
    `plugin` (nested ones too, e.g. strategy.balance)."""
    if len(path) < 2 or path[-1] not in STRATEGY_NAMES:
        return None
    parent = _node_at(raw, path[:-1])
    if not isinstance(parent, dict):
        return None
    old = next(((k, parent[k]) for k in STRATEGY_NAMES if k in parent), None)
    if old is None or (old[0] == path[-1] and old[1] == value):
        return None
    dropped = [str(k) for k in parent if k not in STRATEGY_NAMES]
    parent.clear()
    if not dropped:
        return None
    return (f"note: --set {text}: the {old[1]!s} parameters {', '.join(dropped)} were dropped "
            f"(they belong to the old {old[0]}); give the new kind's parameters with more --set")


def _node_at(raw: Any, path: list) -> Any:
    """The value at `path` inside `raw`, or None where the path leaves the mapping."""
    node = raw
    for key in path:
        if isinstance(key, int):
            node = node[key] if isinstance(node, list) and key < len(node) else None
        else:
            node = node.get(key) if isinstance(node, dict) else None
        if node is None:
            return None
    return node


def deep_merge(base: dict, extra: dict) -> dict:
    """A copy of `base` with `extra` merged in: nested mappings merge key by key, anything else replaces."""
    out = copy.deepcopy(base)
    for key, value in extra.items():
        if isinstance(value, dict) and isinstance(out.get(key), dict):
            out[key] = deep_merge(out[key], value)
        else:
            out[key] = copy.deepcopy(value)
    return out
