"""LQR balance on [angle, body rate, wheel speed], designed for the loop rate and sensor delay."""

from __future__ import annotations

from typing import Annotated

import numpy as np
from pydantic import Field

from .base import Reading, Strategy, StrategyParams
from .lqr_design import DelayPredictor, design_lqr


class LqrBalance(Strategy):
    """volts = -K x, with K from the discrete LQR design at the control rate (zero-order hold).

    With a sensor delay the state fed to K is the model's prediction of the present state from
    the delayed reading and the commands sent since (equivalent to LQR on the delay-augmented
    state). Parameters: `weights` (3 diagonal state weights, SI: 1/rad^2, s^2/rad^2, s^2/rad^2)
    and `effort` (input weight, 1/V^2); defaults by Bryson's rule, see `sim.strategies.lqr_design`.
    """

    kind = "lqr"
    planar_only = True   # the one-wheel design; 3D devices are refused at load until the multi-input design lands
    goal = "balance"

    class Params(StrategyParams):
        weights: Annotated[list[Annotated[float, Field(ge=0, allow_inf_nan=False)]], Field(min_length=3, max_length=3)] | None = None
        effort: Annotated[float, Field(gt=0, allow_inf_nan=False)] | None = None

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.design = design_lqr(self.device, weights=self.params.weights, effort=self.params.effort)
        self.K = self.design.K_discrete
        self.predictor = DelayPredictor(self.design, delay_s=self.device.delay_s)
        self._gx, self._gu = self.folded_gains(self.design, self.predictor)
        self.phase = "balance"

    @staticmethod
    def folded_gains(design, pred) -> tuple[tuple[float, float, float], tuple[float, ...]]:
        """K times the predictor, as gains on the reading and on the held commands.

        The predictor is linear: x_now = Ad^n (Phi_f x_meas + Gam_f u0) + sum_i Ad^(n-1-i) Bd u(i+1),
        so K x_now = g_x . x_meas + g_u . u. Precomputed once, this turns each tick's small
        matrix products into three float products and a short dot product (same law, fewer steps).
        """
        K = design.K_discrete
        if not pred.active:
            return tuple(float(k) for k in K), ()
        powers = [np.eye(3)]
        for _ in range(pred.n):
            powers.append(pred.Ad @ powers[-1])
        g_x = K @ powers[pred.n] @ pred.Phi_f
        g_u = [K @ powers[pred.n] @ pred.Gam_f] + [K @ powers[pred.n - 1 - i] @ pred.Bd for i in range(pred.n)]
        return tuple(float(g) for g in g_x), tuple(float(g) for g in g_u)

    def decide(self, reading: Reading) -> float:
        gx = self._gx
        v = -(gx[0] * reading.angle_rad + gx[1] * reading.rate_rad_s + gx[2] * reading.wheel_speed_rad_s)
        if self._gu:
            held = self.predictor.u
            for g, u in zip(self._gu, held):
                v -= g * u
            # what the drive will apply, recorded as DelayPredictor.record does (inline: every tick)
            cap = self.supply_v
            del held[0]
            held.append(cap if v > cap else (-cap if v < -cap else v))
        return v
