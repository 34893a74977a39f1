"""A misbehaving 3D law for the runner's checks (the tests' PD law is tilt_pd_law.py)."""

from __future__ import annotations

from sim.strategies import Strategy, StrategyParams


class TwoVolts(Strategy):
    """Returns two voltages whatever the device: the runner must refuse it on a three-wheel device."""

    kind = "two_volts"

    class Params(StrategyParams):
        pass

    def decide(self, reading):
        return (0.0, 0.0)
