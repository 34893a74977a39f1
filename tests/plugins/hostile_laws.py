"""Plug-in fixtures for the hostile cases of tests/test_plugins.py: strategies that exit, raise
BaseExceptions, raise exceptions that cannot be printed, report bad extra metrics or name a new
phase at every tick. Each holds the motor at 0 V until `after_s`, then misbehaves."""

import sys

from sim.strategies import Reading, Strategy, StrategyParams


class Unprintable(RuntimeError):
    """An exception whose __str__ raises."""

    def __str__(self):
        raise ValueError("no text for you")


class Endless(RuntimeError):
    """An exception whose __str__ never returns."""

    def __str__(self):
        while True:
            pass


class Bare(BaseException):
    """A BaseException subclass, below Exception."""


WHAT = {
    "exit0": lambda: sys.exit(0),
    "exit3": lambda: sys.exit(3),
    "interrupt": lambda: (_ for _ in ()).throw(KeyboardInterrupt()),
    "unprintable": lambda: (_ for _ in ()).throw(Unprintable()),
    "bare": lambda: (_ for _ in ()).throw(Bare("below Exception")),
    "endless_str": lambda: (_ for _ in ()).throw(Endless()),
}


class Misbehaves(Strategy):
    """0 V until `after_s`, then does `what` (a key of WHAT) inside decide(); with `in_build`, while
    being built instead."""

    class Params(StrategyParams):
        what: str = "exit0"
        after_s: float = 0.02
        in_build: bool = False

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        if self.params.in_build:
            WHAT[self.params.what]()

    def decide(self, reading: Reading) -> float:
        if reading.t_s >= self.params.after_s:
            WHAT[self.params.what]()
        return 0.0


class OddObject:
    """Not JSON: an object of a plug-in's own class."""


class BadExtraMetrics(Strategy):
    """Holds 0 V; reports `extra_metrics` of the kind named by `form`."""

    goal = None

    class Params(StrategyParams):
        form: str = "list"

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.extra_metrics = {
            "list": [1, 2, 3],
            "set": {1, 2},
            "object": OddObject(),
            "mixed": {"good_count": 3, "good_speed_rad_s": 1.5, "bad": OddObject(), 7: "non-text key",
                      "huge": 10**30},
        }[self.params.form]

    def decide(self, reading: Reading) -> float:
        return 0.0


class ManyPhases(Strategy):
    """Holds 0 V and names a new phase at every tick (its own number), as a law that puts a
    counter in its phase would."""

    goal = None

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.ticks = 0

    def decide(self, reading: Reading) -> float:
        self.ticks += 1
        self.phase = f"step {self.ticks}"
        return 0.0


class OddPhaseNames(Strategy):
    """Holds 0 V and cycles through phase names that CSV must quote."""

    goal = None
    NAMES = ('plain', 'with, comma', 'with "quotes"', 'two\nlines', 'carriage\rreturn', '', ' spaced ',
             '[/]', '[bold]markup[/bold]')

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.ticks = 0

    def decide(self, reading: Reading) -> float:
        self.phase = self.NAMES[self.ticks % len(self.NAMES)]
        self.ticks += 1
        return 0.0
