"""Catch maps: from which start states (angle, body rate) does the balance law catch the body?

Each cell starts the device at (angle, rate) with the wheel at rest relative to the body and runs
the balance strategy alone (a supervisor's `balance` law when the scenario's strategy has one),
stopping as soon as the run is clearly caught (settled within 1 degree) or clearly lost (past
the release angle). Cells run in parallel like sweep points; each has its own seed.

Default ranges: angle +-95% of the balance law's release angle; body rate +-sqrt(mbar g / J) times
that angle, the rate that goes with that angle along the unstable upright mode (our choice).
"""

from __future__ import annotations

import copy
import csv
import json
import math
from pathlib import Path

import numpy as np

from ..core.errors import InputError, ScenarioError
from ..core.options import default_workers
from ..core.outputs import atomic_path
from ..model.tolerances import trial_seed
from ..run.parallel import run_tasks

CATCH_WINDOW_S = 4.0
CELLS_PER_ROUND_TRIP = 4
EDGE_FRACTION = 0.95    # a start exactly at the release angle is lost by definition: stay just inside
COLUMNS = ("angle_rad", "rate_rad_s", "caught", "outcome", "ended_at_s", "peak_wheel_speed_rad_s",
           "wheel_speed_margin")


def balance_only_raw(raw: dict, scenario) -> dict:
    """A copy of `raw` whose strategy is the balance law: a supervisor's nested `balance`, else itself."""
    from ..strategies import StrategySpec
    out = copy.deepcopy(raw)
    if isinstance(getattr(scenario.strategy.params, "balance", None), StrategySpec):
        outer = raw.get("strategy") or {}
        nested = dict(outer.get("balance") or {"kind": "lqr"})
        if "release_angle" in outer and "release_angle" not in nested:
            nested["release_angle"] = outer["release_angle"]
        out["strategy"] = nested
    return out


def default_ranges(scenario) -> tuple[float, float]:
    """(angle_max rad, rate_max rad/s) from the device and the balance law's release angle."""
    from ..model.device import Device
    angle = EDGE_FRACTION * float(getattr(scenario.strategy.params, "release_angle", math.radians(30)))
    pole = Device.from_scenario(scenario).open_loop_pole_rad_s
    return angle, pole * angle if pole > 0 else angle


# Per process: the balance scenario of the map being run, validated once (key -> (scenario, limit)).
# Every cell differs only in its start state, so a cell re-checks just its `trial` section.
_BASE: dict = {}


def _base_scenario(payload: dict):
    """(validated balance scenario with the cell window, wheel no-load speed rad/s), cached by key.
    A 3D device's (`sim.studies.catchmap3d`) gives a list: each wheel's no-load speed."""
    key = payload["key"]
    if key not in _BASE:
        from ..model.device import Device
        from ..model.device3d import Device3D
        from ..model.scenario import validate_scenario
        raw = copy.deepcopy(payload["raw"])
        raw["trial"] = {**(raw.get("trial") or {}), "duration": payload["window_s"], "pushes": []}
        sc = validate_scenario(raw, where=payload["where"])
        _BASE.clear()
        _BASE[key] = (sc, Device.from_scenario(sc).no_load_speed_rad_s if sc.is_planar
                      else [w.no_load_speed_rad_s for w in Device3D.from_scenario(sc).wheels])
    return _BASE[key]


def cell_task(payload: dict) -> dict:
    """Run one cell (module-level so worker processes can run it)."""
    from .verdicts import run_until_clear, with_trial
    row = {"angle_rad": payload["angle"], "rate_rad_s": payload["rate"]}
    try:
        base, limit = _base_scenario(payload)
        sc = with_trial(base, start={"angle": payload["angle"], "rate": payload["rate"], "wheel_speed": 0.0})
    except (ScenarioError, ValueError) as exc:  # pydantic's ValidationError is a ValueError
        return row | {"caught": False, "outcome": "invalid", "message": str(exc).splitlines()[0]}
    res = run_until_clear(sc, seed=payload["seed"])
    return row | {"caught": res["caught"], "outcome": res["outcome"], "ended_at_s": res["ended_at_s"],
                  "peak_wheel_speed_rad_s": res["peak_wheel_speed_rad_s"],
                  "wheel_speed_margin": 1.0 - res["peak_wheel_speed_rad_s"] / limit}


MAX_ANGLE_RAD = math.pi
MAX_RATE_RAD_S = 1000.0
"""Largest start body rate a map may ask for, rad/s: ~160 turns a second, far past any catch (the
run calls a body rate over 1e4 rad/s diverged); a bigger value is a typo, not a plan (our choice)."""


