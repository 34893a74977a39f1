"""Strategy registry: built-in kinds by name, plug-ins by path or entry point.

`resolve_spec(raw, base_dir=...)` turns the scenario's `strategy:` mapping into a
`StrategySpec` (class + validated parameters). It is called once, at scenario load.

Plug-ins are programs. Loading one runs its module's code in this process, so everything the
plug-in's code can do at load (import, class lookup, its `Params` validators) runs inside one
guard that catches BaseException: `sys.exit`, KeyboardInterrupt or any other exception there
becomes the scenario error "strategy.plugin: ..." (bad input, exit code 2), never the command's
own exit. Before that, a plug-in module is imported once in a forked child (`_probe`), so that
one whose import ends its process (os._exit, a crash) or hangs in compiled code is refused the
same way instead of ending or hanging this process. A "file.py:Class" plug-in named in a scenario file must
lie inside that file's folder (after resolving `..` and symlinks) unless ALLOW_OUTSIDE_ENV is set
to 1 (the CLI's `--allow-plugins-outside` sets it); a scenario given in memory by Python code may
name any file. "package.module:Class" imports whatever module Python finds under that name.
"""

from __future__ import annotations

import difflib
import hashlib
import importlib
import importlib.util
import os
import sys
import threading
from pathlib import Path
from typing import Any

from pydantic import ValidationError

from ..core.exception_text import describe_exception
from .base import Reading, Strategy, StrategyParams, StrategySpec

__all__ = ["BUILTIN", "Reading", "Strategy", "StrategyParams", "StrategySpec", "resolve_spec", "known_kinds",
           "plugins_in", "plugin_specs", "plugin_origin", "describe_exception", "exception_parts",
           "ALLOW_OUTSIDE_ENV"]

# name -> "module:Class"; imported only when used, to keep start-up short
BUILTIN: dict[str, str] = {
    "coast": "sim.strategies.bench:Coast",
    "fixed_voltage": "sim.strategies.bench:FixedVoltage",
    "fixed_current": "sim.strategies.bench:FixedCurrent",
    "lqr": "sim.strategies.lqr:LqrBalance",
    "energy": "sim.strategies.swingup:EnergySwingUp",
    "pump": "sim.strategies.swingup:PumpSwingUp",
    "swing_and_catch": "sim.strategies.supervisor:SwingAndCatch",
    "pid": "sim.strategies.pid:PidBalance",
    "jump": "sim.strategies.jump:BrakeJump",
    "firmware": "sim.strategies.firmware.strategy:FirmwareStrategy",
}

ENTRY_POINT_GROUP = "wheelbench.strategies"

ALLOW_OUTSIDE_ENV = "WHEELBENCH_ALLOW_PLUGINS_OUTSIDE"
"""Environment variable: "1" lets "file.py:Class" plug-ins load from outside the scenario's folder
(an environment variable, so that worker processes of sweeps and checks inherit the choice)."""


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
    return [item.kind for item in plugin_specs(spec, isolated=True)]


def plugin_specs(spec: StrategySpec, *, isolated: bool = False) -> list[StrategySpec]:
    """The plug-in specs in `spec`, in the order of `plugins_in` (with `isolated`, also the
    built-ins marked `isolated`, which run in the child like a plug-in)."""
    own = spec.kind not in BUILTIN or (isolated and getattr(spec.cls, "isolated", False))
    found = [spec] if own else []
    for _, value in (spec.params if spec.params is not None else ()):
        for item in (value if isinstance(value, (list, tuple)) else (value,)):
            if isinstance(item, StrategySpec):
                found += plugin_specs(item, isolated=isolated)
    return found


def plugin_origin(spec: StrategySpec) -> str:
    """Where a plug-in's code was loaded from: its module's file, or the module's name."""
    module = sys.modules.get(getattr(spec.cls, "__module__", None) or "")
    origin = getattr(module, "__file__", None)
    return origin if isinstance(origin, str) else str(getattr(spec.cls, "__module__", spec.kind))


