"""The 3D trial's trace: per-axis and per-wheel columns from a declared list, one row per physics step.

Row k holds the true state at t = k * step (before that step) and each wheel's voltage, current and
torque over the step that follows; measured values are the latest control tick's, held. Angles are
as the engine's semi-implicit Euler step leaves them (half a step ahead of the rates). Column names
say the quantity, the axis or wheel (wheels numbered from 1 in the scenario's order) and the unit;
see `sim.core.frames` for the attitude conventions.
"""

from __future__ import annotations

import numpy as np

from .trace import POWER_CSV_COLUMNS, Trace, csv_field


def column_names(*, ball: bool, n_wheels: int, floor: bool = False, power: bool = False,
                 extra: tuple[str, ...] = ()) -> tuple[tuple[str, str], ...]:
    """(attribute, CSV name) of every numeric column, in CSV order. A body on the floor adds the
    balancing contact's world position, whether the body touches the floor (1/0) and |F_t| / F_n of
    its floor contacts (`sim.run.floor_contact`), after the others; a floor body balancing on an edge
    (designed as on a hinge) also records its whole attitude (`tilt_y_rad`, `heading_rad`): it is free,
    and with an IMU its whole rate (the IMU needs it).
    A trial through the power chain (`power`) adds the shared bus, named as on one wheel
    (`sim.run.trace.POWER_CSV_COLUMNS`): its voltage at each step's start and the step's mean bus
    current, the sum over the wheels (written every step, not held); each wheel's voltage column then
    holds the mean voltage its bridge applied, as the one-wheel trace's does. `extra`: the sensing columns
    (`sim.physics.imu_sensing3d.sensing_columns3d`), last, their attribute their CSV name."""
    axes = ("x", "y", "z") if ball or (floor and extra) else ("x",)
    cols = [("t", "t_s"), ("tilt", "tilt_rad"), ("tilt_x", "tilt_x_rad")]
    if ball or floor:
        cols += [("tilt_y", "tilt_y_rad"), ("heading", "heading_rad")]
    cols += [(f"rate_{a}", f"rate_{a}_rad_s") for a in axes]
    for i in range(1, n_wheels + 1):
        cols += [(f"w{i}_speed", f"wheel{i}_speed_rad_s"), (f"w{i}_angle", f"wheel{i}_angle_rad"),
                 (f"w{i}_voltage", f"wheel{i}_voltage_v"), (f"w{i}_current", f"wheel{i}_current_a"),
                 (f"w{i}_torque", f"wheel{i}_torque_n_m")]
    cols += [("m_tilt_x", "measured_tilt_x_rad")] + ([("m_tilt_y", "measured_tilt_y_rad")] if ball else [])
    cols += [(f"m_rate_{a}", f"measured_rate_{a}_rad_s") for a in axes]
    cols += [(f"m_w{i}", f"measured_wheel{i}_speed_rad_s") for i in range(1, n_wheels + 1)]
    if floor:
        cols += [("contact_x", "contact_x_m"), ("contact_y", "contact_y_m"), ("contact_z", "contact_z_m"),
                 ("in_contact", "in_contact"),
                 ("friction_ratio", "friction_ratio")]
    if power:
        cols += [("bus_volts", POWER_CSV_COLUMNS[0]), ("bus_amps", POWER_CSV_COLUMNS[1])]
    return tuple(cols) + tuple((name, name) for name in extra)


class Trace3D(Trace):
    """Preallocated columns (`column_names`) for `capacity` rows; `n` rows are filled."""

    def __init__(self, capacity: int, *, step_s: float, ball: bool, n_wheels: int, floor: bool = False,
                 shared: bool = False, power: bool = False, extra: tuple[str, ...] = ()):
        self.ball, self.n_wheels = ball, n_wheels
        self.csv_names = column_names(ball=ball, n_wheels=n_wheels, floor=floor, power=power, extra=extra)
        self.FLOAT_COLUMNS = tuple(attr for attr, _ in self.csv_names)
        super().__init__(capacity, step_s=step_s, shared=shared)   # shared: an isolated trial (`Trace`)

    def columns(self) -> dict[str, np.ndarray]:
        return {name: getattr(self, attr)[: self.n] for attr, name in self.csv_names}

    @property
    def has_power_columns(self) -> bool:
        """True for a trial through the power chain (the bus columns are recorded)."""
        return "bus_volts" in self.FLOAT_COLUMNS

    @property
    def supply_voltage(self) -> np.ndarray:
        """The bus voltage column (all rows), V; power-chain traces only."""
        return self.bus_volts

    @property
    def bus_current(self) -> np.ndarray:
        """The bus current column (all rows, the sum over the wheels), A; power-chain traces only."""
        return self.bus_amps

    def wheel(self, i: int, quantity: str) -> np.ndarray:
        """Wheel i's (from 1) filled column of `quantity` (speed, angle, voltage, current, torque)."""
        return getattr(self, f"w{i}_{quantity}")[: self.n]


def write_csv3d(trace: Trace3D, path, *, block_rows: int = 4096) -> None:
    """Write the 3D trace as CSV (header with units, 9 significant digits, `mode` last)."""
    names = [name for _, name in trace.csv_names]
    attrs = [attr for attr, _ in trace.csv_names]
    phases = [csv_field(name) for name in trace.phases]
    fmt = ",".join(["%.9g"] * len(names)) + ",%s\n"
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(",".join(names + ["mode"]) + "\n")
        for start in range(0, trace.n, block_rows):
            stop = min(start + block_rows, trace.n)
            rows = np.column_stack([getattr(trace, a)[start:stop] for a in attrs]).tolist()
            modes = [phases[c] for c in trace.mode[start:stop].tolist()] if phases else [""] * (stop - start)
            fh.write("".join([fmt % (*row, mode) for row, mode in zip(rows, modes)]))
