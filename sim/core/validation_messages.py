"""Messages for scenario problems: one line, every problem, each naming its dotted key path,
what was expected and what was found (house style, "Check input once, at load").

Pydantic's errors are turned into sentences here: unknown keys first with the nearest known key,
union branches folded into the field they belong to, bounds said in SI.
"""

from __future__ import annotations

import difflib
from typing import Any

from pydantic import BaseModel, ValidationError

MAX_PROBLEMS = 8               # problems listed in one message; the rest are counted


def describe_validation_error(exc: ValidationError, model: type[BaseModel] | None = None) -> str:
    """Every problem in one line, joined by "; " (unknown keys first, with the nearest known key):
    each names its dotted key path, what was expected and what was found."""
    problems = describe_problems(exc, model)
    extra = len(problems) - MAX_PROBLEMS
    shown = problems[:MAX_PROBLEMS] + ([f"and {extra} more problem{'s' if extra > 1 else ''}"] if extra > 0 else [])
    return "; ".join(shown)


def describe_problems(exc: ValidationError, model: type[BaseModel] | None = None) -> list[str]:
    """One sentence per problem of `exc`, unknown keys first, each problem once."""
    out: list[str] = []
    errors = sorted(_union_resolved(exc.errors(include_url=False)), key=lambda e: e["type"] != "extra_forbidden")
    for err in errors:
        for piece in _describe_one(err, model):
            if piece not in out:
                out.append(piece)
    return out


_TAG_WORDS = {"str": "a string", "float": "a number", "int": "a whole number", "bool": "true or false",
              "list": "a list", "dict": "a mapping", "none": "nothing"}
_UNION_TAGS = set(_TAG_WORDS) | {"is-instance"}


def _union_tag_at(loc) -> int | None:
    """Index of the last union-branch tag in `loc` (pydantic names branches by type), or None.
    The last, so that a user's key that happens to be a class name ("Drive") is not taken for one."""
    models = None
    for i, part in reversed(list(enumerate(loc))):
        if not isinstance(part, str):
            continue
        if part in _UNION_TAGS or part.startswith(("constrained-", "is-instance[")):
            return i
        if part[:1].isupper() and part.isidentifier():  # a model's class name, not a user's key
            models = models if models is not None else _model_names(BaseModel)
            if part in models:
                return i
    return None


def _model_names(base: type) -> set[str]:
    """Names of every pydantic model class defined so far (the union branches pydantic names)."""
    return {m.__name__ for m in _model_classes(base)}


def _union_resolved(errors: list[dict]) -> list[dict]:
    """Errors with union branches folded: per union key, the branch that got furthest (its errors
    lie deepest) stands for the key, with the branch tag dropped; branches that only disagree
    on the type become one "expected A or B" error."""
    groups: dict[tuple, list[dict]] = {}
    out: list[dict] = []
    for err in errors:
        loc = [x for x in err["loc"] if not (isinstance(x, str) and x.startswith("function-"))]
        i = _union_tag_at(loc)
        if i is None:
            out.append({**err, "loc": tuple(loc)})
        else:
            groups.setdefault(tuple(loc[:i]), []).append({**err, "loc": tuple(loc), "tag_at": i})
    for key, errs in groups.items():
        deepest = max(len(e["loc"]) for e in errs)
        if deepest == len(key) + 1:   # every branch failed on the type itself
            names = [_TAG_WORDS.get(str(e["loc"][-1]), "a mapping") for e in errs]
            out.append({"type": "union_type", "loc": key, "input": errs[0].get("input"),
                        "msg": f"expected {' or '.join(dict.fromkeys(names))}"})
            continue
        for e in errs:
            if len(e["loc"]) == deepest or len(e["loc"]) > len(key) + 1 and _same_branch(e, errs, deepest):
                out.append({**e, "loc": e["loc"][:e["tag_at"]] + e["loc"][e["tag_at"] + 1:]})
    return out


def _same_branch(err: dict, errs: list[dict], deepest: int) -> bool:
    tag = err["loc"][err["tag_at"]]
    return any(e["loc"][e["tag_at"]] == tag and len(e["loc"]) == deepest for e in errs)


def _describe_one(err: dict, model: type[BaseModel] | None) -> list[str]:
    loc = list(err["loc"])
    msg = err["msg"].removeprefix("Value error, ")
    kind = err["type"]
    if msg.startswith("@"):  # a validator named sub-keys: "@key: message; @other: message"
        out = []
        for piece in msg[1:].split("; @"):
            sub, _, text = piece.partition(": ")
            out.append(_describe_text(loc + [sub], text, kind, err, model))
        return out
    return [_describe_text(loc, msg, kind, err, model)]


