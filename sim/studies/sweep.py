"""Design sweeps: a grid over scenario keys, each point simulated and judged, persisted as it finishes.

`--vary KEY=LO..HI:N` spaces N values evenly from LO to HI (units allowed: `drive.supply=6V..24V:4`);
`--vary KEY=a,b,c` lists values. Points are the grid's cross product, numbered in row-major order
(the first key varies slowest). Each point re-validates the raw scenario with its values set,
runs the scenario's own trial, judges it against `requirements`, the wheel burst check and the
long holds of `wheel_runaway_time_s` (`sim.studies.verdicts.runaway_hold`), and,
with `trials`, adds Monte Carlo trials over the tolerances around that point.

Persistence: every finished point is appended to `sweep.jsonl` (flushed and fsynced), so a
sweep killed at any moment loses nothing finished; `results.csv` is rewritten atomically from
it (in point order) every few seconds and at the end. Only a compact summary of each point stays
in memory (`PointSummaries`), so memory does not grow as points finish. Re-running the same sweep into the same folder skips the
finished points. Seeds come from the point's trial.seed and its index, so the table is the same
whatever the number of workers or the order points finish in.
"""

from __future__ import annotations

import copy
import csv
import hashlib
import json
import os
import re
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import yaml

from ..core.errors import InputError, ScenarioError
from ..core.outputs import MachineFault, atomic_path, clean_json, fault_message
from ..core.yaml12 import load_yaml12
from ..model.overrides import parse_path, set_path
from ..model.tolerances import trial_seed, value_at, wilson_interval
from ..run.parallel import run_tasks

JOURNAL = "sweep.jsonl"
RESULTS = "results.csv"
CSV_EVERY_S = 3.0
MAX_POINTS = 1_000_000
METRIC_COLUMNS = ("point", "seed", "outcome", "caught_at_s", "settle_time_s", "peak_wheel_speed_rad_s",
                  "wheel_speed_margin", "peak_current_a", "rms_current_a", "winding_temperature_c",
                  "wheel_burst_safety_factor", "burst_note", "wheel_runaway_time_s", "pushes_survived", "pushes",
                  "mc_trials", "pass_fraction", "pass_fraction_low", "pass_fraction_high",
                  "passed", "fail_reasons", "message")
_WHEEL_COUNT = re.compile(rb'"wheel_count": (\d+)')
_RANGE = re.compile(r"^(?P<lo>.+?)\.\.(?P<hi>.+):(?P<n>\d+)$")


@dataclass(frozen=True)
class Vary:
    """One varied key: `key` exactly as the user wrote it, its parsed path, the values to set."""

    key: str
    path: tuple
    values: tuple
    unit: str = ""
    """The unit the user typed the range in ("" for bare SI numbers and lists): the figure's axes use it."""


def parse_vary(text: str) -> Vary:
    """Parse `KEY=LO..HI:N` or `KEY=a,b,c`. Raises InputError naming the option."""
    where = f"--vary {text!r}"
    key, sep, spec = text.partition("=")
    if not sep or not spec.strip():
        raise InputError(f"{where}: expected KEY=LO..HI:N or KEY=a,b,c")
    path = tuple(parse_path(key.strip(), where=where))
    m = _RANGE.match(spec.strip())
    values = _range_values(m, where) if m else _list_values(spec, where)
    unit = values[0].split(" ", 1)[1] if m and values and isinstance(values[0], str) and " " in values[0] else ""
    return Vary(key.strip(), path, tuple(values), unit)


