"""A strategy's `extra_metrics`, made safe for metrics.json after its trial.

Whatever a strategy leaves in `extra_metrics` is strategy data: reading it may run strategy code
(a property, a container's methods), so it is read under the strategy's clock, and only exact
built-in JSON types (and numpy scalars) are kept. What is left out is named under
EXTRA_METRICS_DROPPED. Used by the trial runner (`sim.run.trial`) at the end of every trial.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from ..core import isolation
from ..core.budget import StrategyClock, StrategyTimeout
from ..core.exception_text import describe_exception

EXTRA_METRICS_DROPPED = "extra_metrics_dropped"
"""The key that says what of a strategy's `extra_metrics` was left out, and why."""

MAX_EXTRA_TEXT = 1000
"""Longest text value, characters, kept from a strategy's `extra_metrics`."""


def settle_extra_metrics(result, clock: StrategyClock):
    """Replace the strategy's `extra_metrics` with a plain dict of JSON values (`clean_extra_metrics`),
    read under the strategy's clock (reading it may run strategy code). A strategy whose attribute
    cannot be replaced is swapped for an `isolation.StrategyRecord` of itself. `result` is a
    `sim.run.trial.TrialResult`; the result, or a copy with the strategy swapped, is returned."""
    strategy = result.strategy
    if strategy is None:
        return result
    late = {EXTRA_METRICS_DROPPED: "extra_metrics could not be read within the strategy's time"}
    clean, settled = clock.after(lambda: _read_extra_metrics(strategy, clock), (late, False))
    if settled or clean is None:
        return result
    record = clock.after(lambda: isolation.unpack_strategy(isolation.pack_strategy(strategy), device=result.device),
                         None)
    if record is None:  # not even its attributes could be read in time: what the scenario says
        record = isolation.record_from_spec(result.scenario.strategy, device=result.device,
                                            saturated_ticks=result.saturated_ticks)
    record.extra_metrics = clean
    return replace(result, strategy=record)


def _read_extra_metrics(strategy, clock: StrategyClock) -> tuple[dict | None, bool]:
    """(the cleaned extra metrics or None when there are none, whether the strategy now holds them)."""
    try:
        raw = getattr(strategy, "extra_metrics", None)
        clean = None if raw is None else clean_extra_metrics(raw)
    except BaseException as exc:  # noqa: B036 - a property or container of the strategy's raised
        _reraise_ours(exc, clock)
        clean = {EXTRA_METRICS_DROPPED: f"extra_metrics could not be read ({describe_exception(exc)})"}
    if clean is None:
        return None, True
    try:
        strategy.extra_metrics = clean
        return clean, strategy.extra_metrics is clean
    except BaseException as exc:  # noqa: B036 - a read-only or hostile attribute
        _reraise_ours(exc, clock)
        return clean, False


def _reraise_ours(exc: BaseException, clock: StrategyClock) -> None:
    """Raise `exc` again when it is not the strategy's: the clock's timeout or the user's Ctrl-C."""
    if isinstance(exc, StrategyTimeout) or (isinstance(exc, KeyboardInterrupt) and clock.user_interrupt):
        raise exc


def clean_extra_metrics(raw) -> dict:
    """A strategy's `extra_metrics` as metrics.json can hold it: a dict with text keys whose values
    are None, booleans, numbers, text (up to MAX_EXTRA_TEXT characters) or lists and dicts of those.
    Whatever else is left out, and EXTRA_METRICS_DROPPED says what and why."""
    if not isinstance(raw, dict):
        return {EXTRA_METRICS_DROPPED: f"extra_metrics must be a dict, found {type(raw).__name__}"}
    clean, dropped = {}, []
    for key, value in list(dict.items(raw))[:1000]:
        value = _json_value(value, depth=0) if type(key) is str else _DROP
        if value is _DROP:
            dropped.append(key if type(key) is str else f"a {type(key).__name__} key")
        else:
            clean[key] = value
    if len(raw) > 1000:
        dropped.append(f"{len(raw) - 1000} keys past the first 1000")
    if dropped:
        shown = ", ".join(repr(d) for d in dropped[:10]) + (", ..." if len(dropped) > 10 else "")
        clean[EXTRA_METRICS_DROPPED] = f"left out (not JSON numbers, text, lists or dicts): {shown}"
    return clean


_DROP = object()


def _json_value(value, *, depth: int):
    """`value` as plain JSON data, or _DROP. Only exact built-in types (and numpy scalars) pass, so
    no strategy code runs while checking."""
    if isinstance(value, np.generic) and value.dtype.kind in "biuf":
        value = value.item()
    if value is None or type(value) is bool:
        return value
    if type(value) is int:
        return value if -2**63 <= value < 2**64 else _DROP
    if type(value) is float:
        return value
    if type(value) is str:
        return value if len(value) <= MAX_EXTRA_TEXT else _DROP
    if depth < 3 and type(value) in (list, tuple) and len(value) <= 1000:
        items = [_json_value(v, depth=depth + 1) for v in value]
        return _DROP if any(v is _DROP for v in items) else items
    if depth < 3 and type(value) is dict and len(value) <= 1000:
        items = {k: _json_value(v, depth=depth + 1) for k, v in dict.items(value)}
        if any(type(k) is not str or v is _DROP for k, v in items.items()):
            return _DROP
        return items
    return _DROP