def _describe_text(loc: list, msg: str, kind: str, err: dict, model) -> str:
    path = format_path(loc)
    if kind == "extra_forbidden":
        return f"{path}: unknown key{_suggest(loc, model)}"
    if kind == "missing":
        return f"{path}: required key is missing"
    if kind == "literal_error":
        return f"{path}: expected {msg.removeprefix('Input should be ')}, found {short_repr(err.get('input'))}"
    found = short_repr(err.get("input"))
    if kind == "union_type":
        return f"{path}: {msg}, found {found}"
    if kind in ("greater_than", "greater_than_equal", "less_than", "less_than_equal"):
        bound = msg.replace('Input should be', 'must be')
        return f"{path}: {bound} (the bound is in SI units; found {found})"
    if kind == "model_type":    # a section given as a scalar or a list: name the keys it takes
        keys = _section_keys((err.get("ctx") or {}).get("class_name"))
        return f"{path}: expected a mapping" + (f" with keys among {', '.join(keys)}" if keys else "") + f", found {found}"
    if kind.endswith(("_type", "_parsing")) or kind.startswith("int_"):
        return f"{path}: {msg.replace('Input should be', 'expected')}, found {found}"
    return f"{path}: {msg}"


def _section_keys(class_name: str | None) -> list[str]:
    """The keys of the scenario section (a pydantic model) named `class_name`, or [] if unknown."""
    found = [m for m in _model_classes(BaseModel) if m.__name__ == class_name]
    return list(found[0].model_fields) if len(found) == 1 else []


def _model_classes(base: type) -> list[type]:
    out: list[type] = []
    for sub in base.__subclasses__():
        out += [sub, *_model_classes(sub)]
    return out


def step_suggestion(rate_hz: float, step_s: float) -> str:
    """What would fit: a step at or below `step_s` that divides the control period (the first
    round one, 3 significant digits, among the 20 largest that do; else the largest), and the two
    loop rates nearest `rate_hz` that the present step divides."""
    import math
    period = 1.0 / rate_hz
    n0 = max(1, math.ceil(period / step_s * (1 - 1e-9)))
    step = None
    for n in range(n0, n0 + 20):
        cand = period / n
        if abs(float(f"{cand:.3g}") - cand) <= 1e-9 * cand:
            step = cand
            break
    step = step if step is not None else period / n0
    k = max(1, round(period / step_s))
    rates = sorted({1.0 / (j * step_s) for j in (k - 1, k, k + 1) if j >= 1}, key=lambda r: abs(r - rate_hz))[:2]
    return (f"a world.step of {step * 1e3:.6g} ms divides it, or use a rate of {' or '.join(f'{r:.6g} Hz' for r in rates)}")


def short_repr(value: Any) -> str:
    """repr() cut to a few items and characters: a message stays one readable line."""
    import reprlib

    r = reprlib.Repr()
    r.maxlevel, r.maxlist, r.maxdict, r.maxstring, r.maxother = 2, 4, 4, 60, 60
    return r.repr(value)


def format_path(loc: list) -> str:
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        elif isinstance(part, str) and part.startswith("["):
            out += part.split(".")[0] + ("." + ".".join(part.split(".")[1:]) if "." in part else "")
        else:
            out += ("." if out else "") + str(part)
    return out or "<top>"


def _suggest(loc: list, model: type[BaseModel] | None) -> str:
    """' (did you mean ...?)' from the known keys at that level of the model."""
    known = _known_keys(loc[:-1], model)
    if not known:
        return ""
    close = difflib.get_close_matches(str(loc[-1]), known, n=1, cutoff=0.5)
    if close:
        return f" (did you mean '{close[0]}'?)"
    return f" (known keys: {', '.join(sorted(known))})"


def _known_keys(loc: list, model: type[BaseModel] | None) -> list[str]:
    import typing
    current: Any = model
    for part in loc:
        if isinstance(part, int) or current is None:
            continue
        if not (isinstance(current, type) and issubclass(current, BaseModel)):
            return []
        field = current.model_fields.get(part)
        if field is None:
            return []
        current = _model_in(field.annotation, typing)
    if isinstance(current, type) and issubclass(current, BaseModel):
        return [k for k in current.model_fields if k != "source"]
    return []


def _model_in(annotation: Any, typing) -> Any:
    """The BaseModel class inside an annotation such as `list[Part]` or `Friction | None`."""
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    for arg in typing.get_args(annotation):
        found = _model_in(arg, typing)
        if found is not None:
            return found
    return None
