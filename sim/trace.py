"""The trial's trace: preallocated arrays, one row per physics step.

Row k holds the true state at t = k * step (before that step) and the voltage, current and
torque applied over the step that follows. Measured values are those of the latest control
tick, held (zero-order hold), as the strategy saw them.
"""

from __future__ import annotations

import numpy as np

from .engine import wrap_angles

# CSV columns in order; units in the names. `mode` is the strategy's phase at that row.
CSV_COLUMNS = (
    "t_s", "angle_rad", "rate_rad_s", "wheel_speed_rad_s", "voltage_v", "current_a", "torque_n_m",
    "power_w", "wheel_angle_rad", "measured_angle_rad", "measured_rate_rad_s", "measured_wheel_speed_rad_s",
    "mode",
)


class Trace:
    """Preallocated columns for `capacity` rows; `n` rows are filled."""

    FLOAT_COLUMNS = ("t", "angle", "rate", "wheel_angle", "wheel_speed", "voltage", "current", "torque",
                     "meas_angle", "meas_rate", "meas_wheel")

    def __init__(self, capacity: int, *, step_s: float):
        self.step_s = step_s
        self.n = 0
        for name in self.FLOAT_COLUMNS:
            setattr(self, name, np.zeros(capacity))
        self.mode = np.zeros(capacity, dtype=np.int16)
        self.phases: list[str] = []

    def phase_code(self, phase: str) -> int:
        try:
            return self.phases.index(phase)
        except ValueError:
            self.phases.append(phase)
            return len(self.phases) - 1

    def view(self, name: str) -> np.ndarray:
        """A filled column (a view, no copy)."""
        return getattr(self, name)[: self.n]

    @property
    def power(self) -> np.ndarray:
        """Electrical power into the winding, V * i, W (negative when regenerating)."""
        return self.view("voltage") * self.view("current")

    def modes(self) -> list[str]:
        return [self.phases[c] for c in self.view("mode")] if self.phases else [""] * self.n

    def columns(self) -> dict[str, np.ndarray]:
        """The CSV columns (numeric ones), named with units."""
        return {
            "t_s": self.view("t"),
            "angle_rad": wrap_angles(self.view("angle").copy()),
            "rate_rad_s": self.view("rate"),
            "wheel_speed_rad_s": self.view("wheel_speed"),
            "voltage_v": self.view("voltage"),
            "current_a": self.view("current"),
            "torque_n_m": self.view("torque"),
            "power_w": self.power,
            "wheel_angle_rad": self.view("wheel_angle"),
            "measured_angle_rad": self.view("meas_angle"),
            "measured_rate_rad_s": self.view("meas_rate"),
            "measured_wheel_speed_rad_s": self.view("meas_wheel"),
        }

    def state_at(self, t_s: float) -> dict[str, float]:
        """The row nearest time `t_s` (for frame overlays and checks)."""
        k = int(min(max(round(t_s / self.step_s), 0), max(self.n - 1, 0)))
        cols = self.columns()
        row = {name: float(col[k]) for name, col in cols.items()}
        row["mode"] = self.phases[self.mode[k]] if self.phases else ""
        return row


def write_csv(trace: Trace, path) -> None:
    """Write the trace as CSV (header with units) to `path` (caller handles atomicity)."""
    cols = trace.columns()
    names = list(cols)
    data = np.column_stack([cols[n] for n in names]) if trace.n else np.zeros((0, len(names)))
    modes = trace.modes()
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(",".join(names + ["mode"]) + "\n")
        # 9 significant digits (a float32-level record of float64 state), written in blocks of rows
        fmt = ",".join(["%.9g"] * len(names)) + ",%s\n"
        rows = data.tolist()  # Python floats format about twice as fast as numpy scalars
        for start in range(0, len(rows), 4096):
            fh.write("".join([fmt % (*row, mode) for row, mode in
                              zip(rows[start:start + 4096], modes[start:start + 4096])]))
