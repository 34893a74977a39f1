"""Bench logs: CSV files with units in the header, read into SI arrays.

A log is a CSV file with one header row. Each column name carries its unit after the quantity,
as in our traces: ``t_s, angle_rad, wheel_speed_rad_s, voltage_v, current_a``. Other units are
accepted when the name says so (``t_ms``, ``angle_deg``, ``wheel_speed_rpm``, ``current_ma``);
``angle [deg]`` and ``wheel_speed (rad/s)`` are read the same way. Columns we do not know (a
trace's ``mode``, ``measured_*``) are ignored. Lines starting with ``#`` are comments.

Sample times may be uneven but must increase. Angles may be logged wrapped (to +-180 degrees)
or unwrapped: they are unwrapped here, which assumes the body turns less than half a turn
between samples. Sign conventions are those of the traces (README "Conventions").
"""

from __future__ import annotations

import csv
import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import InputError
from .textfiles import read_text_file

MAX_LOG_BYTES = 200_000_000
MIN_ROWS = 10

# quantity -> {unit spelling: factor to SI}; the SI unit is the first entry
QUANTITIES: dict[str, dict[str, float]] = {
    "t": {"s": 1.0, "ms": 1e-3, "us": 1e-6},
    "angle": {"rad": 1.0, "deg": math.pi / 180.0},
    "wheel_speed": {"rad_s": 1.0, "rpm": 2.0 * math.pi / 60.0, "deg_s": math.pi / 180.0, "rev_s": 2.0 * math.pi,
                    "rps": 2.0 * math.pi},
    "voltage": {"v": 1.0, "mv": 1e-3},
    "current": {"a": 1.0, "ma": 1e-3},
}
SI_NAMES = {"t": "t_s", "angle": "angle_rad", "wheel_speed": "wheel_speed_rad_s", "voltage": "voltage_v",
            "current": "current_a"}


@dataclass(frozen=True)
class BenchLog:
    """A bench log in SI. `columns` maps SI names (``angle_rad`` ...) to arrays aligned with `t_s`."""

    path: str
    t_s: np.ndarray
    columns: dict[str, np.ndarray] = field(default_factory=dict)
    source_names: dict[str, str] = field(default_factory=dict)
    """SI name -> the header name it was read from (for messages)."""

    def has(self, name: str) -> bool:
        return name in self.columns

    def require(self, name: str, *, why: str) -> np.ndarray:
        """The column `name` (SI), or an InputError naming the file, the column and the reason."""
        if name not in self.columns:
            quantity = next(q for q, n in SI_NAMES.items() if n == name)
            spellings = ", ".join(f"{quantity}_{u}" for u in QUANTITIES[quantity])
            found = ", ".join(self.source_names.values()) or "none"
            raise InputError(f"{self.path}: missing column {name} ({why}); accepted spellings: {spellings}; "
                             f"columns found: {found}")
        return self.columns[name]

    def label(self, name: str) -> str:
        """The header name a SI column came from."""
        return self.source_names.get(name, name)


def normalise_header(name: str) -> str:
    """'Wheel speed [rad/s]' -> 'wheel_speed_rad_s': lower case, brackets and separators to '_'."""
    text = name.strip().lower().replace("/", "_")
    text = re.sub(r"[\s\[\]()]+", "_", text)
    return re.sub(r"_+", "_", text).strip("_")


def classify_column(name: str) -> tuple[str, float] | None:
    """(quantity, factor to SI) for a header name we know, or None for a column we ignore.

    Raises InputError (without a file name; the caller adds it) for a known quantity with no or an
    unknown unit, such as ``angle`` or ``angle_grad``.
    """
    norm = normalise_header(name)
    for quantity, units in QUANTITIES.items():
        if norm == quantity:
            raise ValueError(f"column {name!r} has no unit; name it " +
                             " or ".join(f"{quantity}_{u}" for u in units))
        if norm.startswith(quantity + "_"):
            unit = norm[len(quantity) + 1:]
            if unit in units:
                return quantity, units[unit]
            if "_" not in unit:  # 'angle_grad' is a unit we do not know; 'current_limit_a' is another column
                raise ValueError(f"column {name!r}: unknown unit {unit!r} for {quantity}; "
                                 f"accepted: {', '.join(units)}")
    return None


