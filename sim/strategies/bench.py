"""Bench strategies: no balance goal, for testing the drive and the model."""

from __future__ import annotations

from ..core.units import Q
from .base import Reading, Strategy, StrategyParams


class Coast(Strategy):
    """Driver off: the winding is open, so no current flows and the motor gives no torque."""

    kind = "coast"
    goal = None

    class Params(StrategyParams):
        pass

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.phase = "coast"
        self.open_circuit = True

    def decide(self, reading: Reading) -> float:
        return 0.0


class FixedVoltage(Strategy):
    """A constant voltage across the winding (a step at t = 0), V."""

    kind = "fixed_voltage"
    goal = None

    class Params(StrategyParams):
        volts: Q("voltage") = 0.0

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.phase = "fixed voltage"

    def decide(self, reading: Reading) -> float:
        return self.params.volts


class FixedCurrent(Strategy):
    """A constant current in the winding (a step at t = 0), A: for a current-mode drive only."""

    kind = "fixed_current"
    goal = None
    commands_current = True
    needs_current_mode = True

    class Params(StrategyParams):
        amps: Q("current", ge=-1e4, le=1e4) = 0.0

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.phase = "fixed current"

    def decide(self, reading: Reading) -> float:
        return self.params.amps
