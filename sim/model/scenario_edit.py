"""Patching a scenario file as its author wrote it: comments, key order and layout kept.

`apply_patches` merges patch mappings (a fit's patch.yaml, a tune's best_patch.yaml, a user's own)
into a scenario file with ruamel.yaml's round-trip mode, so the comments and the order of keys
survive. It also does what a merge by hand gets wrong:

- list items: a patch key `wheels[1]` merges its mapping into item 1 (from 0) of the scenario's
  `wheels` list, so a fit of one wheel changes that wheel's keys only (a list given whole under
  a plain key still replaces the list);
- replaced keys: a scenario gives a motor's `speed_constant` (Kv) or its `back_emf_constant`
  (k_e), never both; a patch that sets one removes the other, in the same place in the file, and
  moves its `tolerances` entry to the new key (a relative band carries over unchanged, since
  k_e = 1/Kv to first order has the same relative spread; an absolute band is dropped with a
  note, since its unit no longer fits);
- plug-in paths: a `plugin: "laws.py:Class"` relative to the scenario's folder is rewritten
  relative to the folder of the file being written, so the new file finds the same code; so are
  a firmware strategy's `sources` and `include` (`tune`'s best_scenario.yaml lies in its output
  folder, not beside the firmware);
- the merged text is validated as the file it will be (from its own folder) before anything is
  written, and written atomically (`sim.core.outputs`).

The input file is first read with the guarded loader every scenario goes through, so nothing the
loader refuses (object tags, alias bombs, duplicate keys) reaches the round-trip parser.
"""

from __future__ import annotations

import io
import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

from ..core.errors import InputError, ScenarioError

# the last two keys of a path -> the two it replaces (a scenario gives exactly one of each pair), for
# the shared motor and a wheel's own (`wheels[1].motor`) alike
REPLACED_KEYS = {
    ("motor", "back_emf_constant"): ("motor", "speed_constant"),
    ("motor", "speed_constant"): ("motor", "back_emf_constant"),
}


@dataclass
class EditResult:
    """The patched scenario's text and what the merge did beyond setting values."""
    text: str
    notes: list[str] = field(default_factory=list)


def _round_trip(text: str = ""):
    """A round-trip YAML reader/writer whose block indentation follows `text`'s own."""
    from ruamel.yaml import YAML
    from ruamel.yaml.util import load_yaml_guess_indent
    yaml = YAML(typ="rt")
    yaml.preserve_quotes = True
    yaml.width = 4096
    if text:
        _, seq, offset = load_yaml_guess_indent(text)
        keys = [len(m.group(1)) for m in re.finditer(r"^( +)[A-Za-z_][\w.]*\s*:", text, re.M)]
        yaml.indent(mapping=min(keys) if keys else 2, sequence=seq or 2, offset=offset or 0)
    return yaml


def _take_place(node, old, new, value) -> None:
    """Put `new: value` where `old` stood in the round-trip mapping `node`, with `old`'s comment."""
    pos = list(node.keys()).index(old)
    comment = node.ca.items.pop(old, None)
    del node[old]
    node.insert(pos, new, value)
    if comment is not None:
        node.ca.items[new] = comment


