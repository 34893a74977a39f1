"""Catch maps of 3D devices: from which start states does the balance law catch the body?

Three kinds of map (`MAP_KINDS`), each a square grid run cell by cell like today's map
(`sim.studies.catchmap`: the balance law alone, a cell stopped once clearly caught or lost,
`sim.studies.battery3d.run_until_clear3d`; one seed per cell):
- `tilt` (a ball mount's default): start tilts about world x against world y, at rest. A cell
  starts at R = Ry(tilt_y) Rx(tilt_x) times the upright attitude (`trial.start.tilt`).
- `direction` (a ball mount with `direction_rad`): the start tilt about one horizontal axis, at
  `direction_rad` from world x (counter-clockwise seen from above), against the start rate about
  that axis. The attitude is the rotation by the tilt about that axis (its `tilt_rad` is the
  tilt exactly), written as the `[about_x, about_y]` pair that puts the centre of mass in the same
  place: about_x = asin(sin a cos phi), about_y = atan2(sin a sin phi, cos a); the rate is
  `trial.start.tilt_rate` = rate (cos phi, sin phi).
- `angle` (a hinge, one to three wheels on any axes): the start angle about the hinge against the
  start rate, as today's map.

Default ranges: tilt (or angle) +-95% of the law's release angle, and a map of two tilts no wider than
1.5 times the widest tilt the wheels can hold by statics (at rest no start beyond it can be caught,
so the grid's cells go where the edge is); rate +-p times that tilt, p the
fastest unstable pole of the upright linear model (the rate along the unstable mode, as today).
Outputs: catch_map.csv (a row per cell), catch_map.json (axes, ranges, counts, the largest tilt
the wheels can hold by statics) and catch_map.png.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

from ..core.errors import InputError, ScenarioError
from ..core.options import default_workers
from ..core.outputs import clean_json, write_text
from ..model.tolerances import trial_seed
from ..run.parallel import run_tasks
from .catchmap import (CATCH_WINDOW_S, CELLS_PER_ROUND_TRIP, EDGE_FRACTION, _base_scenario, balance_only_raw,
                       write_cell_rows)

MAP_KINDS = ("tilt", "direction", "angle")
CELL_COLUMNS = ("caught", "outcome", "ended_at_s", "tilt_rad", "peak_wheel_speed_rad_s", "wheel_speed_margin")
AXES = {   # kind: ((CSV column, axis label, unit shown), (...)); angles shown in degrees
    "tilt": (("tilt_x_rad", "start tilt about world x", "deg"), ("tilt_y_rad", "start tilt about world y", "deg")),
    "direction": (("tilt_along_rad", "start tilt about the axis at {phi} deg from world x", "deg"),
                  ("rate_along_rad_s", "start tilt rate about that axis", "rad/s")),
    "angle": (("angle_rad", "start angle about the hinge (or balance edge)", "deg"), ("rate_rad_s", "start body rate about it",
                                                                      "rad/s")),
}


AXES_OPTIONS = {"tilt-x,tilt-y": "tilt", "tilt,rate": "rate", "angle,rate": "rate"}
"""`--axes`: a grid of two start tilts (ball mounts), or tilt (angle) against rate."""


def map_kind(scenario, *, axes: str | None, direction_rad: float | None, rate_given: bool) -> str:
    """Which map the options ask for on this device; InputError naming the option when it does not fit."""
    ball = scenario.design_mount == "ball"     # a floor mount balancing on a corner maps as a ball
    if direction_rad is not None and scenario.body.mount == "floor":
        raise InputError(f"--direction: {scenario.source} has a floor mount, whose start takes no rate about "
                         "two axes; map its start tilts (--axes tilt-x,tilt-y)")
    if axes is not None and axes.replace(" ", "") not in AXES_OPTIONS:
        raise InputError(f"--axes {axes!r}: expected one of {', '.join(AXES_OPTIONS)}")
    wanted = None if axes is None else AXES_OPTIONS[axes.replace(" ", "")]
    if direction_rad is not None and not ball:
        raise InputError(f"--direction: {scenario.source} balances on a hinge or an edge, which tips about it only; "
                         "a direction is for a ball mount")
    if wanted == "tilt" and not ball:
        raise InputError(f"--axes {axes}: {scenario.source} balances on a hinge or an edge, which has no tilt about world y; "
                         "its map is angle against rate")
    if wanted == "tilt" and direction_rad is not None:
        raise InputError(f"--axes {axes} and --direction: a grid of two tilts has no direction; give --axes tilt,rate")
    if not ball:
        return "angle"
    if direction_rad is None and wanted != "rate":
        if rate_given:
            raise InputError("--rate-max: a ball mount's tilt grid starts at rest; give --direction DEG for a "
                             "map of tilt against rate")
        return "tilt"
    return "direction"


def unstable_pole_rad_s(scenario) -> float:
    """The fastest unstable pole of the upright linear model, 1/s (0 when none)."""
    from ..model.device3d import Device3D
    a = Device3D.from_scenario(scenario).linear_spec().linear_model().A
    return max(0.0, float(np.max(np.linalg.eigvals(a).real)))


def tilt_pair(tilt_rad: float, direction_rad: float) -> tuple[float, float]:
    """[about_x, about_y] (R = Ry(about_y) Rx(about_x)) tipping the body by `tilt_rad` about the
    horizontal axis at `direction_rad` from world x: the same centre-of-mass direction as that rotation."""
    s, c = math.sin(tilt_rad), math.cos(tilt_rad)
    return math.asin(s * math.cos(direction_rad)), math.atan2(s * math.sin(direction_rad), c)


def cell_start(kind: str, x: float, y: float, direction_rad: float) -> dict:
    """The `trial.start` of a cell at grid values (x, y) of a map of `kind` (SI)."""
    if kind == "angle":
        return {"angle": x, "rate": y, "wheel_speed": 0.0, "tilt": None, "tilt_rate": None}
    if kind == "tilt":
        return {"angle": 0.0, "rate": 0.0, "wheel_speed": 0.0, "tilt": [x, y], "tilt_rate": None}
    return {"angle": 0.0, "rate": 0.0, "wheel_speed": 0.0, "tilt": list(tilt_pair(x, direction_rad)),
            "tilt_rate": [y * math.cos(direction_rad), y * math.sin(direction_rad)]}


def cell_task3d(payload: dict) -> dict:
    """Run one cell (module-level so worker processes can run it)."""
    from .battery3d import run_until_clear3d
    from .verdicts import with_trial
    kind = payload["kind"]
    (xcol, _, _), (ycol, _, _) = AXES[kind]
    row = {xcol: payload["x"], ycol: payload["y"]}
    try:
        base, limits = _base_scenario(payload)
        sc = with_trial(base, start=cell_start(kind, payload["x"], payload["y"], payload["direction_rad"]))
    except (ScenarioError, ValueError) as exc:   # pydantic's ValidationError is a ValueError
        return row | {"caught": False, "outcome": "invalid", "message": str(exc).splitlines()[0]}
    res = run_until_clear3d(sc, seed=payload["seed"])
    margin = min(1.0 - s / lim for s, lim in zip(res["peak_wheel_speeds_rad_s"], limits))
    return row | {"caught": res["caught"], "outcome": res["outcome"], "ended_at_s": res["ended_at_s"],
                  "tilt_rad": _start_tilt(kind, payload["x"], payload["y"]),
                  "peak_wheel_speed_rad_s": res["peak_wheel_speed_rad_s"], "wheel_speed_margin": margin}


def _start_tilt(kind: str, x: float, y: float) -> float:
    """The cell's start `tilt_rad` (the centre of mass's angle from the vertical)."""
    if kind == "tilt":     # the body z axis after Ry(y) Rx(x): (sin y cos x, -sin x, cos y cos x)
        return math.acos(max(-1.0, min(1.0, math.cos(y) * math.cos(x))))
    return abs(x)


STATICS_SPAN = 1.5   # a default tilt map reaches 1.5 times the widest tilt the wheels can hold (our choice)


def _widest_holdable(device) -> float:
    """The largest tilt (rad) the wheels can hold by statics over 24 horizontal directions (a ball), or
    about the hinge."""
    from ..model.device_figures3d import holdable_tilt, holdable_tilt_about
    if device.mount != "ball":
        return holdable_tilt(device)[0]
    return max(holdable_tilt_about(device, k * math.pi / 12) for k in range(24))


def catch_map3d(raw: dict, where: str, *, grid: int = 21, angle_max: float | None = None,
                rate_max: float | None = None, axes: str | None = None, direction_rad: float | None = None,
                window_s: float = CATCH_WINDOW_S, workers: int | None = None, cluster=None, on_progress=None) -> dict:
    """Run a 3D device's map. Returns the grid values (`x`, `y`, SI), the rows (x-major), the kind,
    the ranges and the largest tilt the wheels can hold (statics, `device_figures3d.holdable_tilt`)."""
    from ..model.device3d import Device3D
    from ..model.device_figures3d import holdable_tilt
    from ..model.scenario import validate_scenario
    from .catchmap import check_map_options
    check_map_options(grid=grid, angle_max=angle_max, rate_max=rate_max)
    sc = validate_scenario(raw, where=where)
    kind = map_kind(sc, axes=axes, direction_rad=direction_rad, rate_given=rate_max is not None)
    braw = balance_only_raw(raw, sc)
    bsc = validate_scenario(braw, where=where)
    if bsc.strategy.cls.goal != "balance":
        raise InputError(f"{where}: strategy {bsc.strategy.kind!r} has no balance goal; a catch map needs one")
    a_max = EDGE_FRACTION * float(getattr(bsc.strategy.params, "release_angle", math.radians(30)))
    a_max = a_max if angle_max is None else angle_max
    if kind == "tilt":
        a_max = min(a_max, math.pi / 2)      # trial.start.tilt's own bound
        if angle_max is None:                # at rest, no start tilt beyond the statics limit can be caught
            a_max = min(a_max, STATICS_SPAN * _widest_holdable(Device3D.from_scenario(bsc)))
    r_max = (unstable_pole_rad_s(bsc) or 1.0) * a_max if rate_max is None else rate_max
    phi = direction_rad or 0.0
    xs = np.linspace(-a_max, a_max, grid) if grid > 1 else np.array([0.0])
    y_max = a_max if kind == "tilt" else r_max
    ys = np.linspace(-y_max, y_max, grid) if grid > 1 else np.array([0.0])
    key = f"{where}|{window_s!r}|{json.dumps(braw, sort_keys=True, default=repr)}"
    tasks = ((i, {"raw": braw, "where": where, "key": key, "window_s": window_s, "kind": kind, "direction_rad": phi,
                  "x": float(xs[i // grid]), "y": float(ys[i % grid]), "seed": trial_seed(sc.trial.seed, i)})
             for i in range(grid * grid))
    rows: list = [None] * (grid * grid)
    batch = max(1, min(CELLS_PER_ROUND_TRIP, grid * grid // (16 * (workers or default_workers()))))
    for done, (i, row) in enumerate(run_tasks(cell_task3d, tasks, workers=workers, cluster=cluster, batch=batch), 1):
        rows[i] = row
        if on_progress:
            on_progress(done, grid * grid)
    device = Device3D.from_scenario(bsc)
    hold, hold_dir = holdable_tilt(device)
    if kind == "direction":   # the statics limit about the map's own axis
        from ..model.device_figures3d import holdable_tilt_about
        hold, hold_dir = holdable_tilt_about(device, phi), phi
    return {"kind": kind, "x": xs, "y": ys, "rows": rows, "direction_rad": direction_rad,
            "angle_max_rad": a_max, "rate_max_rad_s": None if kind == "tilt" else r_max,
            "holdable_tilt_rad": hold, "holdable_worst_direction_rad": hold_dir,
            "strategy": bsc.strategy.kind, "name": sc.name, "mount": sc.body.mount, "wheel_count": len(sc.wheel_list)}


def axis_labels(result: dict) -> list[str]:
    """The figure's axis labels, in the trade's words with units."""
    phi = math.degrees(result["direction_rad"] or 0.0)
    return [f"{label.format(phi=f'{phi:g}')} [{unit}]" for _, label, unit in AXES[result["kind"]]]


def write_catch_map3d(result: dict, out_dir: Path) -> None:
    """catch_map.csv (one row per cell), catch_map.json (the map's set-up and counts), catch_map.png."""
    (xcol, _, _), (ycol, _, _) = AXES[result["kind"]]
    columns = [xcol, ycol, *CELL_COLUMNS]
    write_cell_rows(out_dir / "catch_map.csv", result["rows"], columns)
    caught = sum(bool(r["caught"]) for r in result["rows"])
    summary = {k: result[k] for k in ("kind", "name", "strategy", "mount", "wheel_count", "direction_rad",
                                      "angle_max_rad", "rate_max_rad_s", "holdable_tilt_rad",
                                      "holdable_worst_direction_rad")}
    summary |= {"axes": [{"column": c, "label": lab} for (c, _, _), lab in zip(AXES[result["kind"]], axis_labels(result))],
                "grid": len(result["x"]), "cells": len(result["rows"]), "caught_cells": caught,
                "largest_caught_tilt_rad": max((r["tilt_rad"] for r in result["rows"] if r["caught"]), default=None)}
    write_text(out_dir / "catch_map.json", json.dumps(clean_json(summary), indent=2) + "\n")
    from ..media.plots import save_figure
    save_figure(catch_figure3d(result), out_dir / "catch_map.png")


def catch_figure3d(result: dict):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from ..media.plots import INK
    xs, ys, kind = result["x"], result["y"], result["kind"]
    n = len(xs)
    margin = np.array([[np.nan if not r["caught"] else r["wheel_speed_margin"] for r in result["rows"][i * n:(i + 1) * n]]
                       for i in range(n)])
    shown_y = np.degrees(ys) if kind == "tilt" else ys
    dx = np.degrees(xs[1] - xs[0]) / 2 if n > 1 else 1.0
    dy = (shown_y[1] - shown_y[0]) / 2 if n > 1 else 0.1
    extent = [np.degrees(xs[0]) - dx, np.degrees(xs[-1]) + dx, shown_y[0] - dy, shown_y[-1] + dy]
    fig, ax = plt.subplots(figsize=(7.0, 5.5), constrained_layout=True)
    cmap = plt.get_cmap("viridis").with_extremes(bad="#e9e4dc")
    im = ax.imshow(margin.T, origin="lower", extent=extent, aspect="equal" if kind == "tilt" else "auto", cmap=cmap,
                   vmin=0.0, vmax=1.0)
    fig.colorbar(im, ax=ax, label="worst wheel's speed margin (caught cells)")
    hold = math.degrees(result["holdable_tilt_rad"])
    if kind == "tilt":   # where the wheels' stall torques can no longer hold the body still
        t = np.linspace(0, 2 * math.pi, 181)
        ax.plot(hold * np.cos(t), hold * np.sin(t), color=INK, lw=0.8, ls="--",
                label=f"largest tilt the wheels can hold in the worst direction ({hold:.1f} deg, statics)")
        ax.legend(loc="upper right", fontsize=7)
    else:
        for s in (-1, 1):
            ax.axvline(s * hold, color=INK, lw=0.8, ls="--")
    xl, yl = axis_labels(result)
    ax.set_xlabel(xl)
    ax.set_ylabel(yl)
    ax.set_title(f"{result['name']}: catch map of {result['strategy']} (grey = not caught; dashed: statics limit)",
                 color=INK, fontsize=10, parse_math=False)
    return fig
