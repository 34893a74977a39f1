"""Strategy registry: built-in kinds by name, plug-ins by path or entry point.

`resolve_spec(raw, base_dir=...)` turns the scenario's `strategy:` mapping into a
`StrategySpec` (class + validated parameters). It is called once, at scenario load.
"""

from __future__ import annotations

import difflib
import hashlib
import importlib
import importlib.util
import sys
from pathlib import Path
from typing import Any

from pydantic import ValidationError

from .base import Reading, Strategy, StrategyParams, StrategySpec

__all__ = ["BUILTIN", "Reading", "Strategy", "StrategyParams", "StrategySpec", "resolve_spec", "known_kinds",
           "plugins_in"]

# name -> "module:Class"; imported only when used, to keep start-up short
BUILTIN: dict[str, str] = {
    "coast": "sim.strategies.bench:Coast",
    "fixed_voltage": "sim.strategies.bench:FixedVoltage",
    "lqr": "sim.strategies.lqr:LqrBalance",
    "energy": "sim.strategies.swingup:EnergySwingUp",
    "pump": "sim.strategies.swingup:PumpSwingUp",
    "swing_and_catch": "sim.strategies.supervisor:SwingAndCatch",
    "pid": "sim.strategies.pid:PidBalance",
    "jump": "sim.strategies.jump:BrakeJump",
    "firmware": "sim.firmware.strategy:FirmwareStrategy",
}

ENTRY_POINT_GROUP = "wheelbench.strategies"


def known_kinds() -> list[str]:
    names = set(BUILTIN)
    names.update(ep.name for ep in _entry_points())
    return sorted(names)


def _entry_points():
    from importlib.metadata import entry_points
    try:
        return list(entry_points(group=ENTRY_POINT_GROUP))
    except Exception:  # a broken installed distribution must not stop a built-in from loading
        return []


def plugins_in(spec: StrategySpec) -> list[str]:
    """The names of the plug-ins in `spec`, depth first: itself unless its kind is a built-in, then
    any strategy nested in its parameters (e.g. swing_and_catch's `swing_up` and `balance`).

    A plug-in is anything not named in BUILTIN: a "file.py:Class" or "module:Class" path, or an
    entry point (a built-in name always wins over an entry point of the same name).
    """
    # a built-in marked `isolated` (compiled firmware) runs in the child like a plug-in
    found = [] if spec.kind in BUILTIN and not getattr(spec.cls, "isolated", False) else [spec.kind]
    for _, value in (spec.params if spec.params is not None else ()):
        for item in (value if isinstance(value, (list, tuple)) else (value,)):
            if isinstance(item, StrategySpec):
                found += plugins_in(item)
    return found


def builtin_class(kind: str) -> type[Strategy]:
    module, _, name = BUILTIN[kind].partition(":")
    return getattr(importlib.import_module(module), name)


def spec_from_raw(raw: Any, info) -> StrategySpec:
    """A pydantic BeforeValidator: resolve a `strategy:` mapping (or a nested one) relative to the
    scenario file's folder, which the loader passes in the validation context as `base_dir`."""
    return resolve_spec(raw, base_dir=(info.context or {}).get("base_dir", Path.cwd()))


def resolve_spec(raw: Any, *, base_dir: Path) -> StrategySpec:
    """Validate a `strategy:` mapping. Raises ValueError("@key: ...") for the scenario loader."""
    if isinstance(raw, StrategySpec):
        return raw
    if not isinstance(raw, dict):
        raise ValueError(f"expected a mapping with 'kind' or 'plugin', found {type(raw).__name__}")
    raw = dict(raw)
    kind, plugin = raw.pop("kind", None), raw.pop("plugin", None)
    if (kind is None) == (plugin is None):
        raise ValueError("@kind: give exactly one of 'kind' (a built-in) and 'plugin' (file.py:Class or module:Class)")
    if kind is not None:
        cls, name = _class_for_kind(kind), str(kind)
    else:
        cls, name = _class_for_plugin(plugin, base_dir), str(plugin)
    try:
        params = cls.Params.model_validate(raw, context={"base_dir": base_dir})
    except ValidationError as exc:
        from ..scenario import describe_validation_error
        raise ValueError("@" + describe_validation_error(exc, cls.Params)) from None
    return StrategySpec(kind=name, cls=cls, params=params)


def _class_for_kind(kind: Any) -> type[Strategy]:
    if not isinstance(kind, str):
        raise ValueError(f"@kind: expected a strategy name, found {kind!r}")
    if kind in BUILTIN:
        return builtin_class(kind)
    for ep in _entry_points():
        if ep.name == kind:
            return _checked(_load_entry_point(ep), f"entry point {kind!r}")
    close = difflib.get_close_matches(kind, known_kinds(), n=1)
    hint = f" (did you mean '{close[0]}'?)" if close else ""
    raise ValueError(f"@kind: unknown strategy {kind!r}{hint}; known: {', '.join(known_kinds())}")


def _load_entry_point(ep):
    try:
        return ep.load()
    except Exception as exc:
        raise ValueError(f"@kind: loading entry point {ep.name!r} failed: {type(exc).__name__}: {exc}") from None


def _class_for_plugin(plugin: Any, base_dir: Path) -> type[Strategy]:
    if not isinstance(plugin, str) or plugin.count(":") != 1:
        raise ValueError(f"@plugin: expected 'path/to/file.py:ClassName' or 'package.module:ClassName', found {plugin!r}")
    target, _, cls_name = plugin.partition(":")
    if target.endswith(".py"):
        module = _import_file(Path(target) if Path(target).is_absolute() else base_dir / target, plugin)
    else:
        try:
            module = _within_budget(lambda: importlib.import_module(target), target)
        except Exception as exc:
            raise ValueError(f"@plugin: cannot import module {target!r} ({type(exc).__name__}: {exc})") from None
    cls = getattr(module, cls_name, None)
    if cls is None:
        raise ValueError(f"@plugin: {target!r} has no class {cls_name!r}")
    return _checked(cls, plugin)


def _import_file(path: Path, plugin: str):
    if not path.is_file():
        raise ValueError(f"@plugin: no such file {str(path)!r}")
    name = "wheelbench_plugin_" + hashlib.sha1(str(path.resolve()).encode()).hexdigest()[:12]
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    try:
        _within_budget(lambda: spec.loader.exec_module(module), str(path))
    except Exception as exc:
        sys.modules.pop(name, None)
        raise ValueError(f"@plugin: importing {str(path)!r} failed ({type(exc).__name__}: {exc})") from None
    return module


IMPORT_BUDGET_S = 30.0
"""Wall time, s, a plug-in's import may take before loading gives up (an endless loop at import
time must not hang `validate`; the trial's own budget covers the strategy's calls)."""


def _within_budget(load, what: str):
    """Run `load()` under the strategy clock; a plug-in import past the budget becomes a TimeoutError."""
    from ..trial import StrategyClock, StrategyTimeout

    with StrategyClock(IMPORT_BUDGET_S) as clock:
        clock.enter()
        try:
            result = load()
            clock.leave()
        except StrategyTimeout:
            raise TimeoutError(f"gave up after {IMPORT_BUDGET_S:g} s") from None
    return result


def _checked(cls: Any, where: str) -> type[Strategy]:
    if not (isinstance(cls, type) and issubclass(cls, Strategy)):
        raise ValueError(f"@plugin: {where} is not a subclass of sim.strategies.Strategy")
    return cls
