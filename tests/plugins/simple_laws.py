"""Plug-in fixtures for tests/test_plugins.py: small strategies loaded from this file by path."""

from sim.strategies import Reading, Strategy, StrategyParams


class ProportionalDamping(Strategy):
    """volts = gain * angle + damping * rate: a plain PD law written as a user would write one."""

    kind = "proportional damping"

    class Params(StrategyParams):
        gain: float = 150.0
        damping: float = 10.0

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.phase = "user law"
        self.calls = 0

    def decide(self, reading: Reading) -> float:
        self.calls += 1
        return self.params.gain * reading.angle_rad + self.params.damping * reading.rate_rad_s


class RaisesLater(Strategy):
    """Balances for a while, then raises: the runner must turn this into an outcome."""

    class Params(StrategyParams):
        after_s: float = 0.1

    def decide(self, reading: Reading) -> float:
        if reading.t_s >= self.params.after_s:
            raise RuntimeError("sensor bus lost (deliberate test failure)")
        return 0.0


class NotAStrategy:
    """Not a Strategy subclass: loading it must be refused."""


class CountingVolts(Strategy):
    """Bench law: the n-th call returns n millivolts and notes its time, so a trace shows which
    tick's command is in force on every row (for the loop-timing tests)."""

    goal = None

    class Params(StrategyParams):
        pass

    def __init__(self, **kw):
        super().__init__(**kw)
        self.times_s = []

    def decide(self, reading: Reading) -> float:
        self.times_s.append(reading.t_s)
        return 1e-3 * len(self.times_s)
