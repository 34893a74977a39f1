"""The DC motor and its drive: voltage in, current and torque out, every physics step.

Model (brushed DC, or a BLDC under a voltage-mode driver; references.md "Motor"):
    L di/dt = V - R i - k_e w        (w = wheel speed relative to the body, rad/s)
    tau = k_t i                      (on the wheel; its reaction acts on the body)
The drive clamps |i| to the current limit. With L = 0 the current is quasi-static.

Why the half-step correction: the engine integrates velocities with the torque held over the
step (semi-implicit Euler). Back-EMF is a damping term k_t k_e / R on the wheel, and holding it
explicit shortens the mechanical time constant by about dt/(2 tau_m) (5% at dt = 1 ms,
tau_m = 11 ms). Evaluating the back-EMF at the mid-step speed, w + dt/2 * w_dot, turns the
update into the trapezoidal rule, accurate to (dt/tau_m)^2 / 12. w_dot is predicted from the
inertia the motor sees (I_w, or I_w J/(I_w + J) when the body is free).
"""

from __future__ import annotations

import math

from .device import Device


class MotorDrive:
    """Per-step motor state. `update(volts, wheel_speed)` returns (current A, torque N m)."""

    def __init__(self, device: Device, *, step_s: float):
        self.k_e = device.k_e_v_s_rad
        self.k_t = device.k_t_n_m_a
        self.r = device.resistance_ohm
        self.i_max = device.current_limit_a
        i_w, j = device.I_w_kg_m2, device.J_kg_m2
        inertia_seen = i_w if device.locked else i_w * j / (i_w + j)
        damping = self.k_t * self.k_e / self.r
        self.midstep = 1.0 / (1.0 + damping * step_s / (2.0 * inertia_seen))
        self.decay = math.exp(-self.r * step_s / device.inductance_h) if device.inductance_h > 0 else 0.0
        self.current = 0.0

    def update(self, volts: float, wheel_speed_rad_s: float) -> tuple[float, float]:
        """Advance one step with `volts` applied across the winding; returns (current, torque)."""
        i_target = (volts - self.k_e * wheel_speed_rad_s) / self.r * self.midstep
        i = i_target + (self.current - i_target) * self.decay
        if i > self.i_max:
            i = self.i_max
        elif i < -self.i_max:
            i = -self.i_max
        self.current = i
        return i, self.k_t * i
