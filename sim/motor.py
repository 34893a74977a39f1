"""The DC motor and its drive: voltage in, current and torque out, every physics step.

Model (brushed DC, or a BLDC under a voltage-mode driver; references.md "Motor"):
    L di/dt = V - R i - k_e w        (w = wheel speed relative to the body, rad/s)
    tau = k_t i                      (on the wheel; its reaction acts on the body)
The drive clamps |i| to the current limit. With L = 0 the current is quasi-static.

Why the step's mean current: the engine holds the torque over each step (semi-implicit Euler).
Back-EMF is a damping term k_t k_e / R on the wheel and the winding a lag L/R on the current;
taking the current at the step's start (or end) applies the torque up to half a step early or
late, a first-order error (about 1% of the no-load speed at a 1 ms step with L/R = 0.1 ms, a
common winding). Instead the motor and the inertia it sees (I_w, or I_w J/(I_w + J) when the
body is free) are solved exactly over the step with the voltage held (zero-order hold), and the
step's mean current is applied: a locked wheel then follows the motor equations to rounding,
and gravity and friction, which this sub-model leaves out, only add their own small step error.
"""

from __future__ import annotations

import math

from .device import Device


class MotorDrive:
    """Per-step motor state. `update(volts, wheel_speed)` returns (current A, torque N m):
    the mean current over the coming step and its torque; `current` holds the end-of-step current."""

    def __init__(self, device: Device, *, step_s: float):
        self.k_e = device.k_e_v_s_rad
        self.k_t = device.k_t_n_m_a
        self.r = device.resistance_ohm
        self.i_max = device.current_limit_a
        i_w, j = device.I_w_kg_m2, device.J_kg_m2
        inertia_seen = i_w if device.locked else i_w * j / (i_w + j)
        self.mean, self.end = step_coefficients(device.inductance_h, self.r, self.k_e, self.k_t, inertia_seen, step_s)
        self.current = 0.0

    def update(self, volts: float, wheel_speed_rad_s: float) -> tuple[float, float]:
        """Advance one step with `volts` applied across the winding; returns (current, torque)."""
        ci, cw, cv = self.mean
        i = ci * self.current + cw * wheel_speed_rad_s + cv * volts
        ei, ew, ev = self.end
        end = ei * self.current + ew * wheel_speed_rad_s + ev * volts
        lim = self.i_max
        self.current = lim if end > lim else (-lim if end < -lim else end)
        if i > lim:
            i = lim
        elif i < -lim:
            i = -lim
        return i, self.k_t * i


def step_coefficients(inductance: float, r: float, k_e: float, k_t: float, inertia: float,
                      dt: float) -> tuple[tuple[float, float, float], tuple[float, float, float]]:
    """Coefficients on (i0 A, w0 rad/s, V volts) of the mean and of the end current over one step.

    Exact solution of L di/dt = V - R i - k_e w, inertia dw/dt = k_t i with V held, from i0, w0
    (the matrix exponential of the system augmented with V and the integral of i: the usual
    zero-order-hold discretisation). With L = 0 (or a winding far faster than the step) the
    current is quasi-static, i = (V - k_e w)/R, w relaxes with tau_m = inertia R/(k_t k_e), and
    the mean current is (V - k_e w0)/R * (1 - exp(-x))/x with x = dt/tau_m.
    """
    tau_e = inductance / r
    if tau_e < 1e-6 * dt:
        x = dt * k_t * k_e / (inertia * r)
        f = -math.expm1(-x) / x if x > 1e-12 else 1.0
        return (0.0, -k_e * f / r, f / r), (0.0, 0.0, 0.0)
    import numpy as np
    from scipy.linalg import expm

    # state [i, w, V, q]: q = integral of i over the step, V constant
    m = np.zeros((4, 4))
    m[0, :3] = (-r / inductance, -k_e / inductance, 1.0 / inductance)
    m[1, 0] = k_t / inertia
    m[3, 0] = 1.0
    e = expm(m * dt)
    return tuple(float(v) / dt for v in e[3, :3]), tuple(float(v) for v in e[0, :3])
