"""The jump map: which pre-brake wheel speeds and brake engagement times get a jump device up?

`wheelbench catch-map` on a device whose strategy is `jump` (`sim.strategies.jump3d`, from lying on a face
up to the balance edge; one wheel on a hinge, `sim.strategies.jump`), and with `--jump` on a one-wheel
device whose `swing_and_catch` swings up by a `jump` (scenarios/jump_pendulum.yaml), maps the jump
instead of start states. A square grid:
- x: the pre-brake wheel speed as a factor of the lossless needed speed (the law's `margin`,
  `sim.strategies.jump_figures.face_to_edge`; on a corner device `edge_to_corner`, below), dimensionless,
  default 0.7 to 1.5;
- y: the brake's engagement time (`drive.brake_engage_time`: the time its torque takes to reach full,
  `sim.physics.brake`), s, default 0 to 100 ms.
Each cell is one jump attempt (`max_attempts: 1`) from the scenario's own start, run for the
scenario's `trial.duration`, judged got up when the trial ends `balanced` at least `HELD_S` after
the brake (`undecided` when it ended sooner: a jump with too much speed may still be going over). How far it rose:
`smallest_tilt_rad`, the smallest |tilt| about the balance edge reached (0 is balanced; the start
lies at the face's rest tilt), `farthest_past_balance_rad`, how far it tipped beyond balance on
the far side (a jump with too much speed goes over the edge and falls onto the other face), and `rise_fraction`, the centre of mass's rise at that point over the
rise balance needs, (cos theta_min - cos theta_0) / (1 - cos theta_0), 1 at balance: the potential
energy reached over the energy needed, the ratio the law itself corrects a miss by. A wheel's own
`brake_engage_time` is dropped so that the map's value applies to every brake. On one wheel the tilt is the
angle from upright wrapped to (-pi, pi] (hanging: pi, the rest tilt), and a cell is its first jump only
(`planar_jump_row`): a supervisor that loses the body swings it up again, which is not the cell's jump.
On a floor device balancing on a corner (`balance_on: corner`, `sim.strategies.jump_corner`) the map is
of the edge-to-corner jump: each cell starts resting on the balance edge (`trial.start: {resting_on:
edge}`), so no face-to-edge jump comes before it, and the law's `margin` and `max_attempts` (which the
corner stage reads as its speed factor and its count of corner attempts) make it one corner jump at
this factor of `sim.strategies.jump_figures.edge_to_corner`'s need. Its tilt is the trace's `tilt`,
from balance on the corner (the start lies at the edge's rest tilt, atan(|c_x| / d)), so the rise
fraction is the same ratio, (h - d) / (|c| - d) with h = |c| cos theta; how far past the corner is
the (tilt_x, tilt_y) vector projected on its start direction, past zero on the far side. A jump that
reached the catch region and was then lost counts the corner LQR's own lift in its smallest tilt (on the
demo at 0.9 of the need: rise fraction 0.84 against the law's 0.78 at the handover).
Outputs: catch_map.csv (a row per cell), catch_map.json (axes, ranges, counts) and catch_map.png.
"""

from __future__ import annotations

import copy
import json
import math
from pathlib import Path

import numpy as np

from ..core.angles import wrap_angles
from ..core.errors import InputError, ScenarioError
from ..core.outputs import clean_json, write_text
from ..model.tolerances import trial_seed
from ..run.parallel import run_tasks

SPEED_FACTOR_RANGE = (0.7, 1.5)   # default x range, factors of the needed speed (our choice)
BRAKE_TIME_RANGE_S = (0.0, 0.1)   # default y range, s (our choice)
SPEED_FACTOR_BOUNDS = (0.5, 3.0)  # the jump law's own bounds on `margin`
HELD_S = 1.0                      # a jump counts as got up once balanced this long after the brake (our
                                  # choice, the jump law's own `HELD_S`); a shorter rest of the trial is
                                  # `undecided`
BRAKE_TIME_BOUND_S = 10.0         # the scenario's own bound on `drive.brake_engage_time`
COLUMNS = ("speed_factor", "brake_engage_time_s", "got_up", "outcome", "smallest_tilt_rad", "rise_fraction",
           "farthest_past_balance_rad", "braked_at_s",
           "needed_wheel_speed_rad_s", "reached_wheel_speed_rad_s", "jump_attempts")
AXIS_LABELS = ("pre-brake wheel speed / needed speed (the jump's margin) [-]", "brake engagement time [ms]")


