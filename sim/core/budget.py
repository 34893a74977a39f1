"""The wall-time budget of strategy code: `StrategyClock` times each call and stops one that
overruns (`StrategyTimeout`).

Used by the trial runner for every strategy call and by the strategy registry for a plug-in's
import, so it sits in the core, below both. Times in seconds of wall time.
"""

from __future__ import annotations

import math
import signal
import threading
import time

AFTER_S = 1.0
"""Least wall time, s, that the runner's own calls into strategy code after a call (describing its
exception, reading its figures) get, even when the strategy has used up its budget."""


class StrategyTimeout(BaseException):
    """Raised inside strategy code that ran past the trial's budget.

    A BaseException, so that a plug-in's own `except Exception` does not swallow it.
    """


class StrategyClock:
    """Wall time spent in strategy code during one trial, held to a budget (s).

    Wrap each strategy call in `enter()` ... `leave()`. In the main thread of a POSIX process
    with no interval timer already running, a SIGALRM timer interrupts a call that runs past
    the budget (even an endless loop, as long as it runs Python bytecode). Elsewhere (other
    threads, Windows, a caller's own timer in use) the overrun is caught when the call returns;
    an endless call there cannot be stopped. Use as a context manager: it restores the previous
    SIGALRM handler on exit.
    """

    def __init__(self, budget_s: float):
        if not budget_s > 0:
            raise ValueError(f"strategy budget must be positive, got {budget_s!r}")
        self.budget_s = float(budget_s)
        self.used_s = 0.0
        self.t_in: float | None = None
        self.expired = False
        self.interrupts = False
        self._previous = None
        self._previous_int = None
        self.user_interrupt = False
        self.strategy = None    # the strategy being timed, once built (for subclasses' bookkeeping)

    def __enter__(self) -> "StrategyClock":
        main = threading.current_thread() is threading.main_thread()
        if (hasattr(signal, "setitimer") and math.isfinite(self.budget_s) and main
                and signal.getitimer(signal.ITIMER_REAL) == (0.0, 0.0)):
            self._previous = signal.signal(signal.SIGALRM, self._on_alarm)
            self.interrupts = True
            signal.setitimer(signal.ITIMER_REAL, max(self.budget_s, 1e-3))
        if main and signal.getsignal(signal.SIGINT) is signal.default_int_handler:
            # a real Ctrl-C is marked, so that it is told apart from a KeyboardInterrupt that strategy
            # code raises itself (that one is the strategy's failure, not the user's interrupt)
            self._previous_int = signal.signal(signal.SIGINT, self._on_interrupt)
        return self

    def __exit__(self, *exc) -> None:
        if self.interrupts:
            signal.setitimer(signal.ITIMER_REAL, 0.0)
            # None: the old handler was not set from Python; the default is the closest we can restore
            signal.signal(signal.SIGALRM, self._previous if self._previous is not None else signal.SIG_DFL)
            self.interrupts = False
        if self._previous_int is not None:
            signal.signal(signal.SIGINT, self._previous_int)
            self._previous_int = None

    def _on_interrupt(self, signum, frame) -> None:
        self.user_interrupt = True
        raise KeyboardInterrupt

    def enter(self, k: int = -1) -> None:
        """Start a strategy call at physics step `k` (-1: building the strategy)."""
        self.t_in = time.perf_counter()

    def leave(self) -> None:
        """End a strategy call; raises StrategyTimeout when the budget is used up."""
        self.used_s += time.perf_counter() - self.t_in
        self.t_in = None
        if self.used_s > self.budget_s:
            self._expire()

    def abandon(self) -> None:
        """End a strategy call that raised (the trial ends; its time is not counted)."""
        self.t_in = None

    def after(self, work, fallback):
        """`work()`: strategy code the runner itself calls outside the strategy's calls (an exception's
        __str__, reading `extra_metrics`, pickling the strategy), timed by what is left of the budget
        but never less than AFTER_S; `fallback` when it runs out. A timeout cannot escape into the
        runner: the clock counts as inside a call exactly while `work` runs, and the store that ends
        it sits where no signal handler runs (no call in between).

        Call it with no strategy call open (`t_in` None); it leaves none open.
        """
        result = fallback
        self.used_s = min(self.used_s, self.budget_s - AFTER_S)
        if self.interrupts:
            signal.setitimer(signal.ITIMER_REAL, max(self.budget_s - self.used_s, 1e-3))
        self.t_in = time.perf_counter()
        try:
            result = work()
        except StrategyTimeout:
            pass
        finally:
            self.t_in = None
        return result

    def _expire(self):
        self.expired = True
        raise StrategyTimeout(f"strategy code used more than its {self.budget_s:g} s budget of wall time")

    def _on_alarm(self, signum, frame) -> None:
        # The timer counts wall time, which is never less than strategy time: when it fires,
        # either the strategy is over budget now, or the timer is re-armed for what is left.
        spent = self.used_s + (time.perf_counter() - self.t_in if self.t_in is not None else 0.0)
        if self.t_in is not None and spent >= self.budget_s:
            signal.setitimer(signal.ITIMER_REAL, 0.05)  # again soon, should the strategy swallow it
            self._expire()
        if not self.expired:
            signal.setitimer(signal.ITIMER_REAL, max(self.budget_s - spent, 1e-3))
