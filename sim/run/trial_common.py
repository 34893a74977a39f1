"""What the planar and the 3D trial runners share: the result type, building the strategy, describing its
failures, closing the trace and the final outcome (`sim.run.trial`, `sim.run.trial3d`)."""

from __future__ import annotations

import copy
from dataclasses import dataclass, field

import numpy as np

from ..core.exception_text import describe_exception, exception_parts
from .extra_metrics import settle_extra_metrics


@dataclass
class TrialResult:
    """What a trial produced. `outcome` is one of OUTCOMES; `message` explains failures.

    `ended_at_s` is where simulated time stopped: the full duration, or the time of the step
    at which the run diverged, the strategy failed or (with stop_early) the body fell.
    """

    outcome: str
    message: str | None
    trace: object                       # sim.run.trace.Trace (planar) or sim.run.trace3d.Trace3D
    device: object                      # sim.model.device.Device or sim.model.device3d.Device3D
    scenario: object
    caught_at_s: float | None
    fell_at_s: float | None
    ended_at_s: float
    control_ticks: int
    saturated_ticks: int
    wall_s: float
    strategy: object = None
    events: list = field(default_factory=list)
    cause: str | None = None            # why a trial that is not balanced/completed ended so (sim.run.causes)
    cause_detail: str | None = None     # one sentence with the figures behind `cause`
    power: dict | None = None           # the power chain's summary (`PowerChain.summary`), None without one
    loop_overruns: int | None = None    # with a `timing` section: ticks skipped or commands dropped


def close_trace(trace, *, outcome, k: int, n: int, dt: float, fell_k) -> float:
    """Set the trace's filled rows and times for a loop that stopped at step `k` of `n`; returns
    the simulated time at which the trial ended, s. A failure's row k holds the state at the
    failure (nothing was applied after it) and time ends there; a fall ends at the fall."""
    if outcome in ("diverged", "strategy_failed") and k < n:
        trace.n, ended = k + 1, k * dt
    elif outcome == "fell":
        trace.n, ended = k, (fell_k if fell_k is not None else k) * dt
    else:
        trace.n, ended = k, k * dt
    trace.t[: trace.n] = np.arange(trace.n) * dt
    return ended


def held_rows(n: int, cs: int, tick_rows: list[int] | None) -> np.ndarray:
    """For each of a trace's `n` rows, the row of the control tick whose values it holds: every `cs`
    steps from 0, or with `tick_rows` (a timed loop's ticks, in order) the latest tick at or before it
    (rows before the first tick hold row 0)."""
    if tick_rows is None:
        return (np.arange(n) // cs) * cs
    ticks = np.asarray(tick_rows or [0], dtype=np.int64)
    rows = ticks[np.maximum(np.searchsorted(ticks, np.arange(n), side="right") - 1, 0)]
    return np.where(np.arange(n) < ticks[0], 0, rows)


def build_strategy(scenario, device, rng, clock):
    """(strategy, None), or (None, message) when building it fails: an outcome, like failing later."""
    try:
        clock.enter()
        # the strategy gets its own copy of the device: what it does to it never reaches the
        # runner's motor, drive limits or metrics
        strategy = scenario.strategy.build(copy.deepcopy(device), rng=rng)
        clock.leave()
        return strategy, None
    except BaseException as exc:  # noqa: B036 - whatever strategy code raises is its failure
        clock.t_in = None           # first, and no call before it: no timeout is raised into the runner now
        if isinstance(exc, KeyboardInterrupt) and clock.user_interrupt:
            raise                   # the user's Ctrl-C, not the strategy's
        text = clock.after(lambda: describe_exception(exc), unread(exc))   # __str__ is theirs: timed
        clock.abandon()
        return None, f"building the strategy failed: {text}"


def final_outcome(wants_balance, strategy, catch_k, fell_k, fall_final) -> str:
    if not wants_balance:
        return "completed"
    if catch_k is not None:
        return "balanced"
    return "fell" if fell_k is not None else "not_caught"


def unread(exc: BaseException) -> str:
    """The failure's name alone, for an exception whose message did not come in time."""
    return f"{type(exc).__name__} (its message could not be read in time)"


def describe_unread(exc: BaseException, t: float) -> str:
    return f"{type(exc).__name__} at t = {t:.4f} s (its message could not be read in time)"


def describe(exc: BaseException, t: float) -> str:
    """"Type at t = ... s: first line of the message"; never raises (see describe_exception)."""
    name, text = exception_parts(exc)
    text = text.splitlines()[0] if text else ""
    return f"{name} at t = {t:.4f} s" + (f": {text}" if text else "")


def with_strategy(scenario, device, rng, clock, loop):
    """Build the strategy under `clock`, run `loop(strategy, failure)` (failure: the build's message or
    None) and settle the strategy's extra metrics; returns the loop's result."""
    with clock:
        strategy, failure = build_strategy(scenario, device, rng, clock)
        clock.strategy = strategy
        return settle_extra_metrics(loop(strategy, failure), clock)
