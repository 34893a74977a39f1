"""The package layout: every module imports, imports flow downward across the layers, no cycles.

The layers of `sim/`, bottom to top, and what each may import (besides itself and the standard
library and third-party packages); the table is ours (DEVELOPERS.md, "Package layout"):

    core        nothing of sim's
    strategies  core
    model       core, strategies
    physics     core, model
    media       core, model, physics
    run         core, strategies, model, physics, media
    studies     core, strategies, model, physics, media, run
    fit         core, model, media, run
    cli         everything

The strategies sit below the model because a scenario holds a strategy spec (the scenario's
validator calls the registry); the laws themselves read only their readings and the device
figures passed to them. Media (plots, scene, panel, clip writer) draw what they are given, so the
run layer and the studies may use them.

Every `from ..x import` / `from .x import` / `from sim.x import` / `import sim.x` is read with
ast, at module level and inside functions (a lazy import is still a dependency), and checked
against the table. Cycles are looked for among all of them too: a lazy import that closes a circle
only hides it (today's layout has none, so none may come back).
"""

from __future__ import annotations

import ast
import importlib
import pathlib

import pytest

import sim

SIM = pathlib.Path(sim.__file__).parent

ALLOWED = {
    "core": set(),
    "strategies": {"core"},
    "model": {"core", "strategies"},
    "physics": {"core", "model"},
    "media": {"core", "model", "physics"},
    "run": {"core", "strategies", "model", "physics", "media"},
    "studies": {"core", "strategies", "model", "physics", "media", "run"},
    "fit": {"core", "model", "media", "run"},
    "cli": {"core", "strategies", "model", "physics", "media", "run", "studies", "fit"},
}


def _module_names() -> list[str]:
    names = []
    for path in sorted(SIM.rglob("*.py")):
        parts = list(path.relative_to(SIM.parent).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts.pop()
        names.append(".".join(parts))
    return names


MODULES = _module_names()
TOP = ("cli", "cli_print")   # the top layer: the commands and what they print, beside sim/__init__.py


def _path_of(name: str) -> pathlib.Path:
    base = SIM.parent.joinpath(*name.split("."))
    return base / "__init__.py" if base.is_dir() else base.with_suffix(".py")


def _layer(name: str) -> str | None:
    """'sim.run.trial' -> 'run'; 'sim.cli' and its terminal output 'sim.cli_print' -> 'cli'; 'sim' itself has no layer."""
    parts = name.split(".")
    if len(parts) < 2:
        return None
    return "cli" if parts[1] in TOP else parts[1]


def _target(name: str, node: ast.ImportFrom) -> list[str]:
    """The sim modules a `from ... import ...` names (a package's submodules count as modules)."""
    if node.level == 0:
        base = node.module or ""
    else:
        package = name if _path_of(name).name == "__init__.py" else name.rsplit(".", 1)[0]
        parts = package.split(".")
        parts = parts[: len(parts) - (node.level - 1)]
        base = ".".join(parts + ([node.module] if node.module else []))
    if base != "sim" and not base.startswith("sim."):
        return []
    found = []
    for alias in node.names:
        sub = f"{base}.{alias.name}"
        found.append(sub if sub in MODULES else base)
    return found


def _imports(name: str) -> list[str]:
    """The sim modules that module `name` imports, at module level or inside functions."""
    path = _path_of(name)
    out = []
    for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
        if isinstance(node, ast.ImportFrom):
            out += _target(name, node)
        elif isinstance(node, ast.Import):
            out += [a.name for a in node.names if a.name.startswith("sim.")]
    return out


def test_the_layer_table_itself_has_no_cycle():
    # A layer may not reach itself through the table (otherwise "downward" means nothing).
    def reach(layer, seen):
        for below in ALLOWED[layer]:
            if below not in seen:
                seen.add(below)
                reach(below, seen)
        return seen
    for layer in ALLOWED:
        assert layer not in reach(layer, set()), layer


def test_every_module_sits_in_a_layer():
    # sim/__init__.py, the entry point sim/cli.py and its printing aside, each module lives in a layer folder.
    layers = {_layer(m) for m in MODULES if m not in ("sim", *(f"sim.{top}" for top in TOP))}
    assert layers <= set(ALLOWED) - {"cli"}, layers - set(ALLOWED)


@pytest.mark.parametrize("name", MODULES)
def test_every_module_imports(name):
    importlib.import_module(name)


@pytest.mark.parametrize("name", MODULES)
def test_imports_flow_downward(name):
    here = _layer(name)
    wrong = []
    for target in _imports(name):
        assert target in MODULES or target == "sim", f"{name} imports {target}, which does not exist"
        there = _layer(target)
        if here is None or there is None or there == here:
            continue
        if there not in ALLOWED[here]:
            wrong.append(f"{name} -> {target}")
    assert not wrong, "imports flowing upward or sideways across layers: " + ", ".join(wrong)


def test_no_import_cycles_among_modules():
    graph = {m: sorted({t for t in _imports(m) if t != m and t != "sim"}) for m in MODULES}
    state: dict[str, int] = {}
    path: list[str] = []

    def visit(m):
        state[m] = 1
        path.append(m)
        for t in graph[m]:
            if state.get(t) == 1:
                raise AssertionError("import cycle: " + " -> ".join(path[path.index(t):] + [t]))
            if t not in state:
                visit(t)
        path.pop()
        state[m] = 2

    for m in MODULES:
        if m not in state:
            visit(m)


def test_the_checker_sees_a_lazy_upward_import():
    # The checker must not be blind: a function-level `from ..run.trial import x` in a core module
    # is read as core -> run, which the table forbids.
    tree = ast.parse("def f():\n    from ..run.trial import run_trial\n")
    node = tree.body[0].body[0]
    assert _target("sim.core.units", node) == ["sim.run.trial"]
    assert "run" not in ALLOWED["core"]


def test_the_public_paths_stay():
    # Plug-ins import the contract from the package itself, and the console script names
    # sim.cli:entry (pyproject.toml); both must survive the layout.
    from importlib.metadata import entry_points

    from sim.strategies import Reading, Strategy, StrategyParams
    from sim.strategies.base import Reading as R, Strategy as S, StrategyParams as P
    assert (Strategy, Reading, StrategyParams) == (S, R, P)
    scripts = {e.name: e.value for e in entry_points(group="console_scripts") if e.name == "wheelbench"}
    assert scripts == {"wheelbench": "sim.cli:entry"}
    assert callable(importlib.import_module("sim.cli").entry)


def test_the_bundled_scenario_and_header_are_where_the_code_looks():
    # package data moved with their layers (pyproject.toml package-data); the demo link follows
    from sim.model.scenario_yaml import default_scenario_path
    from sim.strategies.firmware import HEADER
    assert default_scenario_path().is_file() and HEADER.is_file()
    link = SIM.parent / "scenarios" / "desk_pendulum.yaml"
    if link.exists():   # a source checkout, not an installed wheel
        assert link.resolve() == default_scenario_path().resolve()
