"""`check`'s power criteria, for a scenario with a battery or a drive model (`Scenario.power_model`).

- `battery_run_time_s` (a battery only): how long one charge holds the device upright, from the hold
  trial's mean bus current and the charge between the starting state of charge and the one whose
  open-circuit voltage is the cut-off (the sag under load brings the cut-off sooner: a best case).
  Limit: `requirements.run_time`.
- `sag_wheel_speed_margin`: the wheel-speed margin at the sagged bus, 1 - peak |w| / (V_min / k_e),
  the lowest over the nominal and hold runs (on a 3D device over every wheel, each with its own k_e,
  at the shared bus's low). Limit: `requirements.wheel_speed_margin`.
- `peak_bus_voltage_v`: the bus's peak in a braking trial (body locked upright, the wheel starting
  at the fastest speed the wheel-speed margin allows, braked at the greatest regenerated power: a
  voltage-mode drive holds half the start's back-EMF, since the power v (v - k_e w) / R returned is
  largest at v = k_e w / 2; a current-mode drive commands the full reverse current). Limit:
  `drive.max_bus_voltage`, else a pack's highest charge voltage (LiPo and Li-ion 4.20 V per cell,
  references.md safety; NiMH 1.5 V per cell, common practice, no source); a bench supply with
  neither is not judged. A 3D device brakes every wheel at once into the shared bus, its body locked
  as well (a floor body excepted; `braking_raw3d`).
- `driver_trips`: over-current trips over the nominal, hold and braking runs; limit 0.
"""

from __future__ import annotations

import copy
import math

from ..model.cells import OCV_TABLES, open_circuit_volts_per_cell
from ..model.scenario import validate_scenario
from ..run.metrics import trial_metrics
from ..run.trial import run_trial

BRAKING_S = 1.0
MAX_CHARGE_PER_CELL_V = {"lipo": 4.20, "li-ion": 4.20, "nimh": 1.5}


def braking_raw(raw: dict, sc) -> dict:
    """The raw scenario of the braking trial (see the module docstring)."""
    from ..model.device import Device
    dev = Device.from_scenario(sc)
    w0 = (1.0 - sc.requirements.wheel_speed_margin) * dev.no_load_speed_rad_s
    out = copy.deepcopy(raw)
    out.pop("tolerances", None)     # they may name the scenario's own strategy's keys
    out.setdefault("body", {})["locked"] = True
    out["trial"] = {"duration": BRAKING_S, "start": {"angle": 0.0, "rate": 0.0, "wheel_speed": w0},
                    "seed": sc.trial.seed}
    if sc.drive.mode == "current":
        out["strategy"] = {"kind": "fixed_current", "amps": -dev.command_limit}
    else:
        out["strategy"] = {"kind": "fixed_voltage", "volts": 0.5 * dev.k_e_v_s_rad * w0}
    return out


def braking_raw3d(raw: dict, sc) -> dict:
    """The raw scenario of a 3D device's braking trial: every wheel at the fastest speed the wheel-speed
    margin allows (its own no-load speed times 1 - margin), all braked at once into the shared bus at
    half their back-EMF (the same volts for every wheel: (1 - margin) supply / 2; a current-mode drive:
    each wheel's full reverse current, as on one wheel), the body locked upright
    (`body.locked`: the clamp takes the wheels' reaction, so each wheel's spin energy goes back to the bus
    alone, as on a bench). A body on the floor is not clamped: it rests as the scenario starts it, free,
    and takes up part of the wheels' momentum."""
    from ..model.device3d import Device3D
    dev = Device3D.from_scenario(sc)
    share = 1.0 - sc.requirements.wheel_speed_margin
    out = copy.deepcopy(raw)
    out.pop("tolerances", None)
    start = {"wheel_speed": [share * w.no_load_speed_rad_s for w in dev.wheels]}
    if sc.body.mount == "floor":      # resting as the scenario starts it
        start = {**((raw.get("trial") or {}).get("start") or {}), **start}
    else:
        start |= {"tilt": [0.0, 0.0]} if sc.design_mount == "ball" else {"angle": 0.0, "rate": 0.0}
        out.setdefault("body", {})["locked"] = True
    out["trial"] = {"duration": BRAKING_S, "start": start, "seed": sc.trial.seed}
    if sc.drive.mode == "current":   # each wheel's full reverse current (the runner clamps to each wheel's limit)
        out["strategy"] = {"kind": "fixed_current", "amps": -max(w.command_limit("current") for w in dev.wheels)}
    else:
        out["strategy"] = {"kind": "fixed_voltage", "volts": 0.5 * share * sc.drive.supply}
    return out