def is_jump_map(scenario, *, jump: bool = False) -> bool:
    """True when catch-map maps the jump: a 3D device whose strategy is `jump`, a one-wheel device whose
    strategy is `jump`, or (asked with `jump`, catch-map's `--jump`) a one-wheel device whose
    swing_and_catch swings up by a `jump`."""
    if scenario.strategy.kind == "jump":
        return True
    return jump and scenario.is_planar and _nested_jump(scenario.strategy)


def _nested_jump(spec) -> bool:
    """A swing_and_catch spec whose swing-up is a brake-to-jump."""
    swing = getattr(spec.params, "swing_up", None) if spec.kind == "swing_and_catch" else None
    return swing is not None and swing.kind == "jump"


def check_jump_options(*, grid: int, speed_factor: tuple[float, float], brake_time_s: tuple[float, float]) -> None:
    """Bounds of the jump map's options, checked before anything is simulated (InputError naming the option)."""
    if not 1 <= grid <= 401:
        raise InputError(f"--grid: expected 1 to 401 cells per side, found {grid}")
    lo, hi = SPEED_FACTOR_BOUNDS
    for name, v in zip(("--speed-factor-min", "--speed-factor-max"), speed_factor):
        if not lo <= v <= hi:
            raise InputError(f"{name}: expected a factor of the needed wheel speed from {lo:g} to {hi:g}, found {v:g}")
    for name, v in zip(("--brake-time-min", "--brake-time-max"), brake_time_s):
        if not 0.0 <= v <= BRAKE_TIME_BOUND_S:
            raise InputError(f"{name}: expected 0 to {BRAKE_TIME_BOUND_S:g} s, found {v:.6g} s")
    if speed_factor[0] > speed_factor[1]:
        raise InputError(f"--speed-factor-min: {speed_factor[0]:g} is above --speed-factor-max {speed_factor[1]:g}")
    if brake_time_s[0] > brake_time_s[1]:
        raise InputError(f"--brake-time-min: {brake_time_s[0]:.6g} s is above --brake-time-max {brake_time_s[1]:.6g} s")


def check_jump_map(raw: dict, where: str, *, grid: int, speed_factor: tuple[float, float],
                   brake_time_s: tuple[float, float]):
    """Everything a jump map checks before it runs (options, the device, a cell's scenario); the scenario."""
    from ..model.scenario import validate_scenario
    check_jump_options(grid=grid, speed_factor=speed_factor, brake_time_s=brake_time_s)
    sc = validate_scenario(raw, where=where)
    if not is_jump_map(sc, jump=True):
        raise InputError(f"{where}: strategy.kind: a jump map needs a strategy that jumps (jump, or on one wheel "
                         f"swing_and_catch with swing_up kind jump), found {sc.strategy.kind!r}")
    validate_scenario(cell_raw(raw, speed_factor=speed_factor[0], brake_time_s=brake_time_s[1]), where=where)
    return sc


def cell_raw(raw: dict, *, speed_factor: float, brake_time_s: float) -> dict:
    """A copy of the scenario mapping set up for one cell: one attempt at this factor, this engagement time."""
    out = copy.deepcopy(raw)
    strategy = out.get("strategy") or {}
    if strategy.get("kind") == "swing_and_catch":    # one wheel: the jump is the supervisor's swing-up
        out["strategy"] = {**strategy, "swing_up": {**strategy["swing_up"], "margin": float(speed_factor),
                                                    "max_attempts": 1}}
    else:
        out["strategy"] = {**strategy, "margin": float(speed_factor), "max_attempts": 1}
    out["drive"] = {**(out.get("drive") or {}), "brake_engage_time": float(brake_time_s)}
    if _on_corner(out):     # the edge-to-corner jump: every cell starts at rest on the balance edge
        out["trial"] = {**(out.get("trial") or {}), "start": {"resting_on": "edge"}}
    if isinstance(out.get("wheels"), list):
        out["wheels"] = [{k: v for k, v in w.items() if k != "brake_engage_time"} if isinstance(w, dict) else w
                         for w in out["wheels"]]
    return out


def start_note(raw: dict) -> str | None:
    """One note line when the map sets aside the scenario's own start: a corner device's cells all start at
    rest on the balance edge (`cell_raw`), whatever `trial.start` says; None otherwise."""
    start = (raw.get("trial") or {}).get("start") if isinstance(raw.get("trial"), dict) else None
    if not _on_corner(raw) or not start or start == {"resting_on": "edge"}:
        return None
    shown = "{" + ", ".join(f"{k}: {v}" for k, v in start.items()) + "}" if isinstance(start, dict) else str(start)
    return (f"note: trial.start {shown} is not used: the map's cells start at rest on the balance edge "
            "(the edge-to-corner jump, one attempt each)")


