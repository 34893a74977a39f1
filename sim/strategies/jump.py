"""Brake-to-jump: store momentum in the wheel, then brake it to throw the body up.

Momentum balance (Gajamohan, Merz, Thommen, D'Andrea, "The Cubli", IROS 2012; references.md):
braking the wheel (relative speed w) quickly enough that gravity's impulse is small adds
I_w w / J_lock to the body rate, J_lock = J + I_w. From a start angle theta0 (from upright),
reaching upright needs 1/2 J_lock rate^2 = mbar g (1 - cos theta0), i.e.

    w_needed = sqrt(2 J_lock mbar g (1 - cos theta0)) / I_w.

The law: ramp the wheel up gently (reaction torque a small share of mbar g, so the body is
barely disturbed), hold the target speed until the body's own swing moves the same way as the
jump, then engage the brake with the winding open. Needs `drive.brake_torque` in the scenario.
"""

from __future__ import annotations

import math
from typing import Annotated, Literal

from pydantic import Field

from .base import Reading, Strategy, StrategyParams
from .jump_figures import jump_margin, reachable_wheel_speed
from .swingup import volts_for_torque

SPEED_CAP = 0.95           # never aim above 95% of the no-load speed: the approach is exponential
SPEED_LOOP_S = 0.05        # time constant of the wheel-speed correction, s (our choice)
BOTTOM_BAND = 0.35         # rad from hanging: "back at the bottom" after a jump that fell short (our choice)
RETRY_GAIN = 1.1           # each new try aims 10% faster, up to the cap
SETTLE_S = 0.3             # brake anyway this long after the reference reached the target (friction
                           # or a weak supply may keep the wheel a little short of it)


