"""What both trial runners use to run a trial in the isolation child (`sim.core.isolation`): the
strategy clock that keeps the watchdog's heartbeat, a shared trace that publishes its phase names,
and the message of a child that was lost (killed while stuck, or dead of a signal).

The planar runner (`sim.run.trial`) and the 3D runner (`sim.run.trial3d`) each fork the same way:
the trace's columns are a MAP_SHARED mapping made before the fork, so the rows the child wrote up
to its last strategy call are the parent's rows even when the child never comes back.
"""

from __future__ import annotations

import time
from dataclasses import replace

from ..core import isolation
from ..core.budget import AFTER_S, StrategyClock
from .trace import Trace
from .trace3d import Trace3D

_now = time.perf_counter
# the heartbeat's slots, as module globals: a class attribute looked up through an instance costs
# more, twice per control tick
_STEP, _DEADLINE, _SATURATED = isolation.Heartbeat.STEP, isolation.Heartbeat.DEADLINE, isolation.Heartbeat.SATURATED


class WatchedClock(StrategyClock):
    """A StrategyClock that also keeps the watchdog's heartbeat: isolated trials only, so that the
    in-process loop pays nothing for it.

    Called twice per control tick, so kept light: the base's enter/leave inlined, the heartbeat's
    slots written directly, and the strategy's saturated-tick count read from its instance
    dictionary (a missing attribute looked up with getattr raises and catches an AttributeError
    every tick)."""

    def __init__(self, budget_s: float, beat: isolation.Heartbeat):
        super().__init__(budget_s)          # sets `strategy` to None through the property below
        self.beat = beat
        self._slots = beat.slots
        # deadline = entry + what is left of the budget + the grace
        self._slack = self.budget_s + isolation.GRACE_S

    @property
    def strategy(self):
        return self._strategy

    @strategy.setter
    def strategy(self, strategy) -> None:
        self._strategy = strategy
        plain = (strategy is not None and hasattr(strategy, "__dict__")
                 and not hasattr(type(strategy), "saturated_ticks"))
        # None: read it with getattr (a class attribute, a property, slots); else this dict
        self._state = vars(strategy) if plain else ({} if strategy is None else None)

    def _saturated(self) -> int:
        state = self._state
        return state.get("saturated_ticks", 0) if state is not None else getattr(self._strategy, "saturated_ticks", 0)

    def enter(self, k: int = -1) -> None:
        t = self.t_in = _now()
        slots = self._slots
        slots[_STEP] = k              # before the deadline: the parent reads the deadline first
        # what is left of the budget is never below 0 here: leave() ends the trial when it is used
        # up, and after() keeps AFTER_S of it (no max(): a builtin call costs more than the rest)
        slots[_DEADLINE] = t + (self._slack - self.used_s)

    def leave(self) -> None:
        slots = self._slots
        slots[_DEADLINE] = 0.0
        state = self._state
        slots[_SATURATED] = (state.get("saturated_ticks", 0) if state is not None
                             else getattr(self._strategy, "saturated_ticks", 0))
        self.used_s += _now() - self.t_in
        self.t_in = None
        if self.used_s > self.budget_s:
            self._expire()

    def abandon(self) -> None:
        self.beat.left(self._saturated())
        super().abandon()

    def after(self, work, fallback):
        # the watchdog covers these calls too (strategy code stuck in C while being pickled, say)
        left = self.budget_s - min(self.used_s, self.budget_s - AFTER_S)
        self.beat.entered(int(self.beat.slots[isolation.Heartbeat.STEP]), time.perf_counter() + left + isolation.GRACE_S)
        try:
            return super().after(work, fallback)
        finally:
            self.beat.left(int(self.beat.slots[isolation.Heartbeat.SATURATED]))


class _PhasesPublished:
    """A shared trace whose phase names also go to the heartbeat as they appear: the parent cannot
    ask a child it had to kill for them. Mixed in before the trace class; `beat` set by the class."""

    beat: isolation.Heartbeat

    def phase_code(self, phase: str) -> int:
        known = len(self.phases)
        code = super().phase_code(phase)
        if len(self.phases) != known:
            self.beat.publish_phases(self.phases)
        return code


class PublishedTrace(_PhasesPublished, Trace):
    """The planar trace, shared with the child, publishing its phase names."""

    def __init__(self, capacity: int, *, step_s: float, beat: isolation.Heartbeat, extra: tuple[str, ...] = ()):
        super().__init__(capacity, step_s=step_s, shared=True, extra=extra)
        self.beat = beat


class PublishedTrace3D(_PhasesPublished, Trace3D):
    """The 3D trace (per axis, per wheel), shared with the child, publishing its phase names."""

    def __init__(self, capacity: int, *, step_s: float, beat: isolation.Heartbeat, ball: bool, n_wheels: int,
                 floor: bool = False, power: bool = False, extra: tuple[str, ...] = ()):
        super().__init__(capacity, step_s=step_s, ball=ball, n_wheels=n_wheels, floor=floor, shared=True,
                         power=power, extra=extra)
        self.beat = beat


def lost_child_message(lost: isolation.LostChild, *, budget_s: float, step_s: float, control_steps: int) -> str:
    """The strategy_failed message of a lost child: stuck past its budget or dead (the signal), and
    the control tick and time of its last strategy call (or the strategy's building)."""
    cause = (f"strategy code did not return within its {budget_s:g} s budget (stuck in compiled code?)"
             if lost.stuck else f"the strategy's process died ({lost.how})")
    if lost.step < 0:
        return f"building the strategy failed: {cause}"
    k = lost.step
    return f"{cause} at control tick {k // control_steps} (t = {k * step_s:.4f} s)"


def run_watched(simulate, *, trace, clock: WatchedClock, scenario, device, on_step, lost_result):
    """`simulate()` (the trial into the shared `trace`, timed by `clock`) in a forked child; returns its
    result with this process's trace, scenario, device and a `StrategyRecord`, or, when the child is
    lost, `lost_result(lost)` (`isolation.LostChild`)."""
    def work():
        result = simulate()
        # pickling the strategy's attributes may run its code as well
        strategy = clock.after(lambda: isolation.pack_strategy(result.strategy), None)
        return replace(result, trace=None, device=None, scenario=None, strategy=strategy), trace.n, trace.phases

    sent, lost = isolation.run_in_child(work, beat=clock.beat, mirror=on_step)
    if lost is not None:
        return lost_result(lost)
    result, trace.n, trace.phases = sent
    return replace(result, trace=trace, device=device, scenario=scenario,
                   strategy=isolation.unpack_strategy(result.strategy, device=device))