def _on_corner(raw: dict) -> bool:
    """A floor device balancing on its corner (the scenario mapping, before validation)."""
    body = raw.get("body") or {}
    return isinstance(body, dict) and body.get("mount") == "floor" and body.get("balance_on") == "corner"


def rise_fraction(smallest_tilt_rad: float, rest_tilt_rad: float) -> float:
    """(cos theta_min - cos theta_0) / (1 - cos theta_0): the centre of mass's rise over the rise to balance."""
    need = 1.0 - math.cos(rest_tilt_rad)
    return (math.cos(smallest_tilt_rad) - math.cos(rest_tilt_rad)) / need if need > 0 else 1.0


def jump_cell(payload: dict) -> dict:
    """Run one cell (module-level so worker processes can run it)."""
    from ..model.scenario import validate_scenario
    from ..run.trial import run_trial
    row = {"speed_factor": payload["x"], "brake_engage_time_s": payload["y"]}
    try:
        sc = validate_scenario(cell_raw(payload["raw"], speed_factor=payload["x"], brake_time_s=payload["y"]),
                               where=payload["where"])
    except (ScenarioError, ValueError) as exc:   # pydantic's ValidationError is a ValueError
        return row | {"got_up": False, "outcome": "invalid", "message": str(exc).splitlines()[0]}
    res = run_trial(sc, seed=payload["seed"])
    if sc.is_planar:
        return row | planar_jump_row(res)
    tr = res.trace
    if sc.body.mount == "floor" and sc.body.balance_on == "corner":
        tilt = np.asarray(tr.tilt[:tr.n], dtype=float)
        return row | jump_row(res, tilt, corner_past(np.asarray(tr.tilt_x[:tr.n], dtype=float),
                                                     np.asarray(tr.tilt_y[:tr.n], dtype=float)))
    signed = np.asarray(tr.tilt_x[:tr.n], dtype=float)
    return row | jump_row(res, np.abs(signed), signed * math.copysign(1.0, signed[0]) if signed.size else signed)


def corner_past(tilt_x: np.ndarray, tilt_y: np.ndarray) -> np.ndarray:
    """The (tilt_x, tilt_y) vector projected on its start direction, rad: positive on the start's side of
    the corner balance, negative past it. A start exactly at balance has no direction: zeros."""
    if not tilt_x.size:
        return tilt_x
    norm = math.hypot(float(tilt_x[0]), float(tilt_y[0]))
    if norm == 0.0:
        return np.zeros_like(tilt_x)
    return (tilt_x * float(tilt_x[0]) + tilt_y * float(tilt_y[0])) / norm


def jump_row(res, tilt: np.ndarray, towards: np.ndarray) -> dict:
    """A 3D cell's row from its tilt from balance (rad, >= 0; the start at the rest tilt) and the signed
    tilt along the start's side (rad, negative: past balance on the far side), with the law's metrics."""
    m = res.strategy.extra_metrics if res.strategy is not None else {}
    smallest = float(np.min(tilt)) if tilt.size else None
    braked = m.get("braked_at_s")
    outcome = res.outcome
    if outcome == "balanced" and (braked is None or res.ended_at_s - braked < HELD_S):
        outcome = "undecided"     # the trial ended before the jump had been held long enough to judge it
    return {"got_up": outcome == "balanced", "outcome": outcome, "smallest_tilt_rad": smallest,
            "braked_at_s": braked,
            "rise_fraction": None if smallest is None else rise_fraction(smallest, float(tilt[0])),
            "farthest_past_balance_rad": None if smallest is None else max(0.0, float(-np.min(towards))),
            "needed_wheel_speed_rad_s": m.get("needed_wheel_speed_rad_s"),
            "reached_wheel_speed_rad_s": m.get("reached_wheel_speed_rad_s"),
            "jump_attempts": m.get("jump_attempts")}