def plain_value(value, *, exact: bool = False):
    """A patch value as it should appear in YAML: Python floats at 7 significant digits, numpy
    scalars as Python numbers, mappings and lists recursively. The values of a firmware's
    `defines` stay exact (`exact`): a define's text is part of the build, so a rounded one would
    compile another firmware than the one that was judged."""
    if isinstance(value, dict):
        return {str(k): plain_value(v, exact=exact or k == "defines") for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [plain_value(v, exact=exact) for v in value]
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()
    if isinstance(value, float) and math.isfinite(value) and not exact:
        return float(f"{value:.7g}") + 0.0   # + 0.0: no "-0.0" in a file a person reads
    return value


def apply_patches(scenario_path: str | Path, patches: list[dict], *, dest: str | Path,
                  patch_names: list[str] | None = None) -> EditResult:
    """Merge `patches` (in order) into the scenario file; return the text to write at `dest`.

    Raises ScenarioError (naming the file and key) when the input or the merged scenario is
    invalid. Nothing is written here.
    """
    from .scenario import validate_scenario
    from .scenario_yaml import read_yaml, parse_yaml_text

    src = Path(scenario_path)
    read_yaml(src)                                  # the guarded loader's checks, once
    source_text = src.read_text(encoding="utf-8")
    doc = _round_trip(source_text).load(source_text)
    if doc is None or not hasattr(doc, "items"):
        raise ScenarioError(f"{src}: expected a mapping of scenario keys at the top level")
    notes: list[str] = []
    names = patch_names or [f"patch {i + 1}" for i in range(len(patches))]
    for patch, name in zip(patches, names):
        if not isinstance(patch, dict):
            raise InputError(f"{name}: expected a mapping of scenario keys, found {type(patch).__name__}")
        _merge(doc, doc, plain_value(patch), (), notes, name=name)
    dest = Path(dest)
    _rewrite_plugin_paths(doc, src.parent.resolve(), dest.parent.resolve(), notes)
    buf = io.StringIO()
    _round_trip(source_text).dump(doc, buf)
    text = buf.getvalue()
    # where a plug-in lies is said in a note (see _rewrite_plugin_paths), not refused here
    validate_scenario(parse_yaml_text(text, where=str(dest)), where=str(dest), plugins_anywhere=True)
    return EditResult(text=text, notes=notes)


_ITEM_KEY = re.compile(r"([A-Za-z_]\w*)\[(\d{1,6})\]")


def _merge(root, node, patch: dict, path: tuple, notes: list[str], *, name: str = "the patch") -> None:
    """Merge `patch` into the round-trip mapping `node` of document `root` (in place), keeping
    comments and order. `name`: the patch, for messages."""
    from ruamel.yaml.comments import CommentedMap

    for key, value in patch.items():
        here = path + (key,)
        item = _ITEM_KEY.fullmatch(key) if isinstance(key, str) else None
        if item is not None:
            _merge(root, _list_item(node, item, value, here, name), value, here, notes, name=name)
            continue
        if isinstance(value, dict) and isinstance(node.get(key), dict):
            _merge(root, node[key], value, here, notes, name=name)
            continue
        replaced = REPLACED_KEYS.get(here[-2:])
        if replaced is not None and replaced[-1] in node and key not in node:
            old = here[:-2] + replaced
            _take_place(node, replaced[-1], key, value)
            notes.append(f"{'.'.join(here)} replaces {'.'.join(old)} (a scenario gives one of the two)")
            _move_tolerance(root, old, here, notes)
            continue
        node[key] = CommentedMap(value) if isinstance(value, dict) else value


def _list_item(node, item, value, here: tuple, name: str):
    """The mapping a `key[i]` patch key addresses; InputError (one line) when there is none."""
    key, index = item.group(1), int(item.group(2))
    seq = node.get(key) if hasattr(node, "get") else None
    shown = ".".join(here)
    if not isinstance(seq, list):
        raise InputError(f"{name}: key {shown}: the scenario has no list {'.'.join(here[:-1] + (key,))}")
    if index >= len(seq):
        raise InputError(f"{name}: key {shown}: {key} has {len(seq)} item{'s' if len(seq) != 1 else ''} "
                         f"(numbered from 0)")
    if not isinstance(value, dict) or not isinstance(seq[index], dict):
        raise InputError(f"{name}: key {shown}: expected a mapping of keys to merge into that item")
    return seq[index]


def _move_tolerance(root, old: tuple, new: tuple, notes: list[str]) -> None:
    tols = root.get("tolerances") if hasattr(root, "get") else None
    old_key, new_key = ".".join(old), ".".join(new)
    if not hasattr(tols, "keys") or old_key not in tols:
        return
    band = tols[old_key]
    if isinstance(band, str) and band.strip().endswith("%"):
        _take_place(tols, old_key, new_key, band)
        notes.append(f"tolerances.{old_key} ({band}) now applies to {new_key}")
    else:
        del tols[old_key]
        notes.append(f"tolerances.{old_key} ({band}) was dropped: an absolute band in the old key's unit "
                     f"does not fit {new_key}; give a band for {new_key} if you want one")


def _rewrite_plugin_paths(node, src_dir: Path, dest_dir: Path, notes: list[str], path: tuple = ()) -> None:
    """Rewrite every `plugin: "file.py:Class"` relative to `src_dir` so it resolves from `dest_dir`."""
    if hasattr(node, "items"):
        for key, value in list(node.items()):
            if key == "plugin" and isinstance(value, str):
                target, sep, cls = value.partition(":")
                if target.endswith(".py") and not Path(target).is_absolute() and src_dir != dest_dir:
                    new = Path(os.path.relpath(src_dir / target, dest_dir)).as_posix()
                    node[key] = f"{new}{sep}{cls}"
                    outside = new.startswith("../")
                    notes.append(f"{'.'.join(path + (key,))}: {value!r} rewritten as {node[key]!r} "
                                 f"(relative to the new file's folder)"
                                 + ("; it lies outside that folder, so loading the new file needs "
                                    "`wheelbench --allow-plugins-outside ...` (or WHEELBENCH_ALLOW_PLUGINS_OUTSIDE=1), "
                                    "or a copy of the plug-in beside it" if outside else ""))
            elif key in FIRMWARE_PATHS and node.get("kind") == "firmware" and isinstance(value, list):
                _rewrite_firmware_paths(value, src_dir, dest_dir)
            else:
                _rewrite_plugin_paths(value, src_dir, dest_dir, notes, path + (key,))
    elif isinstance(node, list):
        for i, item in enumerate(node):
            _rewrite_plugin_paths(item, src_dir, dest_dir, notes, path + (f"[{i}]",))


FIRMWARE_PATHS = ("sources", "include")   # a firmware strategy's paths, relative to the scenario file


def _rewrite_firmware_paths(items: list, src_dir: Path, dest_dir: Path) -> None:
    """Each relative path in a firmware strategy's `sources` or `include`, rewritten in place to
    resolve from `dest_dir` (the firmware may lie anywhere: no note needed)."""
    if src_dir == dest_dir:
        return
    for i, item in enumerate(items):
        if isinstance(item, str) and not Path(item).is_absolute():
            items[i] = Path(os.path.relpath(src_dir / item, dest_dir)).as_posix()


def read_patch(path: str | Path) -> dict:
    """A patch file: a YAML mapping of scenario keys (read with the guarded loader)."""
    from .scenario_yaml import read_yaml
    data = read_yaml(Path(path))
    if data is None:
        return {}
    if not isinstance(data, dict):
        raise InputError(f"{path}: expected a mapping of scenario keys, found {type(data).__name__}")
    return data


def apply_command(scenario_path: Path, patch_paths: list[Path], *, out: Path | None, in_place: bool,
                  force: bool) -> tuple[EditResult, Path | None]:
    """`wheelbench apply`: merge patch files into a scenario; write `out`, the scenario itself
    (`in_place`) or nothing (the caller prints the text). Returns (result, path written or None)."""
    from ..core.outputs import write_text

    if out is not None and in_place:
        raise InputError("--out and --in-place: give one of the two")
    if not Path(scenario_path).is_file():
        raise InputError(f"{scenario_path}: no such scenario file")
    dest = Path(scenario_path) if in_place else (Path(out) if out is not None else Path(scenario_path))
    if out is not None:
        if out.exists() and (out.is_dir() or not force):
            raise InputError(f"--out {out}: " + ("is a folder" if out.is_dir() else
                                                  "exists already (give --force to replace it)"))
        if not out.parent.is_dir():
            raise InputError(f"--out {out}: folder {out.parent} does not exist")
    patches = [read_patch(p) for p in patch_paths]
    result = apply_patches(scenario_path, patches, dest=dest, patch_names=[str(p) for p in patch_paths])
    if out is None and not in_place:
        return result, None
    write_text(dest, result.text)
    return result, dest