def _range_values(m, where: str) -> list:
    from ..core.units import powers_are_small, registry
    n = int(m.group("n"))
    if not 1 <= n <= 100_000:
        raise InputError(f"{where}: N must be from 1 to 100000, found {n}")
    try:
        if not all(powers_are_small(m.group(g)) for g in ("lo", "hi")):
            raise ValueError("a power too large to evaluate")  # pint would compute 10**10**10 exactly
        lo, hi = (registry().Quantity(m.group(g).strip()) for g in ("lo", "hi"))
        hi = hi.to(lo.units)
    except Exception:  # pint raises many kinds for unreadable or mismatched text
        raise InputError(f"{where}: LO and HI must be numbers or quantities of the same kind "
                         f"(e.g. 6V..24V:4), found {m.group('lo')!r} and {m.group('hi')!r}") from None
    bad = [m.group(g).strip() for g, q in (("lo", lo), ("hi", hi)) if not np.isfinite(float(q.magnitude))]
    if bad:  # linspace would warn and fill the range with nan
        raise InputError(f"{where}: LO and HI must be finite, found {' and '.join(repr(b) for b in bad)}")
    mags = np.linspace(float(lo.magnitude), float(hi.magnitude), n)
    if lo.dimensionless and str(lo.units) == "dimensionless":
        return [float(v) for v in mags]
    return [f"{v:.12g} {lo.units:~}" if f"{lo.units:~}" else f"{v:.12g}" for v in mags]


def _list_values(spec: str, where: str) -> list:
    out = []
    for item in spec.split(","):
        item = item.strip()
        if not item:
            raise InputError(f"{where}: empty value in the list")
        try:
            value = load_yaml12(item)  # as a scenario file reads it (YAML 1.2 numbers)
        except yaml.YAMLError:
            value = item
        out.append(item if value is None or isinstance(value, (dict, list)) else value)
    return out


def point_values(varies: list[Vary], index: int) -> list:
    """The values of point `index` (row-major over the keys, the first key slowest)."""
    shape = [len(v.values) for v in varies]
    return [v.values[i] for v, i in zip(varies, np.unravel_index(index, shape))]


def check_varies(raw: dict, where: str, varies: list[Vary]) -> None:
    """Validate each value of each key once (with the other keys nominal): bad keys and values fail early."""
    from ..model.scenario import validate_scenario
    if not varies:
        raise InputError("sweep: give at least one --vary KEY=...")
    seen: set[tuple] = set()
    for v in varies:
        if tuple(v.path) in seen:
            raise InputError(f"--vary {v.key}: the key is varied twice; give it once with all its values")
        seen.add(tuple(v.path))
    total = int(np.prod([len(v.values) for v in varies], dtype=np.float64))
    if total > MAX_POINTS:
        raise InputError(f"sweep: {total} points is more than the limit of {MAX_POINTS}")
    for v in varies:
        for value in v.values:
            trial = copy.deepcopy(raw)
            set_path(trial, list(v.path), value, where=f"{where} (--vary {v.key}={value})")
            try:
                validate_scenario(trial, where=where)
            except ScenarioError as exc:
                raise ScenarioError(f"{exc} (from --vary {v.key}={value})") from None


def point_task(payload: dict) -> dict:
    """Simulate and judge one sweep point (module-level so worker processes can run it).

    A point whose work raises (a value that breaks its trial, its burst check or its Monte Carlo
    draws) is that point's outcome, `error` with the exception's one-line message: the sweep
    goes on, and a resume finds the point finished instead of meeting it again.
    """
    try:
        return _point(payload)
    except Exception as exc:  # noqa: BLE001 - any failure of one point is its outcome, not the sweep's
        row = {key: value for key, _, value in payload["assign"]}
        return row | {"point": payload["index"], "outcome": "error", "passed": False, "fail_reasons": "error",
                      "message": _one_line(exc)}


def _one_line(exc: BaseException) -> str:
    try:
        text = str(exc).strip().splitlines()
    except Exception:  # noqa: BLE001 - an exception whose __str__ raises still gets a message
        text = []
    return f"{type(exc).__name__}: {text[0][:300]}" if text else type(exc).__name__