def planar_jump_row(res) -> dict:
    """A one-wheel cell's row from its first jump: the rows up to a second brake, or up to where the body,
    once inside the release angle after the brake, left it (a supervisor that lost the body swings it up
    again: that is not this cell's jump). The angle is the unwrapped one from upright; tilt is its wrapped
    magnitude, the start's (hanging: pi) the rest tilt."""
    tr = res.trace
    n = tr.n
    mode = np.asarray(tr.mode[:n])
    brake = tr.phases.index("brake") if "brake" in tr.phases else None
    rows = np.flatnonzero(mode == brake) if brake is not None else np.array([], dtype=int)
    first_brake = int(rows[0]) if rows.size else None
    later = rows[1:][np.diff(rows) > 1] if rows.size > 1 else rows[:0]     # starts of later brake blocks
    end = int(later[0]) if later.size else n
    unwrapped = np.asarray(tr.angle[:end], dtype=float)
    signed = wrap_angles(unwrapped)
    tilt = np.abs(signed)
    # the first jump also ends where the body, once inside the release angle after the brake, leaves it: a
    # later catch (the supervisor swinging it round again) is not this jump's
    release = getattr(getattr(res.strategy, "params", None), "release_angle", math.pi)
    outside = tilt > release
    start = first_brake if first_brake is not None else 0
    inside = np.flatnonzero(~outside[start:])
    left = np.flatnonzero(outside[start + inside[0]:]) if inside.size else inside
    if left.size:
        end = start + int(inside[0]) + int(left[0]) + 1
        unwrapped, signed, tilt = unwrapped[:end], signed[:end], tilt[:end]
    m = res.strategy.extra_metrics if res.strategy is not None else {}
    braked = first_brake * tr.step_s if first_brake is not None else None
    outcome = res.outcome if end == n else "fell"          # it fell, or a second jump began: this one did not hold
    if outcome == "balanced" and (braked is None or res.ended_at_s - braked < HELD_S):
        outcome = "undecided"
    if not tilt.size:
        return {"got_up": False, "outcome": outcome, "smallest_tilt_rad": None, "braked_at_s": braked}
    i = int(np.argmin(tilt))
    upright = unwrapped[i] - signed[i]                    # the upright (2 pi k) the jump made for
    sense = math.copysign(1.0, upright - unwrapped[0])
    return {"got_up": outcome == "balanced", "outcome": outcome, "smallest_tilt_rad": float(tilt[i]),
            "braked_at_s": braked, "rise_fraction": rise_fraction(float(tilt[i]), float(tilt[0])),
            "farthest_past_balance_rad": max(0.0, float(np.max(sense * (unwrapped[i:] - upright)))),
            "needed_wheel_speed_rad_s": m.get("needed_wheel_speed_rad_s"),
            # measured at the first brake's tick, as the law reads it (a second jump's would be in its metrics)
            "reached_wheel_speed_rad_s": None if first_brake is None else abs(float(tr.meas_wheel[first_brake])),
            "jump_attempts": 0 if first_brake is None else 1}