def check_map_options(*, grid: int, angle_max: float | None, rate_max: float | None) -> None:
    """Bounds of the map's own options (rad, rad/s), checked before anything is simulated."""
    if not 1 <= grid <= 401:
        raise InputError(f"--grid: expected 1 to 401 cells per side, found {grid}")
    if angle_max is not None and not 0.0 <= angle_max <= MAX_ANGLE_RAD:
        raise InputError(f"--angle-max: expected at most 180 deg (pi rad), found {angle_max:.6g} rad")
    if rate_max is not None and not 0.0 <= rate_max <= MAX_RATE_RAD_S:
        raise InputError(f"--rate-max: expected at most {MAX_RATE_RAD_S:g} rad/s, found {rate_max:.6g} rad/s")


def catch_map(raw: dict, where: str, *, grid: int = 21, angle_max: float | None = None, rate_max: float | None = None,
              window_s: float = CATCH_WINDOW_S, workers: int | None = None, cluster=None, on_progress=None) -> dict:
    """Run the map. Returns {"angles", "rates", "rows" (angle-major), "angle_max", "rate_max", "strategy"}."""
    from ..model.scenario import validate_scenario
    check_map_options(grid=grid, angle_max=angle_max, rate_max=rate_max)
    sc = validate_scenario(raw, where=where)
    braw = balance_only_raw(raw, sc)
    bsc = validate_scenario(braw, where=where)
    if bsc.strategy.cls.goal != "balance":
        raise InputError(f"{where}: strategy {bsc.strategy.kind!r} has no balance goal; a catch map needs one")
    a_def, r_def = default_ranges(bsc)
    a_max = a_def if angle_max is None else angle_max
    r_max = r_def if rate_max is None else rate_max
    angles = np.linspace(-a_max, a_max, grid) if grid > 1 else np.array([0.0])
    rates = np.linspace(-r_max, r_max, grid) if grid > 1 else np.array([0.0])
    key = f"{where}|{window_s!r}|{json.dumps(braw, sort_keys=True, default=repr)}"
    tasks = ((i, {"raw": braw, "where": where, "key": key, "window_s": window_s, "angle": float(angles[i // grid]),
                  "rate": float(rates[i % grid]), "seed": trial_seed(sc.trial.seed, i)})
             for i in range(grid * grid))
    rows: list = [None] * (grid * grid)
    done = 0
    # cells take ~20 ms: a few per round trip, but enough round trips left to even out the end
    batch = max(1, min(CELLS_PER_ROUND_TRIP, grid * grid // (16 * (workers or default_workers()))))
    for i, row in run_tasks(cell_task, tasks, workers=workers, cluster=cluster, batch=batch):
        rows[i] = row
        done += 1
        if on_progress:
            on_progress(done, grid * grid)
    return {"angles": angles, "rates": rates, "rows": rows, "angle_max_rad": a_max, "rate_max_rad_s": r_max,
            "strategy": bsc.strategy.kind, "name": sc.name}


def write_catch_map(result: dict, out_dir: Path) -> None:
    """catch_map.csv (one row per cell) and catch_map.png."""
    write_cell_rows(out_dir / "catch_map.csv", result["rows"], COLUMNS)
    from ..media.plots import save_figure
    save_figure(catch_figure(result), out_dir / "catch_map.png")


def write_cell_rows(path: Path, rows: list[dict], columns) -> None:
    """A map's rows as CSV, one per cell, `columns` in order (an absent or None value is empty)."""
    with atomic_path(path) as tmp, open(tmp, "w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=list(columns), extrasaction="ignore")
        writer.writeheader()
        for row in rows:
            writer.writerow({k: ("" if row.get(k) is None else row.get(k)) for k in columns})


def catch_figure(result: dict):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from ..media.plots import INK
    angles, rates = result["angles"], result["rates"]
    n = len(angles)
    margin = np.array([[np.nan if not r["caught"] else r["wheel_speed_margin"] for r in result["rows"][i * n:(i + 1) * n]]
                       for i in range(n)])
    fig, ax = plt.subplots(figsize=(7.0, 5.5), constrained_layout=True)
    da = np.degrees(angles[1] - angles[0]) / 2 if n > 1 else 1.0
    dr = (rates[1] - rates[0]) / 2 if n > 1 else 0.1
    extent = [np.degrees(angles[0]) - da, np.degrees(angles[-1]) + da, rates[0] - dr, rates[-1] + dr]
    cmap = plt.get_cmap("viridis").with_extremes(bad="#e9e4dc")
    im = ax.imshow(margin.T, origin="lower", extent=extent, aspect="auto", cmap=cmap, vmin=0.0, vmax=1.0)
    fig.colorbar(im, ax=ax, label="wheel speed margin (caught cells)")
    ax.set_xlabel("start angle [deg]")
    ax.set_ylabel("start body rate [rad/s]")
    ax.set_title(f"{result['name']}: catch map of {result['strategy']} (grey = not caught)", color=INK, fontsize=10,
                 parse_math=False)  # the scenario's name, literally
    return fig
