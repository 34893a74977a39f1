"""The trial's trace: preallocated arrays, one row per physics step.

Row k holds the true state at t = k * step (before that step) and the voltage, current and
torque applied over the step that follows. Measured values are those of the latest control
tick, held (zero-order hold), as the strategy saw them.
"""

from __future__ import annotations

import csv
import io
import mmap
import os
import tempfile

import numpy as np

from ..core.angles import wrap_angles

# CSV columns in order; units in the names. `mode` is the strategy's phase at that row.
CSV_COLUMNS = (
    "t_s", "angle_rad", "rate_rad_s", "wheel_speed_rad_s", "voltage_v", "current_a", "torque_n_m",
    "power_w", "wheel_angle_rad", "measured_angle_rad", "measured_rate_rad_s", "measured_wheel_speed_rad_s",
    "mode",
)

POWER_CSV_COLUMNS = ("supply_voltage_v", "bus_current_a")
"""Extra columns of a trial through the power chain (a battery or a drive model), written every step
(not held between ticks): the bus voltage at each step's start, V, and the step's mean bus current, A
(negative: regenerating)."""


MAX_PHASES = 256
"""Distinct phase names a trace keeps. The first MAX_PHASES names a strategy uses get their own
code in the `mode` column; every later new name is recorded as OVERFLOW_PHASE (one more code), so
the column's codes stay far below an int16's 32,767 whatever the strategy does."""

OVERFLOW_PHASE = "(other phases)"
"""The phase recorded for names past the first MAX_PHASES."""

MAX_PHASE_CHARS = 200
"""A phase name is kept to its first MAX_PHASE_CHARS characters (names are a few words)."""

IN_MEMORY_ROWS = 1_000_000
"""Above this many rows (about 90 MB of columns, a 1,000 s trial at 1 kHz) the columns live in a
temporary file mapped into memory instead of in anonymous memory: the kernel can write those pages
out under memory pressure, so a trial near the 5,000,000-step limit (about 450 MB of trace)
cannot push the machine into swap or the out-of-memory killer."""


class Trace:
    """Preallocated columns for `capacity` rows; `n` rows are filled.

    `shared=True` backs the columns with a temporary file mapped MAP_SHARED, so that a process
    forked after construction writes rows its parent can read; long traces are backed that way too
    (see IN_MEMORY_ROWS). Either way the columns are plain numpy arrays to their users.
    """

    FLOAT_COLUMNS = ("t", "angle", "rate", "wheel_angle", "wheel_speed", "voltage", "current", "torque",
                     "meas_angle", "meas_rate", "meas_wheel")

    def __init__(self, capacity: int, *, step_s: float, shared: bool = False, extra: tuple[str, ...] = ()):
        self.step_s = step_s
        self.n = 0
        n_float = len(self.FLOAT_COLUMNS) + len(extra)
        n_bytes = capacity * (8 * n_float + 2)
        mapped = _file_backed(n_bytes) if (shared or capacity > IN_MEMORY_ROWS) else None
        self.file_backed = mapped is not None
        if mapped is None and shared and capacity > 0:
            mapped = _anonymous_shared(n_bytes)  # no room in the temporary folder: shared memory instead
            if mapped is None:
                raise OSError(f"no room for a shared trace of {n_bytes} bytes, in the temporary folder or in memory")
        if mapped is None:
            floats, self.mode = np.zeros((n_float, capacity)), np.zeros(capacity, dtype=np.int16)
        else:
            floats = mapped[: 8 * n_float * capacity].view(np.float64).reshape(n_float, capacity)
            self.mode = mapped[8 * n_float * capacity:].view(np.int16)
        for i, name in enumerate(self.FLOAT_COLUMNS):
            setattr(self, name, floats[i])
        # columns some scenarios add (an IMU's readings, an estimator's output), named with units;
        # held between control ticks like the measured values, written to the CSV before `mode`
        self.extra = {name: floats[len(self.FLOAT_COLUMNS) + i] for i, name in enumerate(extra)}
        self.phases: list[str] = []
        self._codes: dict[str, int] = {}

    def phase_code(self, phase: str) -> int:
        """The `mode` code of phase name `phase`, adding the name if new (see MAX_PHASES)."""
        phase = str.__str__(phase)[:MAX_PHASE_CHARS]     # a plain str: no strategy code runs here
        if len(self._codes) != len(self.phases):       # `phases` was set from outside (an isolated trial)
            self._codes = {name: i for i, name in enumerate(self.phases)}
        code = self._codes.get(phase)
        if code is None:
            if len(self.phases) >= MAX_PHASES:
                phase = OVERFLOW_PHASE
                code = self._codes.get(phase)
            if code is None:
                code = len(self.phases)
                self.phases.append(phase)
                self._codes[phase] = code
        return code

    @property
    def has_power_columns(self) -> bool:
        """True for a trial through the power chain (POWER_CSV_COLUMNS are among the extra columns)."""
        return POWER_CSV_COLUMNS[0] in self.extra

    @property
    def supply_voltage(self) -> np.ndarray:
        """The bus voltage column (all rows), V; power-chain traces only."""
        return self.extra[POWER_CSV_COLUMNS[0]]

    @property
    def bus_current(self) -> np.ndarray:
        """The bus current column (all rows), A; power-chain traces only."""
        return self.extra[POWER_CSV_COLUMNS[1]]

    def view(self, name: str) -> np.ndarray:
        """A filled column (a view, no copy); `name` a float column, `mode` or an extra column."""
        col = self.extra.get(name)
        return (getattr(self, name) if col is None else col)[: self.n]

    @property
    def power(self) -> np.ndarray:
        """Electrical power into the winding, V * i, W (negative when regenerating)."""
        return self.view("voltage") * self.view("current")

    def modes(self) -> list[str]:
        return [self.phases[c] for c in self.view("mode")] if self.phases else [""] * self.n

    def columns(self) -> dict[str, np.ndarray]:
        """The CSV columns (numeric ones), named with units."""
        return _block_columns(self, 0, self.n)

    def state_at(self, t_s: float) -> dict[str, float]:
        """The row nearest time `t_s` (for frame overlays and checks)."""
        k = int(min(max(round(t_s / self.step_s), 0), max(self.n - 1, 0)))
        cols = self.columns()
        row = {name: float(col[k]) for name, col in cols.items()}
        row["mode"] = self.phases[self.mode[k]] if self.phases else ""
        return row


