"""Plug-in fixtures for tests/test_brake.py: a law that floats the winding and clamps the brake at a set time."""

from sim.strategies import Reading, Strategy, StrategyParams


class BrakeAt(Strategy):
    """0 V with the winding open throughout (no back-EMF braking); the brake on from `at_s`."""

    goal = None

    class Params(StrategyParams):
        at_s: float = 0.0
        flags: list[bool] | None = None     # per-wheel brake flags instead of one for all

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.open_circuit = True
        self.phase = "coast"
        self.n = getattr(self.device, "n_wheels", 1)

    def decide(self, reading: Reading):
        if reading.t_s >= self.params.at_s and not self.brake:
            self.brake = list(self.params.flags) if self.params.flags is not None else True
            self.phase = "brake"
        return [0.0] * self.n if self.n > 1 else 0.0
