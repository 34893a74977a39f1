"""A PyYAML safe loader that reads plain scalars as YAML 1.2's core schema does.

PyYAML implements YAML 1.1, whose implicit types silently change values a user typed:
`012` is octal 10, `1:30` is base-60 90, `1_2` is 12, `0b1100` is 12, `yes`/`on` are true and
`2001-12-14` is a date. YAML 1.2 (core schema, yaml.org/spec/1.2.2 section 10.3) reads:
- integers: `[-+]?[0-9]+` (decimal, so `012` is 12), `0o[0-7]+` (octal), `0x[0-9a-fA-F]+` (hex);
- floats: `[-+]?(\\.[0-9]+|[0-9]+(\\.[0-9]*)?)([eE][-+]?[0-9]+)?`, `.inf`, `-.inf`, `.nan`;
- booleans `true`/`false` (three spellings each), null `null`/`~`/empty;
- everything else as a string, which the scenario's validation then checks ("1:30" as a
  voltage is refused with a message naming the key).
Merge keys (`<<`) are kept: scenarios use them with anchors.

A decimal integer with more digits than Python converts (4,300 by default) stays the string
of its digits, so the validation of its key reports it in one line.
"""

from __future__ import annotations

import re
import sys

import yaml

_RESOLVERS = [
    ("tag:yaml.org,2002:bool", r"^(?:true|True|TRUE|false|False|FALSE)$", "tTfF"),
    ("tag:yaml.org,2002:null", r"^(?:~|null|Null|NULL|)$", ["~", "n", "N", ""]),
    ("tag:yaml.org,2002:int", r"^(?:[-+]?[0-9]+|0o[0-7]+|0x[0-9a-fA-F]+)$", "-+0123456789"),
    ("tag:yaml.org,2002:float",
     r"^(?:[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)?|[-+]?\.(?:inf|Inf|INF)|\.(?:nan|NaN|NAN))$",
     "-+.0123456789"),
    ("tag:yaml.org,2002:merge", r"^(?:<<)$", "<"),
]


def _max_digits() -> int:
    get = getattr(sys, "get_int_max_str_digits", None)
    return get() if get is not None and get() > 0 else 4300


class Yaml12Loader(yaml.SafeLoader):
    """SafeLoader with YAML 1.2 core-schema implicit types (see the module docstring)."""

    yaml_implicit_resolvers: dict = {}

    def construct_yaml_int(self, node):
        text = str(self.construct_scalar(node))
        if text.startswith("0o"):
            return int(text[2:], 8)
        if text.startswith("0x"):
            return int(text[2:], 16)
        if not re.fullmatch(r"[-+]?[0-9]+", text):
            raise yaml.constructor.ConstructorError(None, None, f"not a YAML 1.2 integer: {text[:40]!r}",
                                                    node.start_mark)
        if len(text.lstrip("+-")) > _max_digits():
            return text  # too long for int(); the key's validation refuses it in one line
        return int(text, 10)

    def construct_yaml_bool(self, node):
        return str(self.construct_scalar(node)).lower() == "true"

    def construct_yaml_float(self, node):
        text = str(self.construct_scalar(node)).lower()
        if text.lstrip("+-") == ".inf":
            return float("-inf") if text.startswith("-") else float("inf")
        if text == ".nan":
            return float("nan")
        try:
            return float(text)
        except ValueError:
            raise yaml.constructor.ConstructorError(None, None, f"not a YAML 1.2 float: {text[:40]!r}",
                                                    node.start_mark) from None


for _tag, _pattern, _first in _RESOLVERS:
    Yaml12Loader.add_implicit_resolver(_tag, re.compile(_pattern), list(_first))
Yaml12Loader.add_constructor("tag:yaml.org,2002:int", Yaml12Loader.construct_yaml_int)
Yaml12Loader.add_constructor("tag:yaml.org,2002:bool", Yaml12Loader.construct_yaml_bool)
Yaml12Loader.add_constructor("tag:yaml.org,2002:float", Yaml12Loader.construct_yaml_float)


def load_yaml12(text: str):
    """Parse `text` with `Yaml12Loader` (raises yaml.YAMLError on bad YAML)."""
    return yaml.load(text, Loader=Yaml12Loader)  # noqa: S506 - a SafeLoader subclass