def builtin_class(kind: str) -> type[Strategy]:
    module, _, name = BUILTIN[kind].partition(":")
    return getattr(importlib.import_module(module), name)


def spec_from_raw(raw: Any, info) -> StrategySpec:
    """A pydantic BeforeValidator: resolve a `strategy:` mapping (or a nested one) relative to the
    scenario file's folder, which the loader passes in the validation context as `base_dir`."""
    context = info.context or {}
    return resolve_spec(raw, base_dir=context.get("base_dir", Path.cwd()), anywhere=context.get("in_memory", False))


def resolve_spec(raw: Any, *, base_dir: Path, anywhere: bool = False) -> StrategySpec:
    """Validate a `strategy:` mapping. Raises ValueError("@key: ...") for the scenario loader.

    A "file.py:Class" plug-in must resolve inside `base_dir` (the scenario file's folder) unless
    `anywhere` (a scenario given in memory by Python code) or ALLOW_OUTSIDE_ENV is "1"."""
    if isinstance(raw, StrategySpec):
        return raw
    raw, kind, plugin = kind_or_plugin(raw, "a built-in")
    if kind is not None:
        cls, name = _class_for_kind(kind), str(kind)
    else:
        cls, name = _class_for_plugin(plugin, base_dir, anywhere), str(plugin)
    try:
        params = cls.Params.model_validate(raw, context={"base_dir": base_dir, "in_memory": anywhere})
    except ValidationError as exc:
        from ..core.validation_messages import describe_problems
        raise ValueError("; ".join("@" + piece for piece in describe_problems(exc, cls.Params))) from None
    except (ValueError, RecursionError):
        raise                       # our own messages (a nested strategy's) and the loader's depth guard
    except BaseException as exc:  # noqa: B036 - a plug-in's Params validators are plug-in code
        raise ValueError(f"@{'plugin' if plugin is not None else 'kind'}: validating the parameters of "
                         f"{name!r} failed ({describe_exception(exc)})") from None
    return StrategySpec(kind=name, cls=cls, params=params)


def kind_or_plugin(raw: Any, kinds: str) -> tuple[dict, Any, Any]:
    """(the mapping's other keys, kind, plugin) of an extension point's mapping that names exactly
    one of `kind` (`kinds` says which) and `plugin`; ValueError("@kind: ...") otherwise."""
    if not isinstance(raw, dict):
        raise ValueError(f"expected a mapping with 'kind' or 'plugin', found {type(raw).__name__}")
    raw = dict(raw)
    kind, plugin = raw.pop("kind", None), raw.pop("plugin", None)
    if (kind is None) == (plugin is None):
        raise ValueError(f"@kind: give exactly one of 'kind' ({kinds}) and 'plugin' (file.py:Class or module:Class)")
    return raw, kind, plugin


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
    except BaseException as exc:  # noqa: B036 - plug-in code: even sys.exit is bad input here
        raise ValueError(f"@kind: loading entry point {ep.name!r} failed ({describe_exception(exc)})") from None


def _class_for_plugin(plugin: Any, base_dir: Path, anywhere: bool, base: type = Strategy) -> type:
    """The class a "file.py:Class" or "module:Class" plug-in names, checked to subclass `base`
    (the strategy contract, or another extension point's base such as the estimators')."""
    if not isinstance(plugin, str) or plugin.count(":") != 1:
        raise ValueError(f"@plugin: expected 'path/to/file.py:ClassName' or 'package.module:ClassName', found {plugin!r}")
    target, _, cls_name = plugin.partition(":")
    if target.endswith(".py"):
        path = Path(target) if Path(target).is_absolute() else base_dir / target
        module = _import_file(path if anywhere else _inside_folder(path, base_dir, plugin), plugin)
    else:
        failed = f"@plugin: cannot import module {target!r}"
        if target not in sys.modules:
            _probe(lambda: importlib.import_module(target), failed)
        try:
            module = _within_budget(lambda: importlib.import_module(target), target)
        except BaseException as exc:  # noqa: B036 - plug-in code: even sys.exit is bad input here
            raise ValueError(f"{failed} ({describe_exception(exc)})") from None
    try:
        cls = getattr(module, cls_name, None)   # a module-level __getattr__ is plug-in code too
        cls = None if cls is None else _checked(cls, plugin, base)
    except ValueError:
        raise
    except BaseException as exc:  # noqa: B036
        raise ValueError(f"@plugin: looking up {cls_name!r} in {target!r} failed ({describe_exception(exc)})") from None
    if cls is None:
        raise ValueError(f"@plugin: {target!r} has no class {cls_name!r}")
    return cls