def jump_map(raw: dict, where: str, *, grid: int = 9, speed_factor: tuple[float, float] = SPEED_FACTOR_RANGE,
             brake_time_s: tuple[float, float] = BRAKE_TIME_RANGE_S, workers: int | None = None, cluster=None,
             on_progress=None) -> dict:
    """Run the map. Returns the grid values (`x` factors, `y` s), the rows (x-major) and the scenario's name."""
    sc = check_jump_map(raw, where, grid=grid, speed_factor=speed_factor, brake_time_s=brake_time_s)
    xs = np.round(np.linspace(*speed_factor, grid), 12) if grid > 1 else np.array([speed_factor[1]])
    ys = np.round(np.linspace(*brake_time_s, grid), 12) if grid > 1 else np.array([brake_time_s[0]])
    tasks = ((i, {"raw": raw, "where": where, "x": float(xs[i // grid]), "y": float(ys[i % grid]),
                  "seed": trial_seed(sc.trial.seed, i)}) for i in range(grid * grid))
    rows: list = [None] * (grid * grid)
    for done, (i, row) in enumerate(run_tasks(jump_cell, tasks, workers=workers, cluster=cluster, batch=1), 1):
        rows[i] = row
        if on_progress:
            on_progress(done, grid * grid)
    return {"kind": "jump", "x": xs, "y": ys, "rows": rows, "name": sc.name, "strategy": sc.strategy.kind,
            "mount": sc.body.mount, "trial_duration_s": sc.trial.duration,
            "speed_factor_range": list(speed_factor), "brake_time_range_s": list(brake_time_s)}


def least_factor_getting_up(result: dict) -> list:
    """Per brake time (the y values), the smallest speed factor on the grid whose cell got up (None: none)."""
    n = len(result["x"])
    out = []
    for j in range(len(result["y"])):
        ups = [result["x"][i] for i in range(n) if result["rows"][i * n + j]["got_up"]]
        out.append(float(min(ups)) if ups else None)
    return out


def undecided(result: dict) -> int:
    """How many cells ended too soon after their brake to be judged (a longer `trial.duration` decides them)."""
    return sum(r["outcome"] == "undecided" for r in result["rows"])


def write_jump_map(result: dict, out_dir: Path) -> None:
    """catch_map.csv (one row per cell), catch_map.json (the map's set-up and counts), catch_map.png."""
    from .catchmap import write_cell_rows
    write_cell_rows(out_dir / "catch_map.csv", result["rows"], COLUMNS)
    summary = {k: result[k] for k in ("kind", "name", "strategy", "mount", "trial_duration_s", "speed_factor_range",
                                      "brake_time_range_s")}
    summary |= {"axes": [{"column": c, "label": lab} for c, lab in zip(COLUMNS[:2], AXIS_LABELS)],
                "grid": len(result["x"]), "cells": len(result["rows"]),
                "got_up_cells": sum(bool(r["got_up"]) for r in result["rows"]),
                "undecided_cells": undecided(result),
                "least_speed_factor_getting_up": [{"brake_engage_time_s": float(y), "speed_factor": f}
                                                  for y, f in zip(result["y"], least_factor_getting_up(result))]}
    write_text(out_dir / "catch_map.json", json.dumps(clean_json(summary), indent=2) + "\n")
    from ..media.plots import save_figure
    save_figure(jump_figure(result), out_dir / "catch_map.png")


def jump_figure(result: dict):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from ..media.plots import INK
    xs, ys_ms = result["x"], np.asarray(result["y"]) * 1e3
    n = len(xs)
    rise = np.array([[np.nan if r.get("rise_fraction") is None else min(r["rise_fraction"], 1.0)
                      for r in result["rows"][i * n:(i + 1) * n]] for i in range(n)])
    marks = [[_mark(r) for r in result["rows"][i * n:(i + 1) * n]] for i in range(n)]
    dx = (xs[1] - xs[0]) / 2 if n > 1 else 0.05
    dy = (ys_ms[1] - ys_ms[0]) / 2 if n > 1 and ys_ms[1] > ys_ms[0] else 1.0
    fig, ax = plt.subplots(figsize=(7.0, 5.5), constrained_layout=True)
    im = ax.imshow(rise.T, origin="lower", extent=[xs[0] - dx, xs[-1] + dx, ys_ms[0] - dy, ys_ms[-1] + dy],
                   aspect="auto", cmap="viridis", vmin=0.0, vmax=1.0)
    fig.colorbar(im, ax=ax, label="rise reached / rise to balance (centre of mass)")
    # whole words fit up to about 11 cells a row; past that the words overlap, so initials
    short_words = n > WORDS_UP_TO
    for i in range(n):
        for j in range(n):
            word = marks[i][j]
            ax.text(xs[i], ys_ms[j], INITIALS[word] if short_words else word, ha="center", va="center",
                    fontsize=7, color=INK if word not in ("short", "slid") else "white")
    ax.axvline(1.0, color=INK, lw=0.8, ls="--")
    ax.set_xlabel(AXIS_LABELS[0])
    ax.set_ylabel(AXIS_LABELS[1])
    key = {w: (f"{INITIALS[w]} ({w})" if short_words else w) for w in INITIALS}
    ax.set_title(f"{result['name']}: jump map, one attempt per cell\n{key['up']}: got up and balanced; {key['over']}: "
                 f"went past balance and fell\n{key['short']}: fell back; {key['slid']}: the contact slid past the "
                 f"floor's slip limit\n?: ended too soon; dashed line: the lossless need", color=INK, fontsize=9,
                 parse_math=False)
    return fig


WORDS_UP_TO = 11      # cells a row with whole words on the figure; more get initials (our choice)
INITIALS = {"up": "U", "over": "O", "short": "S", "slid": "SL", "?": "?"}


OVER_RAD = math.radians(10)   # tipped this far past balance: it went over the edge (our choice)


def _mark(row: dict) -> str:
    """A cell's word on the figure: up, over (went past balance and fell), short, or slid (a floor body's
    contact slid past `floor.slip_limit`: the outcome `slipped`, which the rise alone reads as up)."""
    if row["got_up"]:
        return "up"
    if row["outcome"] in ("undecided", "invalid"):
        return "?"
    if row["outcome"] == "slipped":
        return "slid"
    return "over" if (row.get("farthest_past_balance_rad") or 0.0) > OVER_RAD else "short"
