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

    def decide(self, reading: Reading):
        n = getattr(self.device, "n_wheels", 1)   # one zero per wheel on a 3D device
        return 0.0 if n == 1 else (0.0,) * n


class FixedVoltage(Strategy):
    """A constant voltage across the winding (a step at t = 0), V; on a 3D device across every wheel's."""

    kind = "fixed_voltage"
    goal = None

    class Params(StrategyParams):
        volts: Q("voltage") = 0.0

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.phase = "fixed voltage"

    def decide(self, reading: Reading):
        n = getattr(self.device, "n_wheels", 1)
        return self.params.volts if n == 1 else (self.params.volts,) * n


class FixedCurrent(Strategy):
    """A constant current in the winding (a step at t = 0), A: for a current-mode drive only; on a 3D
    device in every wheel's."""

    kind = "fixed_current"
    goal = None
    commands_current = True
    needs_current_mode = True

    class Params(StrategyParams):
        amps: Q("current", ge=-1e4, le=1e4) = 0.0

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.phase = "fixed current"

    def decide(self, reading: Reading):
        n = getattr(self.device, "n_wheels", 1)
        return self.params.amps if n == 1 else (self.params.amps,) * n
