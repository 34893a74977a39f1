"""Scenario files read: YAML parsed safely, overrides applied, then one validation pass.

The reader is PyYAML's safe loader with YAML 1.2 numbers (`sim.core.yaml12`), a size cap on the
file, caps on aliases and on the nodes once aliases are expanded, and no repeated keys. Every
problem becomes a ScenarioError naming the file (and the line and column when YAML knows them).
`load_raw` gives the raw mapping that sweeps and Monte Carlo perturb; `load_scenario` the frozen
Scenario (`sim.model.scenario`, the schema, validates it).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import yaml

from ..core.errors import ScenarioError
from ..core.yaml12 import Yaml12Loader
from .scenario import Scenario, validate_scenario

MAX_FILE_BYTES = 1_000_000
MAX_ALIASES = 100
MAX_NODES = 100_000            # YAML nodes after aliases are expanded; a scenario has a few hundred


class _GuardedLoader(Yaml12Loader):
    """PyYAML's safe loader reading numbers as YAML 1.2 does (`sim.core.yaml12`), with caps on aliases
    and on the nodes the document holds once every alias is expanded (a small file must not expand
    into a huge one: 22 aliases that each repeat the one before twice make 4 million nodes), and no
    recursive aliases."""

    def construct_document(self, node):
        _check_expanded_size(node)
        return super().construct_document(node)

    def compose_node(self, parent, index):
        if self.check_event(yaml.AliasEvent):
            self._aliases = getattr(self, "_aliases", 0) + 1
            if self._aliases > MAX_ALIASES:
                raise yaml.YAMLError(f"more than {MAX_ALIASES} aliases")
        return super().compose_node(parent, index)

    def construct_mapping(self, node, deep=False):
        # YAML forbids repeated keys; PyYAML keeps the last silently, hiding a typo'd edit
        seen = set()
        for key_node, _ in node.value:
            key = key_node.value if isinstance(key_node, yaml.ScalarNode) else None
            if key in seen and key != "<<":
                raise yaml.MarkedYAMLError(problem=f"duplicate key {key!r}", problem_mark=key_node.start_mark)
            if key is not None:
                seen.add(key)
        return super().construct_mapping(node, deep=deep)


def _check_expanded_size(root) -> None:
    """Count `root`'s nodes as they are after alias expansion (a shared node counts once per
    reference), without expanding anything; raise a YAMLError past MAX_NODES or on a cycle."""
    sizes: dict[int, int] = {}
    open_: set[int] = set()

    def size(node) -> int:
        key = id(node)
        if key in sizes:
            return sizes[key]
        if key in open_:
            raise yaml.MarkedYAMLError(problem="an alias refers to a node that contains it (a recursive structure)",
                                       problem_mark=node.start_mark)
        total = 1
        if isinstance(node, (yaml.SequenceNode, yaml.MappingNode)):
            open_.add(key)
            items = node.value if isinstance(node, yaml.SequenceNode) else [n for pair in node.value for n in pair]
            for child in items:
                total += size(child)
                if total > MAX_NODES:
                    raise yaml.MarkedYAMLError(problem=f"more than {MAX_NODES:,} values once its aliases are "
                                               "expanded", problem_mark=node.start_mark)
            open_.discard(key)
        sizes[key] = total
        return total

    size(root)


def read_yaml(path: Path) -> Any:
    """Parse a YAML file safely. Raises ScenarioError naming the file on any problem."""
    from ..core.textfiles import read_text_file
    text = read_text_file(path, max_bytes=MAX_FILE_BYTES, what="a scenario", error=ScenarioError)
    return parse_yaml_text(text, where=str(path))


def parse_yaml_text(text: str, *, where: str) -> Any:
    try:
        return yaml.load(text, Loader=_GuardedLoader)  # noqa: S506 - a SafeLoader subclass
    except yaml.constructor.ConstructorError as exc:
        problem = str(getattr(exc, "problem", "") or "")
        if "unhashable key" in problem:  # a list or mapping used as a key: `? [a, b]` or `{[1]: x}`
            mark = exc.problem_mark or exc.context_mark
            at = f"at line {mark.line + 1}, column {mark.column + 1}: " if mark is not None else ""
            raise ScenarioError(f"{where}: {at}a key must be a plain word or number, found a list or mapping "
                                "used as a key") from None
        if "constructor for the tag" not in problem:
            raise ScenarioError(f"{where}: YAML error {_yaml_where(exc)}") from None
        raise ScenarioError(f"{where}: YAML tags that construct objects are not allowed ({_yaml_where(exc)})") from None
    except yaml.YAMLError as exc:
        raise ScenarioError(f"{where}: YAML syntax error {_yaml_where(exc)}".rstrip()) from None
    except RecursionError:
        raise ScenarioError(f"{where}: YAML nested too deeply") from None


def _yaml_where(exc: yaml.YAMLError) -> str:
    mark = getattr(exc, "problem_mark", None)
    problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
    if mark is not None:
        return f"at line {mark.line + 1}, column {mark.column + 1}: {problem}"
    return str(problem)


def load_scenario(path: str | Path | None = None, *, overrides: tuple[str, ...] | list[str] = (),
                  data: dict | None = None) -> Scenario:
    """Load, override and validate a scenario.

    Parameters
    ----------
    path : file to read; None means the bundled default demo (unless `data` is given).
    overrides : "key.path=value" strings, applied to the raw mapping before validation.
    data : an already-parsed mapping (then `path` only names it in messages).
    """
    raw, where = load_raw(path, overrides, data=data)
    return validate_loaded(raw, where=where)


def validate_loaded(raw: dict, *, where: str) -> Scenario:
    """`validate_scenario` plus the checks made once per load, not per perturbed copy: each
    tolerance's band ends must give valid scenarios (`sim.model.tolerances.check_band_ends`)."""
    sc = validate_scenario(raw, where=where)
    from .tolerances import check_band_ends
    check_band_ends(raw, sc, where=where, validate=lambda trial: validate_scenario(trial, where=where))
    return sc


def load_raw(path: str | Path | None = None, overrides=(), *, data: dict | None = None) -> tuple[dict, str]:
    """Read a scenario file (or the bundled default) and apply overrides: (raw mapping, where).

    The raw mapping is what sweeps and Monte Carlo perturb and validate again per trial.
    """
    if path is None and data is None:
        path = default_scenario_path()
    where = str(path) if path is not None else "<scenario>"
    raw = read_yaml(Path(path)) if data is None else data
    if raw is None:
        raise ScenarioError(f"{where}: the file is empty")
    if not isinstance(raw, dict):
        raise ScenarioError(f"{where}: expected a mapping of scenario keys at the top, found {type(raw).__name__}")
    from .overrides import apply_overrides
    notes: list[str] = []
    out = apply_overrides(raw, tuple(overrides or ()), where=where, notes=notes)
    if notes:  # said only when the result is valid: bad input still gets exactly one line
        validate_loaded(out, where=where)
        import sys
        for note in notes:
            print(note, file=sys.stderr)
    return out, where


def default_scenario_path() -> Path:
    return Path(__file__).parent / "data" / "desk_pendulum.yaml"
