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

Current limit inside a step (with inductance): when the unclamped solution reaches the limit part
way through the step, the step is solved piecewise: the exact solution up to the crossing, then
the current held at the limit for the rest of the step (the drive lowers its voltage to hold it).
The step's mean current is then exact; clamping the mean of the unclamped solution instead would
overstate it (by 21% in the bench case of the tests). A current that overshoots the limit and
comes back inside within one step is not caught (the end of the step is inside the limit); a
winding that fast against the step makes the current quasi-static anyway. Without inductance
the current is quasi-static and its step mean is clamped.
"""

from __future__ import annotations

import cmath
import math

from ..model.device import Device


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
        self.crossing = LimitCrossing.for_winding(device.inductance_h, self.r, self.k_e, self.k_t, inertia_seen,
                                                  step_s)
        self.current = 0.0

    def update(self, volts: float, wheel_speed_rad_s: float) -> tuple[float, float]:
        """Advance one step with `volts` applied across the winding; returns (current, torque)."""
        ci, cw, cv = self.mean
        i = ci * self.current + cw * wheel_speed_rad_s + cv * volts
        ei, ew, ev = self.end
        end = ei * self.current + ew * wheel_speed_rad_s + ev * volts
        lim = self.i_max
        if end > lim or end < -lim:
            i = self.limited(i, end, wheel_speed_rad_s, volts)
        else:
            self.current = end
        if i > lim:
            i = lim
        elif i < -lim:
            i = -lim
        return i, self.k_t * i

    def limited(self, mean: float, end: float, wheel_speed_rad_s: float, volts: float) -> float:
        """A step whose unclamped end current `end` (A) lies past the limit: `current` held at the
        limit, and the step's mean current (A, before `update`'s final clamp) returned: `mean`, the
        unclamped mean, or, when the limit was reached mid-step from inside it, the exact mean up to
        the crossing and held after it."""
        lim = self.i_max
        held = lim if end > lim else -lim
        if self.crossing is not None and (self.current < lim if held > 0 else self.current > -lim):
            mean = self.crossing.mean_current(self.current, wheel_speed_rad_s, volts, held)
        self.current = held
        return mean


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


class LimitCrossing:
    """The unclamped step solution in closed form, to find where the current reaches the limit.

    With V held, x = [i, w] follows x' = A x + b V, whose steady state is i = 0, w = V/k_e; so
    i(t) = sum_j c_j exp(l_j t) over the two eigenvalues l_j of A (complex when the winding and
    the inertia ring), and its integral is sum_j c_j (exp(l_j t) - 1)/l_j. Built only for a
    winding with inductance and two distinct eigenvalues (else `for_winding` returns None and
    the step's mean is clamped, as without inductance).
    """

    def __init__(self, eigenvalues, p, p_inv, k_e: float, dt: float):
        self.lam = eigenvalues
        self.p0 = (complex(p[0][0]), complex(p[0][1]))
        self.p_inv = p_inv
        self.k_e = k_e
        self.dt = dt

    @classmethod
    def for_winding(cls, inductance: float, r: float, k_e: float, k_t: float, inertia: float,
                    dt: float) -> "LimitCrossing | None":
        if inductance / r < 1e-6 * dt:
            return None
        import numpy as np

        a = np.array([[-r / inductance, -k_e / inductance], [k_t / inertia, 0.0]])
        lam, p = np.linalg.eig(a)
        if abs(lam[0] - lam[1]) < 1e-9 * max(abs(lam[0]), abs(lam[1])):
            return None   # a repeated eigenvalue: no basis of eigenvectors
        p_inv = np.linalg.inv(p)
        return cls(tuple(complex(x) for x in lam), p.tolist(),
                   [[complex(x) for x in row] for row in p_inv.tolist()], k_e, dt)

    def _coefficients(self, i0: float, w0: float, volts: float) -> tuple[complex, complex]:
        e0, e1 = i0, w0 - volts / self.k_e            # distance from the steady state
        (a, b), (c, d) = self.p_inv
        return self.p0[0] * (a * e0 + b * e1), self.p0[1] * (c * e0 + d * e1)

    def mean_current(self, i0: float, w0: float, volts: float, limit: float) -> float:
        """Mean current, A, over a step from (i0 A, w0 rad/s) at `volts` whose current reaches
        `limit` (signed, A) before the step ends and is held there after the crossing."""
        c0, c1 = self._coefficients(i0, w0, volts)
        l0, l1 = self.lam

        def current(t):
            return (c0 * cmath.exp(l0 * t) + c1 * cmath.exp(l1 * t)).real

        def slope(t):
            return (c0 * l0 * cmath.exp(l0 * t) + c1 * l1 * cmath.exp(l1 * t)).real

        # Newton's method kept inside a bracket (bisecting when a step would leave it):
        # i(0) is inside the limit and i(dt) beyond it
        lo, hi = 0.0, self.dt
        f_lo, f_hi = current(lo) - limit, current(hi) - limit
        if f_lo * f_hi > 0.0:      # not a crossing after all (rounding at the limit): held all step
            return limit
        t = lo + (hi - lo) * f_lo / (f_lo - f_hi)
        for _ in range(60):
            f = current(t) - limit
            if f == 0.0:
                break
            if (f < 0.0) == (f_lo < 0.0):
                lo = t
            else:
                hi = t
            d = slope(t)
            t_next = t - f / d if d != 0.0 else lo - 1.0
            if not lo < t_next < hi:
                t_next = 0.5 * (lo + hi)
            done = abs(t_next - t) <= 1e-14 * self.dt
            t = t_next
            if done:
                break
        charge = (c0 * _expm1_over(l0, t) + c1 * _expm1_over(l1, t)).real
        return (charge + limit * (self.dt - t)) / self.dt


def _expm1_over(lam: complex, t: float) -> complex:
    """(exp(lam t) - 1) / lam, without the cancellation of small lam t (s)."""
    z = lam * t
    if abs(z) < 1e-4:
        return t * (1.0 + z / 2.0 + z * z / 6.0)
    return (cmath.exp(z) - 1.0) / lam
