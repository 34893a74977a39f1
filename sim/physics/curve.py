"""A motor described by a datasheet's torque-speed curve instead of the straight line from Kv and R.

Input: the table T_r(w) at the rated voltage V_r (speeds rising from 0, torque falling; N m, rad/s).
Output: `current(volts, wheel_speed)`, A, quasi-static (no winding lag), torque = k_t i.

Scaling to other voltages: a brushed or voltage-driven motor's torque at voltage V and speed w is
T(V, w) = (|V| / V_r) T_r(w V_r / |V|) in the driving direction; for the linear motor
T_r(w) = k_t (V_r - k_e w) / R this is exactly k_t (|V| - k_e w) / R [references.md "Motor"], and it
keeps the shape of a curved datasheet line (our choice; say so when quoting results). Negative
voltages mirror it: T(-V, -w) = -T(V, w). Beyond the table the end segments are extended straight:
past the no-load speed the motor brakes (generates) along the last slope, and a wheel turning
against the voltage (plugging) follows the first. At V = 0 the limit of the scaling is T = s_last w,
the short-circuited winding's braking.
"""

from __future__ import annotations


class TorqueCurve:
    """The curve at `voltage` (V) through `points` [(speed rad/s, torque N m)], and k_t (N m/A)."""

    def __init__(self, *, voltage: float, points: list[tuple[float, float]], k_t: float):
        self.v_r = voltage
        self.w = [p[0] for p in points]
        self.t = [p[1] for p in points]
        self.k_t = k_t
        self.first_slope = (self.t[1] - self.t[0]) / (self.w[1] - self.w[0])
        self.last_slope = (self.t[-1] - self.t[-2]) / (self.w[-1] - self.w[-2])
        if self.last_slope == 0.0:     # a flat end: brake along the line from the first to the last point
            self.last_slope = (self.t[-1] - self.t[0]) / (self.w[-1] - self.w[0])

    def rated_torque(self, w: float) -> float:
        """T_r(w), N m, straight beyond the table's ends."""
        ws, ts = self.w, self.t
        if w <= ws[0]:
            return ts[0] + self.first_slope * (w - ws[0])
        if w >= ws[-1]:
            return ts[-1] + self.last_slope * (w - ws[-1])
        j = 1
        while ws[j] < w:
            j += 1
        return ts[j - 1] + (ts[j] - ts[j - 1]) * (w - ws[j - 1]) / (ws[j] - ws[j - 1])

    def torque(self, volts: float, w: float) -> float:
        """T(V, w), N m (sign: positive accelerates the wheel the positive way)."""
        if volts < 0.0:
            return -self.torque(-volts, -w)
        if volts < 1e-12 * self.v_r:
            return self.last_slope * w
        k = volts / self.v_r
        return k * self.rated_torque(w / k)

    def current(self, volts: float, w: float) -> float:
        """The winding current, A: T(V, w) / k_t."""
        return self.torque(volts, w) / self.k_t