def _point(payload: dict) -> dict:
    from ..model.device import Device
    from ..model.scenario import validate_scenario
    from .monte_carlo import judge_trial, monte_carlo_task
    from .stress import optimistic_summary, wheel_burst_check
    from .verdicts import bias_ends, runaway_criterion, runaway_hold
    raw = copy.deepcopy(payload["raw"])
    row: dict[str, Any] = {}
    for key, path, value in payload["assign"]:
        set_path(raw, list(path), value, where=payload["where"])
        row[key] = value
    row["point"] = payload["index"]
    try:
        sc = validate_scenario(raw, where=payload["where"])
    except ScenarioError as exc:
        return row | {"outcome": "invalid", "passed": False, "fail_reasons": "invalid", "message": str(exc)}
    # from the point's own trial.seed (so a sweep over trial.seed means something) and its index
    seed = row["seed"] = trial_seed(sc.trial.seed, payload["index"])
    for key, path, _ in payload["assign"]:
        si = value_at(sc, path)
        row[key] = si if isinstance(si, (int, float, str)) else str(si)
    if not sc.is_planar:    # one to three wheels, hinge or ball: judged by `battery3d`
        from .battery3d import sweep_row3d
        return row | sweep_row3d(sc, raw, payload["where"], seed=seed, trials=payload["trials"])
    row.update(judge_trial(sc, seed=seed))
    device = Device.from_scenario(sc)
    burst_check = wheel_burst_check(sc, device)
    burst = row["wheel_burst_safety_factor"] = burst_check["safety_factor"]
    row["burst_note"] = optimistic_summary(burst_check)
    reasons = [r for r in row["fail_reasons"].split(";") if r]
    if burst is None or burst < sc.requirements.burst_safety_factor:
        reasons.append("burst safety factor")
    runaway = runaway_criterion(sc, device, [runaway_hold(sc, bias_rad=b, seed=seed) for b in bias_ends(sc)])
    row["wheel_runaway_time_s"] = runaway["value"]
    if not runaway["passed"]:
        reasons.append("wheel runaway")
    trials = payload["trials"]
    if trials:
        passes = sum(bool(monte_carlo_task({"raw": raw, "where": payload["where"], "tolerances": _tolerances(sc),
                                            "base_seed": seed, "index": j})["passed"]) for j in range(trials))
        low, high = wilson_interval(passes, trials)
        row.update(mc_trials=trials, pass_fraction=passes / trials, pass_fraction_low=low, pass_fraction_high=high)
        if passes / trials < sc.requirements.pass_fraction:
            reasons.append("Monte Carlo pass fraction")
    row.update(passed=not reasons, fail_reasons=";".join(reasons))
    return row


def _tolerances(sc):
    from ..model.tolerances import scenario_tolerances
    return scenario_tolerances(sc)


# ----------------------------------------------------------------------------- the journal

def sweep_spec(raw: dict, varies: list[Vary], trials: int) -> dict:
    """What makes two sweeps the same sweep (to resume, the spec must match exactly)."""
    text = json.dumps(clean_json(raw), sort_keys=True, default=str)
    return {"scenario_sha256": hashlib.sha256(text.encode()).hexdigest(),
            "vary": [[v.key, [str(x) for x in v.values]] for v in varies], "trials": trials}


def read_journal(path: Path, spec: dict, summaries: "PointSummaries") -> None:
    """Add the journal's finished points to `summaries`. Drops a torn last line (a kill mid-write)
    from the file. Reads a line at a time: the journal can be far larger than memory needs to be."""
    if not path.exists():
        return
    size = path.stat().st_size
    with open(path, "rb") as fh:
        good_end = 0
        try:
            header = None
            for line in fh:
                if not line.endswith(b"\n"):
                    break                      # torn: written up to a kill, never finished
                entry = json.loads(line)
                if header is None:
                    header = entry
                    if not isinstance(header, dict) or header.get("spec") != spec:
                        raise InputError(f"--out {path.parent}: holds a different sweep (its {JOURNAL} was written "
                                         "for other settings); choose another folder to start a new one")
                else:
                    summaries.add(int(entry["i"]), entry["row"])
                good_end += len(line)
        except InputError:
            raise
        except (ValueError, KeyError, TypeError, IndexError):  # InputError is a ValueError too: above
            raise InputError(f"--out {path.parent}: {JOURNAL} is not a readable sweep journal; choose another folder") from None
    if good_end < size:
        with open(path, "r+b") as fh:
            fh.truncate(good_end)


