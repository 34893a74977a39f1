"""The supply side of the drive: a battery pack or a bench supply, and the bus capacitance between
it and the bridge.

Inputs and outputs (SI; one call per physics step):
    `draw(bus_current_a, dt_s)`: the bridge's mean bus current over the step, A (positive drawn from
    the supply, negative pushed back by a braking or decelerating motor).
    `volts`: the bus voltage the bridge sees at the start of the next step, V.

Battery (references.md "Power and drive"): V_bus = OCV(SoC) - R_int I_bus, the open-circuit voltage
read from the chemistry's state-of-charge table; the charge drawn is counted (SoC falls by
I dt / capacity; regeneration raises it). With a bus capacitance C the capacitor sits behind the
pack's resistance, so the bus relaxes towards OCV - R_int I_bus with time constant R_int C (solved
exactly over the step with the current held). A pack without a capacitance is the algebraic sag.

Bench supply: a fixed source that cannot sink current (a typical laboratory supply). Without a bus
capacitance it is the ideal source of today's runner (regenerated current disappears into it). With
one, current pushed back charges the capacitance (C dV = -I_bus dt), and the supply only takes over
again once the capacitance has been drawn back down to its set voltage.

The open-circuit tables and default cut-offs live in `sim.model.cells` (with their sources).
"""

from __future__ import annotations

import math

from ..model.cells import OCV_TABLES


class Battery:
    """A pack of `cells` in series: OCV(SoC) minus the sag R_int I_bus, charge counted, optional bus
    capacitance behind R_int. State: `soc` (0..1), `volts` (bus, V), `charge_used_c` (C, net drawn)."""

    def __init__(self, *, chemistry: str, cells: int, capacity_c: float, resistance_ohm: float,
                 soc: float, capacitance_f: float | None):
        self.chemistry, self.cells = chemistry, cells
        self.capacity_c = capacity_c
        self.r = resistance_ohm
        self.c = capacitance_f
        self.soc = soc
        self.charge_used_c = 0.0
        self._table = OCV_TABLES[chemistry]
        self._segment(soc)
        self._decay_dt, self._decay = None, 0.0
        self.volts = self.open_circuit_volts()

    def _segment(self, soc: float) -> None:
        """Hold the table's segment around `soc` (the state of charge moves slowly: found again only
        when it leaves the segment): the pack's open-circuit volts are v0 + slope (soc - s0) there."""
        table = self._table
        s = 0.0 if soc < 0.0 else (1.0 if soc > 1.0 else soc)
        j = 1
        while j < len(table) - 1 and table[j][0] < s:
            j += 1
        (s0, v0), (s1, v1) = table[j - 1], table[j]
        # beyond the table's ends the end value holds (a clamped state of charge)
        self._lo = s0 if j > 1 else -math.inf
        self._hi = s1 if j < len(table) - 1 else math.inf
        self._s0, self._v0 = s0, self.cells * v0
        self._slope = self.cells * (v1 - v0) / (s1 - s0)

    def open_circuit_volts(self) -> float:
        """The pack's open-circuit voltage at its present state of charge, V (linear in the table's segment)."""
        soc = self.soc
        if not self._lo <= soc <= self._hi:
            self._segment(soc)
        s = 0.0 if soc < 0.0 else (1.0 if soc > 1.0 else soc)
        return self._v0 + self._slope * (s - self._s0)

    def draw(self, bus_current_a: float, dt_s: float) -> None:
        """Take `bus_current_a` (A, negative charges the pack) from the bus for `dt_s` seconds."""
        q = bus_current_a * dt_s
        soc = self.soc = self.soc - q / self.capacity_c
        self.charge_used_c += q
        if not self._lo <= soc <= self._hi:
            self._segment(soc)
        s = 0.0 if soc < 0.0 else (1.0 if soc > 1.0 else soc)
        # `open_circuit_volts`, inline (every step), less the sag
        target = self._v0 + self._slope * (s - self._s0) - self.r * bus_current_a
        if self.c is None or self.r <= 0.0:
            self.volts = target
        else:
            # C dV/dt = (OCV - V)/R - I: V relaxes to OCV - R I with tau = R C (current held over the step)
            if dt_s != self._decay_dt:
                self._decay_dt, self._decay = dt_s, math.exp(-dt_s / (self.r * self.c))
            self.volts = target + (self.volts - target) * self._decay


class BenchSupply:
    """A fixed source of `volts` (V) that cannot sink; a bus capacitance (F) takes regenerated charge.

    Without a capacitance the supply is ideal both ways (today's runner). State: `volts` (bus, V),
    `charge_used_c` (C drawn from the supply; it never takes charge back)."""

    def __init__(self, *, volts: float, capacitance_f: float | None):
        self.set_v = volts
        self.volts = volts
        self.c = capacitance_f
        self.charge_used_c = 0.0

    def draw(self, bus_current_a: float, dt_s: float) -> None:
        if self.c is None:
            self.charge_used_c += bus_current_a * dt_s
            return
        if bus_current_a < 0.0 or self.volts > self.set_v:
            # the capacitance alone: charged by regeneration, or drawn back down to the set voltage
            v = self.volts - bus_current_a * dt_s / self.c
            if v < self.set_v:   # drawn below the set voltage within the step: the supply takes over
                self.charge_used_c += (self.set_v - v) * self.c
                v = self.set_v
            self.volts = v
        else:
            self.charge_used_c += bus_current_a * dt_s