def read_log(path: str | Path) -> BenchLog:
    """Read a CSV bench log into SI arrays.

    Raises InputError naming the file (and the column and line where it applies) when the file
    cannot be read, a known column has no or an unknown unit, two columns give the same quantity,
    a value is not a number, the time column is missing, or the times do not increase.
    """
    path = Path(path)
    where = str(path)
    header, rows = _read_rows(path)
    mapping: dict[str, tuple[int, float, str]] = {}
    for index, name in enumerate(header):
        try:
            kind = classify_column(name)
        except ValueError as exc:
            raise InputError(f"{where}: {exc}") from None
        if kind is None:
            continue
        quantity, factor = kind
        if quantity in mapping:
            raise InputError(f"{where}: columns {mapping[quantity][2]!r} and {name!r} both give {quantity}; keep one")
        mapping[quantity] = (index, factor, name.strip())
    if "t" not in mapping:
        raise InputError(f"{where}: missing column t_s (time; t_ms and t_us are accepted too); "
                         f"columns found: {', '.join(h.strip() for h in header)}")
    columns = {SI_NAMES[q]: _numeric(rows, idx, name, where) * factor for q, (idx, factor, name) in mapping.items()}
    t = columns.pop("t_s")
    _check_times(t, where, mapping["t"][2])
    if "angle_rad" in columns:
        columns["angle_rad"] = np.unwrap(columns["angle_rad"])
    names = {SI_NAMES[q]: name for q, (_, _, name) in mapping.items()}
    return BenchLog(path=where, t_s=t, columns=columns, source_names=names)


def _read_rows(path: Path) -> tuple[list[str], list[list[str]]]:
    where = str(path)
    # utf-8-sig: spreadsheet exports often start with a byte-order mark
    text = read_text_file(path, max_bytes=MAX_LOG_BYTES, what="a bench log", encoding="utf-8-sig")
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise InputError(f"{where}: the log is empty")
    table = list(csv.reader(lines))
    header, rows = table[0], table[1:]
    if len(rows) < MIN_ROWS:
        raise InputError(f"{where}: only {len(rows)} data rows; a fit needs at least {MIN_ROWS}")
    return header, rows


def _numeric(rows: list[list[str]], index: int, name: str, where: str) -> np.ndarray:
    out = np.empty(len(rows))
    for i, row in enumerate(rows):
        try:
            out[i] = float(row[index])
        except (ValueError, IndexError):
            cell = row[index] if index < len(row) else "<missing>"
            raise InputError(f"{where}: column {name!r}, data row {i + 1}: expected a number, found {cell!r}") from None
        if not math.isfinite(out[i]):
            raise InputError(f"{where}: column {name!r}, data row {i + 1}: the value {row[index]!r} is not finite")
    return out


def _check_times(t: np.ndarray, where: str, name: str) -> None:
    steps = np.diff(t)
    bad = np.nonzero(steps <= 0.0)[0]
    if bad.size:
        i = int(bad[0])
        raise InputError(f"{where}: column {name!r} must increase; data row {i + 2} ({t[i + 1]:g}) does not "
                         f"come after row {i + 1} ({t[i]:g})")


def resample_uniform(t: np.ndarray, x: np.ndarray, *, step_s: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Linear interpolation of `x(t)` onto an even grid (default step: the median sample spacing).

    Used only to find features (extremes, steps); fits use the logged samples themselves.
    """
    dt = float(np.median(np.diff(t))) if step_s is None else step_s
    n = int(math.floor((t[-1] - t[0]) / dt)) + 1
    grid = t[0] + dt * np.arange(n)
    return grid, np.interp(grid, t, x)