class PointSummaries:
    """What the figure and the closing line need of each point, in arrays sized to the grid when
    the sweep starts. The full rows live only in the journal, so memory does not grow as points
    finish (a 1,000,000-point sweep holds ~40 MB here instead of ~2 GB of rows).

    `get(index)` gives a small dict (the figure's fields, and the varied keys' values for points on
    the figure's axes) or None for a point not finished.
    """

    FIELDS = ("wheel_speed_margin", "pass_fraction", "settle_time_s", "mc_trials", "peak_tilt_rad")

    def __init__(self, varies: list[Vary], *, extra: tuple[str, ...] = ()):
        self.FIELDS = self.FIELDS + tuple(f for f in extra if f not in self.FIELDS)   # e.g. --color's metric
        self.varies = varies
        self.shape = [len(v.values) for v in varies]
        total = int(np.prod(self.shape))
        self.done = np.zeros(total, dtype=bool)
        self.passed = np.zeros(total, dtype=bool)
        self.values = np.full((total, len(self.FIELDS)), np.nan)
        self.axis_points = {i for line in axis_indices(self.shape) for i in line}
        self.axis_values: dict[int, dict] = {}

    def add(self, index: int, row: dict) -> None:
        self.done[index] = True
        self.passed[index] = bool(row.get("passed"))
        self.values[index] = [np.nan if row.get(f) is None else row[f] for f in self.FIELDS]
        if index in self.axis_points:
            self.axis_values[index] = {v.key: row.get(v.key) for v in self.varies if row.get(v.key) is not None}

    def get(self, index: int, default=None):
        if not (0 <= index < len(self.done)) or not self.done[index]:
            return default
        out = {f: (None if np.isnan(x) else float(x)) for f, x in zip(self.FIELDS, self.values[index])}
        return out | {"passed": bool(self.passed[index])} | self.axis_values.get(index, {})

    def __len__(self) -> int:
        return int(self.done.sum())

    def __contains__(self, index: int) -> bool:
        return bool(self.done[index])

    @property
    def n_passed(self) -> int:
        return int(self.passed.sum())


def axis_indices(shape: list[int]) -> list[list[int]]:
    """Per key, the point indices along its axis (the other keys at their first value)."""
    out = []
    for k, n in enumerate(shape):
        line = []
        for j in range(n):
            idx = [0] * len(shape)
            idx[k] = j
            line.append(int(np.ravel_multi_index(idx, shape)))
        out.append(line)
    return out


class Journal:
    """Append-only: one JSON line per finished point, flushed and fsynced before moving on."""

    def __init__(self, path: Path, spec: dict):
        new = not path.exists() or path.stat().st_size == 0
        self.fh = open(path, "a", encoding="utf-8")
        if new:
            self._write({"wheelbench_sweep": 1, "spec": spec})

    def add(self, index: int, row: dict) -> None:
        """`row` JSON-safe already (`clean_json`)."""
        self._write({"i": index, "row": row})

    def _write(self, obj) -> None:
        self.fh.write(json.dumps(obj) + "\n")
        self.fh.flush()
        os.fsync(self.fh.fileno())

    def close(self) -> None:
        self.fh.close()


def write_results_csv(path: Path, varies: list[Vary], journal_path: Path) -> None:
    """results.csv in point order: one column per varied key (as given), then metrics and verdict.

    Streamed from the journal (rows are in finishing order there): one pass finds each point's
    line, a second writes them in point order, so memory is one offset per point, not one row.
    When any point ran through the power chain, its figures (`sim.run.metrics.POWER_ROW_KEYS`) follow the
    metric columns (blank for points without it); a sweep without one has exactly the columns it had.
    Points of a 3D device add `peak_tilt_rad`, `wheel_count` and each wheel's figures last.
    """
    from ..run.metrics import POWER_ROW_KEYS
    columns = [v.key for v in varies] + list(METRIC_COLUMNS)
    offsets = np.full(int(np.prod([len(v.values) for v in varies])), -1, dtype=np.int64)
    power, wheels = False, 0
    if journal_path.exists():
        with open(journal_path, "rb") as fh:
            fh.readline()                               # the header
            at = fh.tell()
            for line in fh:
                if line.endswith(b"\n"):
                    offsets[_journal_index(line)] = at
                    power = power or b'"min_supply_voltage_v"' in line
                    found = _WHEEL_COUNT.search(line)
                    wheels = max(wheels, int(found.group(1)) if found else 0)
                at += len(line)
    if power:
        columns += list(POWER_ROW_KEYS)
    if wheels:      # a 3D device's points: the peak tilt and each wheel's figures (`judge3d.wheel_columns`)
        from .judge3d import wheel_columns
        columns += ["peak_tilt_rad", "wheel_count"] + wheel_columns(wheels)
    with atomic_path(path) as tmp, open(tmp, "w", newline="", encoding="utf-8") as out:
        writer = csv.DictWriter(out, fieldnames=columns, extrasaction="ignore")
        writer.writeheader()
        if not (offsets >= 0).any():
            return
        with open(journal_path, "rb") as fh:
            for at in offsets[offsets >= 0]:
                fh.seek(at)
                row = json.loads(fh.readline())["row"]
                writer.writerow({k: ("" if row.get(k) is None else row.get(k)) for k in columns})