def braking_trial(raw: dict, sc, where: str):
    """(TrialResult, metrics) of the braking trial (a 3D device's: `braking_raw3d`)."""
    if sc.is_planar:
        result = run_trial(validate_scenario(braking_raw(raw, sc), where=where))
        return result, trial_metrics(result)
    from ..run.metrics3d import trial_metrics3d
    result = run_trial(validate_scenario(braking_raw3d(raw, sc), where=where))
    return result, trial_metrics3d(result)


def bus_voltage_limit(sc) -> tuple[float | None, str]:
    """(limit V or None, where it comes from)."""
    if sc.drive.max_bus_voltage is not None:
        return sc.drive.max_bus_voltage, "drive.max_bus_voltage"
    if sc.battery is not None:
        b = sc.battery
        per_cell = MAX_CHARGE_PER_CELL_V[b.chemistry]
        return b.cells * per_cell, f"{b.cells} x {per_cell:.2f} V, the pack's highest charge voltage"
    return None, "a bench supply with no drive.max_bus_voltage"


def soc_at_volts_per_cell(chemistry: str, volts: float) -> float:
    """The state of charge whose open-circuit voltage per cell is `volts` (the table inverted; 0 below it)."""
    table = OCV_TABLES[chemistry]
    if volts <= table[0][1]:
        return 0.0
    for (s0, v0), (s1, v1) in zip(table, table[1:]):
        if volts <= v1:
            return s0 + (s1 - s0) * (volts - v0) / (v1 - v0)
    return 1.0


def run_time_s(sc, mean_bus_current_a: float) -> float | None:
    """Seconds one charge lasts at `mean_bus_current_a` (A), down to the cut-off's open-circuit state
    of charge; inf when the hold draws nothing on average; None without a battery."""
    b = sc.battery
    if b is None:
        return None
    usable = max(b.state_of_charge - soc_at_volts_per_cell(b.chemistry, b.cutoff_per_cell), 0.0) * b.capacity
    return usable / mean_bus_current_a if mean_bus_current_a > 0.0 else math.inf


def power_criteria(sc, metrics: dict, braking: dict, criterion) -> list[dict]:
    """The power criteria from the runs' metrics (`metrics`: run name -> metrics with the power keys;
    `braking`: the braking trial's metrics). `criterion(name, value, limit, passed, note)` makes one."""
    req = sc.requirements
    out = []
    hold = metrics["hold"]
    if sc.battery is not None:
        t = run_time_s(sc, hold["mean_bus_current_a"])
        v0 = open_circuit_volts_per_cell(sc.battery.chemistry, sc.battery.state_of_charge)
        out.append(criterion("battery_run_time_s", t, req.run_time, t is not None and t >= req.run_time,
                             f"hold's mean bus current {hold['mean_bus_current_a']:.3g} A from {sc.battery.state_of_charge:.0%} "
                             f"charge ({v0:.2f} V per cell at rest) to the {sc.battery.cutoff_per_cell:.2f} V per cell cut-off; "
                             "the motor's draw only: the controller's, sensors' and driver's own current shortens it"))
    margins = []
    for name in ("nominal", "hold"):
        m = metrics[name]
        if "wheels" in m:       # a 3D device: each wheel's margin at the shared bus's low (`metrics3d`)
            margins += [(w["sag_speed_margin"], f"{name} run, wheel {i}", m["min_supply_voltage_v"])
                        for i, w in enumerate(m["wheels"], start=1) if w.get("sag_speed_margin") is not None]
        elif m["peak_wheel_speed_rad_s"] is not None and m["min_supply_voltage_v"] > 0:
            limit_w = m["min_supply_voltage_v"] / sc.motor.k_e
            margins.append((1.0 - m["peak_wheel_speed_rad_s"] / limit_w, f"{name} run", m["min_supply_voltage_v"]))
    if margins:
        value, name, v_min = min(margins)
        out.append(criterion("sag_wheel_speed_margin", value, req.wheel_speed_margin, value >= req.wheel_speed_margin,
                             f"{name}: no-load speed at the sagged {v_min:.2f} V bus"))
    else:
        out.append(criterion("sag_wheel_speed_margin", None, req.wheel_speed_margin, False, "could not be found"))
    limit, basis = bus_voltage_limit(sc)
    peak = braking["peak_supply_voltage_v"]
    if limit is not None:
        setup = ("body locked, wheel braked from its margin speed" if "wheels" not in braking else
                 "every wheel braked at once from its margin speed into the shared bus, the body "
                 + ("free on the floor" if sc.body.mount == "floor" else "locked"))
        out.append(criterion("peak_bus_voltage_v", peak, limit, peak <= limit and braking["cause"] != "bus_over_voltage",
                             f"braking trial ({setup}); limit: {basis}"))
    trips = sum(int(m.get("driver_trips") or 0) for m in (*metrics.values(), braking))
    out.append(criterion("driver_trips", trips, 0, trips == 0, "over the nominal, hold and braking runs"))
    return out

