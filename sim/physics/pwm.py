"""The bridge's pulse-width modulation: a wanted duty in, the mean voltage over a PWM period out.

Average model (the ripple within a period is not modelled; the motor sees the period's mean, which
holds when the PWM period is much shorter than the winding's L/R and the physics step):
    duty d in [-1, 1] (sign: direction), quantised to whole counts of a full scale of 2^bits - 1;
    |d| below `min_duty` is a dead band: the bridge applies nothing (drivers that cannot form pulses
    that short, or firmware that ignores them);
    dead time t_d at switching frequency f_s loses 2 t_d f_s V_bus of the mean voltage, against the
    sign of the winding current [pub: Mohan, Undeland & Robbins, Power Electronics, dead-time effect;
    from memory, as references.md states it]. The loss never reverses the voltage: a pulse shorter
    than the dead time gives nothing.
"""

from __future__ import annotations


class Pwm:
    """Duty quantisation, dead band and dead-time loss. `applied(duty, bus_v, current_sign)` -> volts.

    `dead_band_hits` counts the calls whose non-zero duty fell in the dead band."""

    def __init__(self, *, resolution_bits: int, frequency_hz: float, dead_time_s: float, min_duty: float):
        self.full_scale = float(2**resolution_bits - 1)
        self.min_duty = min_duty
        self.loss_fraction = 2.0 * dead_time_s * frequency_hz   # of V_bus, per references.md
        self.dead_band_hits = 0

    def quantised(self, duty: float) -> float:
        """`duty` (-1..1) rounded to the nearest count of the full scale: error at most half a count."""
        return round(duty * self.full_scale) / self.full_scale

    def applied(self, duty: float, bus_v: float, current_sign: float) -> float:
        """Mean voltage over the period, V, for a wanted `duty` on a bus of `bus_v` volts, with the
        winding current's sign `current_sign` (+1, -1, or 0 when no current flows: the duty's sign)."""
        d = round(duty * self.full_scale) / self.full_scale     # `quantised`, inline: every step
        if d == 0.0:
            return 0.0
        if -self.min_duty < d < self.min_duty:
            self.dead_band_hits += 1
            return 0.0
        v = d * bus_v
        if self.loss_fraction:
            s = current_sign if current_sign else (1.0 if d > 0.0 else -1.0)
            v -= s * self.loss_fraction * bus_v
            if (v > 0.0) != (d > 0.0):     # the loss cannot turn the pulse around
                v = 0.0
        return v
