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

from ..model.cells import open_circuit_volts_per_cell


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
        self.volts = self.open_circuit_volts()

    def open_circuit_volts(self) -> float:
        """The pack's open-circuit voltage at its present state of charge, V."""
        return self.cells * open_circuit_volts_per_cell(self.chemistry, self.soc)

    def draw(self, bus_current_a: float, dt_s: float) -> None:
        """Take `bus_current_a` (A, negative charges the pack) from the bus for `dt_s` seconds."""
        self.soc -= bus_current_a * dt_s / self.capacity_c
        self.charge_used_c += bus_current_a * dt_s
        target = self.open_circuit_volts() - self.r * bus_current_a
        if self.c is None or self.r <= 0.0:
            self.volts = target
        else:
            # C dV/dt = (OCV - V)/R - I: V relaxes to OCV - R I with tau = R C (current held over the step)
            self.volts = target + (self.volts - target) * math.exp(-dt_s / (self.r * self.c))


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
