"""LQR balance on [angle, body rate, wheel speed], designed for the loop rate and sensor delay."""

from __future__ import annotations

from typing import Annotated

import numpy as np
from pydantic import Field

from ..lqr_design import DelayPredictor, design_lqr
from .base import Reading, Strategy, StrategyParams


class LqrBalance(Strategy):
    """volts = -K x, with K from the discrete LQR design at the control rate (zero-order hold).

    With a sensor delay the state fed to K is the model's prediction of the present state from
    the delayed reading and the commands sent since (equivalent to LQR on the delay-augmented
    state). Parameters: `weights` (3 diagonal state weights, SI: 1/rad^2, s^2/rad^2, s^2/rad^2)
    and `effort` (input weight, 1/V^2); defaults by Bryson's rule, see `sim.lqr_design`.
    """

    kind = "lqr"
    goal = "balance"

    class Params(StrategyParams):
        weights: Annotated[list[Annotated[float, Field(ge=0, allow_inf_nan=False)]], Field(min_length=3, max_length=3)] | None = None
        effort: Annotated[float, Field(gt=0, allow_inf_nan=False)] | None = None

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.design = design_lqr(self.device, weights=self.params.weights, effort=self.params.effort)
        self.K = self.design.K_discrete
        self.predictor = DelayPredictor(self.design, delay_s=self.device.delay_s)
        self._x = np.zeros(3)
        self.phase = "balance"

    def decide(self, reading: Reading) -> float:
        x = self._x
        x[0], x[1], x[2] = reading.angle_rad, reading.rate_rad_s, reading.wheel_speed_rad_s
        x_now = self.predictor.present_state(x)
        v = -float(self.K @ x_now)
        self.predictor.record(min(max(v, -self.supply_v), self.supply_v))  # what the drive will apply
        return v