def _journal_index(line: bytes) -> int:
    """The point index of a journal line, read from its head (`{"i": N, ...`) without parsing the row."""
    head = line[:32]
    start = head.index(b":") + 1
    return int(head[start:head.index(b",", start)])


# ----------------------------------------------------------------------------- running

def run_sweep(raw: dict, where: str, varies: list[Vary], out_dir: Path, *, trials: int = 0,
              workers: int | None = None, cluster=None, on_progress=None, color: str | None = None) -> PointSummaries:
    """Run (or resume) a sweep into `out_dir` (already prepared). Returns the points' summaries
    (the full rows are in results.csv and the journal).

    `on_progress(done, total)` is called at the start and after every finished point.
    """
    if trials < 0:
        raise InputError(f"--trials: expected 0 or more, found {trials}")
    check_varies(raw, where, varies)
    spec = sweep_spec(raw, varies, trials)
    journal_path, csv_path = out_dir / JOURNAL, out_dir / RESULTS
    summaries = PointSummaries(varies, extra=(color,) if color else ())
    read_journal(journal_path, spec, summaries)
    total = len(summaries.done)
    tasks = ((i, {"raw": raw, "where": where, "index": i, "trials": trials,
                  "assign": [(v.key, v.path, x) for v, x in zip(varies, point_values(varies, i))]})
             for i in range(total) if i not in summaries)
    results = run_tasks(point_task, tasks, workers=workers, cluster=cluster)   # connects before files are written
    try:
        journal = Journal(journal_path, spec)
        rewrite = CsvRewrites(csv_path, varies, journal_path)
        try:
            rewrite.now()
            if on_progress:
                on_progress(len(summaries), total)
            for index, row in results:
                row = clean_json(row)
                journal.add(index, row)
                summaries.add(index, row)
                if on_progress:
                    on_progress(len(summaries), total)
                rewrite.when_due()
        finally:
            journal.close()
            rewrite.now()
    except (OSError, MachineFault) as exc:
        raise _resumable(exc, journal_path, len(summaries), total) from None
    return summaries


def _resumable(exc: Exception, journal_path: Path, done: int, total: int) -> Exception:
    """A fault of the machine (full disk, read-only folder, lost cluster) as one line that says
    how to go on: the journal keeps every finished point, and the same command resumes."""
    message = str(exc) if isinstance(exc, MachineFault) else fault_message(exc)
    if message is None:
        return exc
    return MachineFault(f"{message}; {done} of {total} points are kept in {journal_path}: run the same sweep "
                        "command again to resume")


class CsvRewrites:
    """results.csv rewritten from the journal as points finish: every CSV_EVERY_S, or less often
    when rewriting takes long (at most a twentieth of the time goes to it, however big the sweep)."""

    def __init__(self, csv_path: Path, varies: list[Vary], journal_path: Path):
        self.args = (csv_path, varies, journal_path)
        self.next_at = 0.0

    def now(self) -> None:
        t0 = time.monotonic()
        write_results_csv(*self.args)
        took = time.monotonic() - t0
        self.next_at = time.monotonic() + max(CSV_EVERY_S, 20 * took)

    def when_due(self) -> None:
        if time.monotonic() >= self.next_at:
            self.now()