class BrakeJump(Strategy):
    """Spin the wheel to the momentum-balance speed (times `margin`), then brake.

    Parameters: `margin` (factor on the needed speed, default 1.1, for friction losses during the
    rise), `ramp_torque` (N m of wheel torque while spinning up; default 15% of mbar g, capped at
    the stall torque), `direction` (+1 or -1: the sign of the wheel speed, which is also the sign
    of the body rate the brake produces), `max_attempts` (None: no cap; on a 3D device, default 5).
    Reports `needed_wheel_speed_rad_s` (from the first reading's angle), `reached_wheel_speed_rad_s`
    (measured when the brake was last engaged), `jump_attempts` and `jump_margin` (how far over the
    needed speed the motor can go at this supply, `sim.strategies.jump_figures.jump_margin`) in
    `extra_metrics`. A jump that falls short is tried again, 10% faster, once the body has swung back
    to the bottom.

    On a 3D device (one with `linear_spec()`: a hinge at an edge, a floor device) the law is
    `sim.strategies.jump3d.JumpUp3D`: face to edge, then the multi-wheel LQR, retries corrected by
    the energy reached.
    """

    kind = "jump"
    mounts_3d = ("hinge", "floor")   # 3D devices: JumpUp3D, from a face up to an edge (checked at load)
    goal = None
    swings_up = True

    class Params(StrategyParams):
        margin: Annotated[float, Field(ge=0.5, le=3.0)] = 1.1
        ramp_torque: Annotated[float, Field(gt=0, allow_inf_nan=False)] | None = None
        direction: Literal[-1, 1] = 1
        max_attempts: Annotated[int, Field(ge=1, le=100, strict=True)] | None = None

    def __new__(cls, **kw):
        device = kw.get("device")
        if cls is BrakeJump and hasattr(device, "linear_spec"):
            # a 3D device: the face-to-edge law, or on a floor device balancing on a corner the
            # edge-to-corner one. Not a subclass (so Python does not run __init__ again)
            from .jump3d import JumpUp3D
            from .jump_corner import JumpToCorner
            corner = getattr(device, "floor", None) is not None and device.mount == "ball"
            law = object.__new__(JumpToCorner if corner else JumpUp3D)
            law.__init__(**kw)
            return law
        return super().__new__(cls)

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        d, p = self.device, self.params
        if d.brake_torque_n_m is None:
            raise ValueError("jump needs a wheel brake: set drive.brake_torque in the scenario")
        self.j_lock = d.J_kg_m2 + d.I_w_kg_m2
        mgl = d.gravity_torque_coeff_n_m
        self.ramp = p.ramp_torque if p.ramp_torque is not None else min(0.15 * mgl, d.stall_torque_n_m)
        self.sign = float(p.direction)
        self.target = None
        self.w_ref = 0.0
        self.ref_done_s = None
        self.period = 1.0 / d.control_rate_hz
        self.risen = False
        self.extra_metrics = {"needed_wheel_speed_rad_s": None, "reached_wheel_speed_rad_s": None,
                              "jump_target_wheel_speed_rad_s": None, "braked_at_s": None, "jump_attempts": 0,
                              "jump_margin": None}
        self.phase = "spin up"

    def needed_speed(self, angle_rad: float) -> float:
        """Momentum-balance wheel speed to reach upright from `angle_rad` (from upright), rad/s."""
        d = self.device
        return math.sqrt(2.0 * self.j_lock * d.gravity_torque_coeff_n_m * (1.0 - math.cos(angle_rad))) / d.I_w_kg_m2

    def decide(self, reading: Reading) -> float:
        w = reading.wheel_speed_rad_s
        if self.target is None:
            d = self.device
            needed = self.needed_speed(reading.angle_rad)
            self.target = min(self.params.margin * needed, SPEED_CAP * self.device.no_load_speed_rad_s)
            self.extra_metrics["needed_wheel_speed_rad_s"] = needed
            self.extra_metrics["jump_margin"] = jump_margin(needed, reachable_wheel_speed(
                k_t_n_m_a=d.k_t_n_m_a, k_e_v_s_rad=d.k_e_v_s_rad, resistance_ohm=d.resistance_ohm,
                current_limit_a=d.current_limit_a, supply_v=d.supply_v, coulomb_n_m=d.wheel_coulomb_n_m,
                viscous_n_m_s=d.wheel_viscous_n_m_s))
            self.extra_metrics["jump_target_wheel_speed_rad_s"] = self.target
        if self.brake:
            self._watch_fall_back(reading.angle_rad)
            return 0.0
        if self.phase == "hold" and reading.rate_rad_s * self.sign >= 0.0:
            self.brake, self.open_circuit, self.phase = True, True, "brake"
            self.extra_metrics["jump_attempts"] += 1
            self.extra_metrics["reached_wheel_speed_rad_s"] = abs(float(w))
            self.extra_metrics["braked_at_s"] = float(reading.t_s)
            return 0.0
        return self._spin(w, reading.t_s)

    def _watch_fall_back(self, angle_rad: float) -> None:
        """A jump that fell short: once the body has risen and swung back to the bottom, try again
        with the brake released and a 10% faster target (the swing's energy is a bonus)."""
        if abs(angle_rad) < math.pi - BOTTOM_BAND:
            self.risen = True
        elif self.risen:
            cap = self.params.max_attempts
            if cap is not None and self.extra_metrics["jump_attempts"] >= cap:
                self.risen, self.phase = False, "gave up"   # the brake stays on: the body hangs still
                return
            self.brake, self.open_circuit, self.risen, self.phase = False, False, False, "spin up"
            self.w_ref, self.ref_done_s = 0.0, None
            self.target = min(self.target * RETRY_GAIN, SPEED_CAP * self.device.no_load_speed_rad_s)
            self.extra_metrics["jump_target_wheel_speed_rad_s"] = self.target

    def _spin(self, w: float, t_s: float) -> float:
        """Ramp the speed reference at `ramp` torque, follow it with a proportional correction."""
        i_w = self.device.I_w_kg_m2
        step = self.ramp / i_w * self.period
        self.w_ref = min(self.w_ref + step, self.target)
        if self.w_ref >= self.target and self.ref_done_s is None:
            self.ref_done_s = t_s
        if self.ref_done_s is not None and (abs(w) >= 0.99 * self.target or t_s - self.ref_done_s > SETTLE_S):
            self.phase = "hold"
        feed = self.ramp if self.w_ref < self.target else 0.0
        tau = self.sign * feed + i_w * (self.sign * self.w_ref - w) / SPEED_LOOP_S
        tau = min(max(tau, -2.0 * self.ramp), 2.0 * self.ramp)
        return volts_for_torque(self.device, tau, w)