def _file_backed(n_bytes: int) -> np.ndarray | None:
    """A zeroed uint8 array of `n_bytes` mapped from an unlinked temporary file, or None when the
    temporary directory has no room. The file's blocks are reserved up front (posix_fallocate):
    a mapped page that cannot be written back later would kill the process with SIGBUS."""
    if n_bytes == 0:
        return None
    try:
        with tempfile.TemporaryFile(prefix="wheelbench-trace-") as fh:
            if hasattr(os, "posix_fallocate"):
                os.posix_fallocate(fh.fileno(), 0, n_bytes)
            else:
                fh.truncate(n_bytes)
            return np.memmap(fh, dtype=np.uint8, mode="r+", shape=(n_bytes,))  # the mapping outlives the file
    except OSError:
        return None


def _anonymous_shared(n_bytes: int) -> np.ndarray | None:
    """A zeroed uint8 array in an anonymous MAP_SHARED mapping (memory, not the temporary folder),
    seen by processes forked after it is made; None when the memory cannot be had."""
    try:
        return np.frombuffer(mmap.mmap(-1, n_bytes), dtype=np.uint8)
    except (OSError, ValueError, OverflowError):
        return None


CSV_BLOCK_ROWS = 4096


def write_csv(trace: Trace, path) -> None:
    """Write the trace as CSV (header with units) to `path` (caller handles atomicity).

    Written a block of rows at a time: memory beyond the trace itself stays a few MB however long
    the trial (one table of Python floats for a 5,000,000-row trace would take gigabytes).
    """
    names = list(CSV_COLUMNS[:-1]) + list(trace.extra)
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(",".join(names + ["mode"]) + "\n")
        # 9 significant digits (a float32-level record of float64 state)
        fmt = ",".join(["%.9g"] * len(names)) + ",%s\n"
        # phase names as the csv module quotes them (commas, quotes, line breaks), once per name
        phases = [csv_field(name) for name in trace.phases]
        for start in range(0, trace.n, CSV_BLOCK_ROWS):
            stop = min(start + CSV_BLOCK_ROWS, trace.n)
            cols = _block_columns(trace, start, stop)
            rows = np.column_stack([cols[n] for n in names]).tolist()  # Python floats format ~2x faster
            modes = [phases[c] for c in trace.mode[start:stop].tolist()] if phases else [""] * (stop - start)
            fh.write("".join([fmt % (*row, mode) for row, mode in zip(rows, modes)]))


def csv_field(text: str) -> str:
    """`text` as the csv module writes it as a field that is not alone on its row (quoted only
    where needed: a delimiter, a quote or a line break inside)."""
    buffer = io.StringIO()
    # the writer quotes the characters of its line terminator: both, whatever the file's rows end with
    csv.writer(buffer, lineterminator="\r\n").writerow(["", text])
    return buffer.getvalue()[1:-2]


def _block_columns(trace: Trace, start: int, stop: int) -> dict[str, np.ndarray]:
    """The CSV's numeric columns for rows start..stop-1 (same values as `Trace.columns`)."""
    s = slice(start, stop)
    return _base_columns(trace, s) | {name: col[s] for name, col in trace.extra.items()}


def _base_columns(trace: Trace, s: slice) -> dict[str, np.ndarray]:
    return {
        "t_s": trace.t[s],
        "angle_rad": wrap_angles(trace.angle[s].copy()),
        "rate_rad_s": trace.rate[s],
        "wheel_speed_rad_s": trace.wheel_speed[s],
        "voltage_v": trace.voltage[s],
        "current_a": trace.current[s],
        "torque_n_m": trace.torque[s],
        "power_w": trace.voltage[s] * trace.current[s],
        "wheel_angle_rad": trace.wheel_angle[s],
        "measured_angle_rad": trace.meas_angle[s],
        "measured_rate_rad_s": trace.meas_rate[s],
        "measured_wheel_speed_rad_s": trace.meas_wheel[s],
    }
