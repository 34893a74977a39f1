"""swing_and_catch: a supervisor that runs a swing-up law, then hands over to a balance law.

Hand-over with hysteresis: balance takes charge when the measured angle comes within
`catch_angle` of upright (and, optionally, the measured state lies inside the estimated catch
region); it gives the body back to the swing-up law when the angle leaves `release_angle`.
Each hand-over builds a fresh instance of the incoming law, so integrators and predictors
start clean. The trace's `mode` shows the active law's phase ("kick", "swing up", "balance"...).
`extra_metrics` carries `handover_count` and the sub-laws' own reports, the latest law's value
winning for a shared key (so a swing-up's `swing_energy_peak_j` is that of the latest swing-up).
"""

from __future__ import annotations

import math
from typing import Annotated

import numpy as np
from pydantic import BeforeValidator, Field, model_validator

from ..core.units import Q
from . import spec_from_raw
from .base import Reading, Strategy, StrategyParams, StrategySpec


def _is_lqr(cls) -> bool:
    from .lqr import LqrBalance
    return isinstance(cls, type) and issubclass(cls, LqrBalance)


def lqr_catch_region(device, lqr_params, *, catch_angle_rad: float) -> tuple[np.ndarray, float]:
    """(P, c): the catch region x'Px < c of the discrete LQR balance law, SI state units.

    P solves the closed-loop discrete Lyapunov equation Acl' P Acl - P = -Q, Acl = Ad - Bd K, so
    x'Px falls along every trajectory of the linear closed loop. c is the level whose ellipse
    just reaches `catch_angle_rad` (max |x_0| over the ellipse = sqrt(c (P^-1)_00)), so the test
    adds the rate and wheel speed that go with each angle. The ellipse where the law stays
    unsaturated (max |K x| = sqrt(c K P^-1 K') <= supply) is far smaller for Bryson-weighted
    gains and would refuse catches the saturated law makes (we measured 0.8 deg for the desk
    demo), so it is not used. Sensor delay is not modelled here: the region is a guide for the
    hand-over, not a proof (common practice, no source).
    """
    from scipy.linalg import solve_discrete_lyapunov

    from .lqr_design import design_lqr
    des = design_lqr(device, weights=lqr_params.weights, effort=lqr_params.effort)
    K = des.K_discrete.reshape(1, 3)
    acl = des.Ad - des.Bd @ K
    P = solve_discrete_lyapunov(acl.T, des.Q)
    P = 0.5 * (P + P.T)
    Pinv = np.linalg.inv(P)
    return P, catch_angle_rad**2 / float(Pinv[0, 0])


NestedSpec = Annotated[StrategySpec, BeforeValidator(spec_from_raw)]


class SwingAndCatch(Strategy):
    """Swing up with one law, catch and hold with another.

    Parameters: `swing_up` (a nested strategy mapping, default `{kind: energy}`), `balance`
    (default `{kind: lqr}`), `catch_angle` (rad, default 20 deg), `release_angle` (rad, default
    30 deg, must exceed `catch_angle`), `catch_region` (bool, default false: also require
    x'Px < c, with P from the closed-loop Lyapunov equation of the balance law's discrete LQR
    design and x = [angle, body rate, wheel speed]), `catch_level` (c; default: the level whose
    ellipse just reaches `catch_angle`, see `lqr_catch_region`).
    """

    kind = "swing_and_catch"
    planar_only = True   # one wheel on a hinge: refused for 3D devices at load
    goal = "balance"
    swings_up = True

    class Params(StrategyParams):
        swing_up: NestedSpec = Field(default_factory=lambda: {"kind": "energy"}, validate_default=True)
        balance: NestedSpec = Field(default_factory=lambda: {"kind": "lqr"}, validate_default=True)
        catch_angle: Q("angle", gt=0, le=math.pi) = math.radians(20)
        catch_region: bool = False
        catch_level: Annotated[float, Field(gt=0, allow_inf_nan=False)] | None = None

        @model_validator(mode="after")
        def _consistent(self):
            if self.catch_angle >= self.release_angle:
                raise ValueError(f"@catch_angle: must be smaller than release_angle "
                                 f"({math.degrees(self.release_angle):.4g} deg) for hysteresis")
            if self.balance.cls.goal != "balance":
                raise ValueError(f"@balance: {self.balance.kind!r} is not a balance strategy")
            if self.catch_region and not _is_lqr(self.balance.cls):
                raise ValueError(f"@catch_region: needs an lqr balance law, not {self.balance.kind!r}")
            return self

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.balancing = False
        self._recent = np.zeros(8)      # last commands sent, for a balance law's delay predictor
        self.active = self._fresh(self.params.swing_up)
        self.phase = self.active.phase
        self.region = self._catch_region() if self.params.catch_region else None
        self.handovers = 0
        self.extra_metrics: dict = {"handover_count": 0}   # plus the sub-laws' own reports

    def _fresh(self, spec: StrategySpec) -> Strategy:
        law = spec.build(self.device, rng=self.rng)
        predictor = getattr(law, "predictor", None)
        if predictor is not None and hasattr(predictor, "record"):
            for v in self._recent:     # the commands already on their way through the delay
                predictor.record(float(v))
        return law

    def _catch_region(self) -> tuple[np.ndarray, float]:
        P, level = lqr_catch_region(self.device, self.params.balance.params, catch_angle_rad=self.params.catch_angle)
        return P, (self.params.catch_level if self.params.catch_level is not None else level)

    def _inside(self, r: Reading) -> bool:
        if abs(r.angle_rad) >= self.params.catch_angle:
            return False
        if self.region is None:
            return True
        P, level = self.region
        x = np.array([r.angle_rad, r.rate_rad_s, r.wheel_speed_rad_s])
        return float(x @ P @ x) < level

    def decide(self, reading: Reading) -> float:
        if self.balancing and abs(reading.angle_rad) > self.params.release_angle:
            self.balancing, self.active = False, self._fresh(self.params.swing_up)
            self.handovers += 1
        elif not self.balancing and self._inside(reading):
            self.balancing, self.active = True, self._fresh(self.params.balance)
            self.handovers += 1
        law = self.active
        v = float(law.decide(reading))
        self.phase = law.phase
        self.brake, self.open_circuit = law.brake, law.open_circuit
        extra = getattr(law, "extra_metrics", None)
        if extra:
            self.extra_metrics.update(extra)
        self.extra_metrics["handover_count"] = self.handovers
        self._recent[:-1] = self._recent[1:]
        self._recent[-1] = min(max(v, -self.supply_v), self.supply_v)
        return v
