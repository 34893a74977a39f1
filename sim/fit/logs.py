"""Bench logs: CSV files with units in the header, read into SI arrays.

A log is a CSV file with one header row. Each column name carries its unit after the quantity,
as in our traces: ``t_s, angle_rad, wheel_speed_rad_s, voltage_v, current_a``. Other units are
accepted when the name says so (``t_ms``, ``angle_deg``, ``wheel_speed_rpm``, ``current_ma``);
``angle [deg]`` and ``wheel_speed (rad/s)`` are read the same way. Columns we do not know (a
trace's ``mode``, ``measured_*``) are ignored. Lines starting with ``#`` are comments.
A 3D device's trace numbers its wheels (``wheel2_speed_rad_s``, ``wheel2_voltage_v``,
``wheel2_current_a``) and names the hinge angle ``tilt_x_rad``: `read_log`'s `aliases` read such
columns as the quantities a fit takes (`wheel_aliases`).

Sample times may be uneven but must increase. Angles may be logged wrapped (to +-180 degrees)
or unwrapped: they are unwrapped here, which assumes the body turns less than half a turn
between samples. Sign conventions are those of the traces (README "Conventions").
"""

from __future__ import annotations

import csv
import math
import re
from array import array
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..core.errors import InputError
from ..core.textfiles import open_text_file

MAX_LOG_BYTES = 200_000_000
MIN_ROWS = 10
MAX_ABS_TIME_S = 1e11
"""Largest time a log may carry, s (3,000 years: seconds since 1970 fit, as do ms and us columns)."""
GRID_FACTOR = 4
"""A log's span may be at most this many times its rows at its median step (gaps allowed, a bad
timestamp refused)."""

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


def wheel_aliases(wheel: int | None = None, *, hinge_angle: bool = False) -> dict[str, str]:
    """Column stems read as a fit's quantities: wheel `wheel`'s numbered columns (from 1, as a 3D
    trace numbers them) as wheel_speed, voltage and current, and with `hinge_angle` a 3D hinge
    trace's ``tilt_x`` (the angle about the hinge from upright) as angle."""
    out = {} if wheel is None else {f"wheel{wheel}_speed": "wheel_speed", f"wheel{wheel}_voltage": "voltage",
                                    f"wheel{wheel}_current": "current"}
    return out | ({"tilt_x": "angle"} if hinge_angle else {})


def classify_column(name: str, aliases: dict[str, str] | None = None) -> tuple[str, float] | None:
    """(quantity, factor to SI) for a header name we know, or None for a column we ignore.

    `aliases`: other column stems (``wheel2_speed``) -> the quantity they give (``wheel_speed``),
    read with that quantity's units. Raises ValueError (without a file name; the caller adds it)
    for a known quantity with no or an unknown unit, such as ``angle`` or ``angle_grad``.
    """
    norm = normalise_header(name)
    stems = [(q, q) for q in QUANTITIES] + list((aliases or {}).items())
    for stem, quantity in stems:
        units = QUANTITIES[quantity]
        if norm == stem:
            raise ValueError(f"column {name!r} has no unit; name it " +
                             " or ".join(f"{stem}_{u}" for u in units))
        if norm.startswith(stem + "_"):
            unit = norm[len(stem) + 1:]
            if unit in units:
                return quantity, units[unit]
            if "_" not in unit:  # 'angle_grad' is a unit we do not know; 'current_limit_a' is another column
                raise ValueError(f"column {name!r}: unknown unit {unit!r} for {quantity}; "
                                 f"accepted: {', '.join(units)}")
    return None


def read_log(path: str | Path, *, aliases: dict[str, str] | None = None) -> BenchLog:
    """Read a CSV bench log into SI arrays, a row at a time (memory: 8 bytes per value kept).

    `aliases`: other column stems read as quantities (`wheel_aliases`: a 3D trace's wheel columns).

    Raises InputError naming the file (and the column and line where it applies) when the file
    cannot be read, is not well-formed CSV (a quote left open, a field over the CSV reader's
    limit), a known column has no or an unknown unit, two columns give the same quantity, a
    value is not a number, the time column is missing, or the times are broken (see
    `_check_times`).
    """
    path = Path(path)
    where = str(path)
    # utf-8-sig: spreadsheet exports often start with a byte-order mark
    fh = open_text_file(path, max_bytes=MAX_LOG_BYTES, what="a bench log", encoding="utf-8-sig")
    lines = _DataLines(fh)
    try:
        with fh:
            reader = csv.reader(lines)
            header = next(reader, None)
            if header is None:
                raise InputError(f"{where}: the log is empty")
            mapping = _columns(header, where, aliases)
            values = {q: array("d") for q in mapping}
            for i, row in enumerate(reader, start=1):
                for q, (index, _, name) in mapping.items():
                    values[q].append(_number(row, index, name, i, where))
    except csv.Error as exc:
        raise InputError(f"{where}: line {lines.number}: not readable as CSV ({exc}); a quote left open, or a "
                         "field far too long?") from None
    except UnicodeDecodeError as exc:
        raise InputError(f"{where}: cannot read as UTF-8 text ({exc})") from None
    except OSError as exc:
        raise InputError(f"{where}: cannot read ({exc.strerror or exc})") from None
    n_rows = len(values["t"])
    if n_rows < MIN_ROWS:
        raise InputError(f"{where}: only {n_rows} data rows; a fit needs at least {MIN_ROWS}")
    columns = {SI_NAMES[q]: np.frombuffer(values.pop(q), dtype=float) * factor
               for q, (_, factor, _) in mapping.items()}
    t = columns.pop("t_s")
    _check_times(t, where, mapping["t"][2])
    if "angle_rad" in columns:
        columns["angle_rad"] = np.unwrap(columns["angle_rad"])
    names = {SI_NAMES[q]: name for q, (_, _, name) in mapping.items()}
    return BenchLog(path=where, t_s=t, columns=columns, source_names=names)


