"""Plug-in fixture for tests/test_tune.py: an LQR law whose voltage cap peaks at a known parameter."""

from pydantic import Field

from sim.strategies.lqr import LqrBalance


class PeakedCapLqr(LqrBalance):
    """The built-in LQR law, its output clamped to supply * (1 - |p - 0.3|).

    The largest push survived grows with the voltage the law may use, so over p in [0, 1] it is
    largest at p = 0.3 exactly: an optimum known in closed form, for checking the search.
    """

    kind = "peaked cap lqr"

    class Params(LqrBalance.Params):
        p: float = Field(0.9, ge=0.0, le=1.0)

    def decide(self, reading) -> float:
        v = super().decide(reading)
        cap = self.supply_v * (1.0 - abs(self.params.p - 0.3))
        return max(-cap, min(cap, v))
