"""PID balance on the body angle, with an optional outer wheel-speed loop.

Sign conventions (see `sim.model.scenario`): angle 0 upright; positive voltage accelerates the wheel
positively and turns the body negatively. So a body leaning positive needs positive volts, and

    volts = kp * e + ki * integral(e) + kd * rate,      e = angle - angle_ref

restores upright for positive kp, ki, kd (V/rad, V/(rad s), V s/rad). The derivative acts on the
measured body rate, not on the error, so a set-point step gives no kick.

Angle-only PID (the default: no wheel loop) holds the *measured* angle at zero. Any angle-sensor
bias or off-centre mass then needs a steady gravity torque from the motor, which only a wheel
that keeps accelerating can give: the wheel runs into its no-load speed and the body falls.
The outer loop bleeds wheel speed by leaning the set-point:

    angle_ref = -(wheel_kp * w + wheel_ki * integral(w))       (rad; w = wheel speed, rad/s)

Holding the body at a lean angle_ref < 0 needs a steady negative wheel torque, which slows a
positively spinning wheel; positive wheel gains therefore bleed wheel speed.

Choosing the wheel gains: a lean L held for a time tau changes the wheel speed by about
mbar g L tau / I_w, so wheel_kp = I_w / (mbar g tau) bleeds the wheel over roughly tau seconds;
wheel_ki = wheel_kp / (4 tau) removes what is left. tau = 0.5 s held the test device; much
larger gains fight the angle loop (the wheel loop is non-minimum-phase) and the body falls.
"""

from __future__ import annotations

import math
from typing import Annotated

from pydantic import Field

from .base import Reading, Strategy, StrategyParams

Gain = Annotated[float, Field(ge=0, allow_inf_nan=False)]
DEFAULT_BANDWIDTH = 2.0     # closed-loop natural frequency / open-loop pole (our choice)
DEFAULT_DAMPING = 0.7       # closed-loop damping ratio of the default gains (common practice, no source)


def default_pd_gains(device) -> tuple[float, float, float]:
    """(kp V/rad, ki V/(rad s), kd V s/rad) placing the angle loop's poles from the device's limits.

    Torque-input model near upright, with back-EMF neglected: J theta_dd = mbar g theta - c V,
    c = k_t / R. With V = kp theta + kd theta_d the loop is J s^2 + c kd s + (c kp - mbar g),
    placed at natural frequency wn = 2 * sqrt(mbar g / J) and damping 0.7; ki = kp * wn / 20
    (a slow integral that does not disturb the placement much).
    """
    c = device.k_t_n_m_a / device.resistance_ohm
    J = device.J_kg_m2
    wn = DEFAULT_BANDWIDTH * max(device.open_loop_pole_rad_s, 1.0)
    kp = (device.gravity_torque_coeff_n_m + J * wn**2) / c
    kd = 2.0 * DEFAULT_DAMPING * wn * J / c
    return kp, kp * wn / 20.0, kd


class PidBalance(Strategy):
    """PID on the angle (`kp`, `ki`, `kd`), optional outer wheel-speed loop (`wheel_kp`, `wheel_ki`).

    Defaults: `default_pd_gains` for the angle loop and no wheel loop (angle-only PID). The
    angle integral is clamped so that ki * integral stays within the supply (anti-windup).
    """

    kind = "pid"
    planar_only = True   # one wheel on a hinge: refused for 3D devices at load
    goal = "balance"

    class Params(StrategyParams):
        kp: Gain | None = None
        ki: Gain | None = None
        kd: Gain | None = None
        wheel_kp: Gain = 0.0
        """rad of lean per rad/s of wheel speed."""
        wheel_ki: Gain = 0.0
        """rad of lean per rad of integrated wheel speed."""

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        p = self.params
        kp0, ki0, kd0 = default_pd_gains(self.device)
        self.kp = kp0 if p.kp is None else p.kp
        self.ki = ki0 if p.ki is None else p.ki
        self.kd = kd0 if p.kd is None else p.kd
        self.wheel_kp, self.wheel_ki = p.wheel_kp, p.wheel_ki
        self.period = 1.0 / self.device.control_rate_hz
        self.int_angle = 0.0
        self.int_wheel = 0.0
        self.int_limit = self.supply_v / self.ki if self.ki > 0 else math.inf
        self.phase = "balance"

    def decide(self, reading: Reading) -> float:
        w = reading.wheel_speed_rad_s
        ref = 0.0
        if self.wheel_kp or self.wheel_ki:
            self.int_wheel += w * self.period
            ref = -(self.wheel_kp * w + self.wheel_ki * self.int_wheel)
        e = reading.angle_rad - ref
        self.int_angle = min(max(self.int_angle + e * self.period, -self.int_limit), self.int_limit)
        return self.kp * e + self.ki * self.int_angle + self.kd * reading.rate_rad_s