class _DataLines:
    """The file's lines without blank and comment lines; `number` is the file line last read."""

    def __init__(self, fh):
        self.fh, self.number = fh, 0

    def __iter__(self):
        for line in self.fh:
            self.number += 1
            if line.strip() and not line.lstrip().startswith("#"):
                yield line


def _columns(header: list[str], where: str, aliases: dict[str, str] | None = None) -> dict[str, tuple[int, float, str]]:
    """quantity -> (column index, factor to SI, header name), for the columns we know."""
    mapping: dict[str, tuple[int, float, str]] = {}
    for index, name in enumerate(header):
        try:
            kind = classify_column(name, aliases)
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
                         f"columns found: {', '.join(h.strip()[:40] for h in header[:20])}")
    return mapping


def _number(row: list[str], index: int, name: str, i: int, where: str) -> float:
    """Data row `i`'s value in column `index`, a finite float, else InputError naming both."""
    try:
        value = float(row[index])
    except (ValueError, IndexError):
        cell = row[index] if index < len(row) else "<missing>"
        if "\n" in cell or "\r" in cell:
            raise InputError(f"{where}: column {name!r}, data row {i}: a quoted value runs over "
                             f"{len(cell.splitlines())} lines; a quote left open?") from None
        shown = repr(cell) if len(cell) <= 40 else f"{cell[:40]!r}... ({len(cell)} characters)"
        raise InputError(f"{where}: column {name!r}, data row {i}: expected a number, found {shown}") from None
    if not math.isfinite(value):
        raise InputError(f"{where}: column {name!r}, data row {i}: the value {row[index][:40]!r} is not finite")
    return value


def _check_times(t: np.ndarray, where: str, name: str) -> None:
    """Times (s) must lie within +-MAX_ABS_TIME_S, increase, and leave no gap that makes the
    log's span more than GRID_FACTOR times its rows at the median step (a bad timestamp: the
    even grid the fit resamples onto would be that many times larger)."""
    far = np.nonzero(np.abs(t) > MAX_ABS_TIME_S)[0]
    if far.size:
        i = int(far[0])
        raise InputError(f"{where}: column {name!r}, data row {i + 1}: {t[i]:g} s is beyond +-{MAX_ABS_TIME_S:.0e} s; "
                         "a bad timestamp, or the wrong unit in the column name?")
    steps = np.diff(t)
    bad = np.nonzero(steps <= 0.0)[0]
    if bad.size:
        i = int(bad[0])
        raise InputError(f"{where}: column {name!r} must increase; data row {i + 2} ({t[i + 1]:g}) does not "
                         f"come after row {i + 1} ({t[i]:g})")
    median = float(np.median(steps))
    span = float(t[-1] - t[0])
    if span > GRID_FACTOR * len(t) * median:
        i = int(np.argmax(steps))
        raise InputError(f"{where}: column {name!r}: the times jump by {steps[i]:.6g} s between data rows {i + 1} "
                         f"and {i + 2} (the median step is {median:.3g} s), so the log spans {span / median:.3g} "
                         f"steps for {len(t)} rows; a bad timestamp?")


def resample_uniform(t: np.ndarray, x: np.ndarray, *, step_s: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Linear interpolation of `x(t)` onto an even grid (default step: the median sample spacing).

    Used only to find features (extremes, steps); fits use the logged samples themselves.
    """
    dt = float(np.median(np.diff(t))) if step_s is None else step_s
    n = int(math.floor((t[-1] - t[0]) / dt)) + 1
    grid = t[0] + dt * np.arange(n)
    return grid, np.interp(grid, t, x)