def _inside_folder(path: Path, base_dir: Path, plugin: str) -> Path:
    """The plug-in file's path; refused when it resolves (through `..` or symlinks) outside the
    scenario's folder, unless the environment allows it."""
    if os.environ.get(ALLOW_OUTSIDE_ENV) == "1" or not path.is_file():
        return path            # a missing file is reported by the import, naming the path
    folder = base_dir.resolve()
    if not path.resolve().is_relative_to(folder):
        raise ValueError(f"@plugin: {plugin!r} resolves to {str(path.resolve())!r}, outside the scenario's "
                         f"folder {str(folder)!r}; plug-ins are programs, so only files in that folder load "
                         f"(allow others with --allow-plugins-outside or {ALLOW_OUTSIDE_ENV}=1)")
    return path


def _import_file(path: Path, plugin: str):
    if not path.is_file():
        raise ValueError(f"@plugin: no such file {str(path)!r}")
    name = "wheelbench_plugin_" + hashlib.sha1(str(path.resolve()).encode()).hexdigest()[:12]
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, path)

    def load():
        module = importlib.util.module_from_spec(spec)
        sys.modules[name] = module
        spec.loader.exec_module(module)
        return module

    failed = f"@plugin: importing {str(path)!r}"
    _probe(load, failed)
    try:
        return _within_budget(load, str(path))
    except BaseException as exc:  # noqa: B036 - plug-in code: even sys.exit is bad input here
        sys.modules.pop(name, None)
        raise ValueError(f"{failed} failed ({describe_exception(exc)})") from None


def _probe(load, failed: str) -> None:
    """Import in a forked child first (`sim.core.isolation.probe_in_child`): a plug-in whose import ends
    its process (os._exit, a crash), raises or hangs, even in compiled code, is refused before it
    runs here. Skipped where fork is unsafe or missing (other threads running, no os.fork); the
    guarded import in this process still catches every exception then."""
    from ..core import isolation
    if not isolation.AVAILABLE or threading.active_count() != 1:
        return

    def work() -> str | None:
        try:
            _within_budget(load, failed)
            return None
        except BaseException as exc:  # noqa: B036 - reported to the parent as text
            return describe_exception(exc)

    state, text = isolation.probe_in_child(work, timeout_s=IMPORT_BUDGET_S + isolation.GRACE_S)
    if state == "failed":
        raise ValueError(f"{failed} failed ({text})")
    if state == "ended":
        raise ValueError(f"{failed} ended its process ({text})")
    if state == "stuck":
        raise ValueError(f"{failed} did not finish within {IMPORT_BUDGET_S:g} s (stuck in compiled code?)")


IMPORT_BUDGET_S = 30.0
"""Wall time, s, a plug-in's import may take before loading gives up (an endless loop at import
time must not hang `validate`; the trial's own budget covers the strategy's calls)."""


def _within_budget(load, what: str):
    """Run `load()` under the strategy clock; a plug-in import past the budget becomes a TimeoutError."""
    from ..core.budget import StrategyClock, StrategyTimeout

    with StrategyClock(IMPORT_BUDGET_S) as clock:
        clock.enter()
        try:
            result = load()
            clock.leave()
        except StrategyTimeout:
            raise TimeoutError(f"gave up after {IMPORT_BUDGET_S:g} s") from None
    return result


def _checked(cls: Any, where: str, base: type = Strategy) -> type:
    if not (isinstance(cls, type) and issubclass(cls, base)):
        raise ValueError(f"@plugin: {where} is not a subclass of {base.__module__.replace('.base', '')}.{base.__name__}")
    return cls
