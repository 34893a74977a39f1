"""Metrics of one 3D trial (metrics.json): per-wheel figures, the worst wheel in today's scalar keys.

`wheels` lists, per wheel in the scenario's order, peak_speed_rad_s, speed_limit_rad_s (no-load
speed at the supply), speed_margin, peak_current_a, rms_current_a and peak_voltage_v; the scalar
keys of the planar metrics hold the worst wheel (highest peak speed share, current and voltage).
Angles: `peak_tilt_rad` (the largest `tilt_rad`, see `sim.core.frames`). Totals cover the trial up
to the fall, as on the planar path (`totals_until_s`). Through the power chain the one-wheel power keys
follow (`_power`), over the shared bus.
With an estimator (an IMU): its tilt error
against the true tilts up to that row, `estimator_angle_rms_error_rad` and `..._peak_...` of the
error's size (x and y together on a ball), `estimator_tilt_mean_error_rad` per tilt axis (a steady
error acts as an angle bias); with a `timing` section, `loop_overruns`. Without them, no new keys.
"""

from __future__ import annotations

import math

import numpy as np

from ..core.angles import wrap_angles
from .metrics import (PUSH_RECOVER_S, SATURATION_REL_TOL, SETTLE_BAND_RAD, power_metrics, push_outcomes, settle_time,
                      supply_ceiling)


def trial_metrics3d(result) -> dict:
    tr, dev, sc = result.trace, result.device, result.scenario
    dt = tr.step_s
    end = tr.n if result.fell_at_s is None else min(int(round(result.fell_at_s / dt)), tr.n)
    wheels, energy, regen = [], 0.0, 0.0
    for i, w in enumerate(dev.wheels, start=1):
        speed, cur, volt = tr.wheel(i, "speed")[:end], tr.wheel(i, "current")[:end], tr.wheel(i, "voltage")[:end]
        peak = float(np.max(np.abs(speed))) if end else 0.0
        limit = w.no_load_speed_rad_s
        wheels.append({"peak_speed_rad_s": peak, "speed_limit_rad_s": limit, "speed_margin": 1.0 - peak / limit,
                       "peak_current_a": float(np.max(np.abs(cur))) if end else 0.0,
                       "rms_current_a": float(np.sqrt(np.mean(cur ** 2))) if end else 0.0,
                       "peak_voltage_v": float(np.max(np.abs(volt))) if end else 0.0})
        energy += float(np.sum(volt * cur) * dt)
        regen += float(-np.sum(np.minimum(volt * cur, 0.0)) * dt)
    worst = min(range(len(wheels)), key=lambda j: wheels[j]["speed_margin"])
    tilt = tr.tilt[: tr.n]
    caught = result.caught_at_s
    held_from = caught if caught is not None else (0.0 if result.outcome == "balanced" else None)
    ticks = -(-end // sc.control_steps)
    limits = [w.current_limit_a for w in dev.wheels if math.isfinite(w.current_limit_a)]
    return {
        "outcome": result.outcome, "message": result.message, "cause": result.cause,
        "cause_detail": result.cause_detail, "strategy": sc.strategy.kind, "seed": None,
        "mount": dev.mount if dev.floor is None else "floor", "wheel_count": dev.n_wheels,
        "caught_at_s": caught, "fell_at_s": result.fell_at_s,
        "settle_time_s": settle_time(tilt, dt, held_from, sc.trial.pushes), "settle_band_rad": SETTLE_BAND_RAD,
        "simulated_s": result.ended_at_s, "totals_until_s": end * dt,
        "wheels": wheels,
        "peak_wheel_speed_rad_s": wheels[worst]["peak_speed_rad_s"],
        "wheel_speed_limit_rad_s": wheels[worst]["speed_limit_rad_s"],
        "wheel_speed_margin": wheels[worst]["speed_margin"],
        "peak_current_a": max(w["peak_current_a"] for w in wheels),
        "rms_current_a": max(w["rms_current_a"] for w in wheels),
        "current_limit_a": min(limits) if limits else None,
        "peak_voltage_v": max(w["peak_voltage_v"] for w in wheels),
        "supply_v": sc.drive.supply,
        "voltage_saturated_fraction": saturated_ticks3d(tr, dev, end, sc.control_steps, sc) / ticks if ticks else 0.0,
        "energy_from_supply_j": energy, "regenerated_energy_j": regen,
        "peak_tilt_rad": float(np.max(tilt[:end])) if end else None,
        "max_angle_after_catch_rad": float(np.max(tilt[int(round(held_from / dt)):])) if held_from is not None and tr.n else None,
        "final_tilt_rad": float(tilt[-1]) if tr.n else None,
        "pushes": push_outcomes(result, tilt),   # peak_angle_rad: the peak tilt
        "push_recovery_window_s": PUSH_RECOVER_S,
        "real_time_factor": result.ended_at_s / result.wall_s if result.wall_s > 0 else None,
        "physics_step_s": dt, "control_rate_hz": dev.control_rate_hz,
        **(_power(result, wheels) if result.power is not None else {}),
        **(result.floor or {}),   # a body on the floor: slip_m, lift_off_s, rest_face, ... (sim.run.floor_contact)
        **{k: v for k, v in (getattr(result.strategy, "extra_metrics", None) or {}).items()},
        **sensing_metrics3d(result, end),
    }


def tilt_errors(trace, start: int, stop: int) -> np.ndarray | None:
    """The estimator's tilt errors (estimate minus truth, wrapped), rad, rows [start, stop), one
    column per tilt axis; None without an estimator."""
    axes = [a for a in ("x", "y") if hasattr(trace, f"estimated_tilt_{a}_rad")]
    if not axes:
        return None
    return np.stack([wrap_angles(getattr(trace, f"estimated_tilt_{a}_rad")[start:stop]
                                 - getattr(trace, f"tilt_{a}")[start:stop]) for a in axes], axis=1)


def sensing_metrics3d(result, end: int) -> dict:
    """The estimator's and the loop timing's keys (see the module docstring); {} without them."""
    out = {}
    err = tilt_errors(result.trace, 0, end)
    if err is not None:
        size = np.sqrt(np.sum(err ** 2, axis=1))
        out |= {"estimator": result.scenario.sensors.estimator.kind,
                "estimator_angle_rms_error_rad": float(np.sqrt(np.mean(size ** 2))) if size.size else None,
                "estimator_angle_peak_error_rad": float(np.max(size)) if size.size else None,
                "estimator_tilt_mean_error_rad": [float(v) for v in err.mean(axis=0)] if size.size else None}
    if result.loop_overruns is not None:
        out["loop_overruns"] = result.loop_overruns
    return out


def saturated_ticks3d(trace, device, end: int, control_steps: int, scenario=None) -> int:
    """Control ticks in rows [0, end) at which some wheel's voltage reached the supply (through the power
    chain: the bus at that row less the dead-time loss, `sim.run.metrics.supply_ceiling`; in current
    mode the voltage a bridge applied to drive the current asked, so a tick counts when a current
    loop ran out of bus voltage, as on one wheel)."""
    hit = np.zeros(len(range(0, end, control_steps)), dtype=bool)
    if getattr(trace, "has_power_columns", False):
        ref = supply_ceiling(trace, scenario)[:end:control_steps]
        for i in range(1, device.n_wheels + 1):
            hit |= (np.abs(trace.wheel(i, "voltage")[:end:control_steps]) >= ref * (1.0 - SATURATION_REL_TOL)) & (ref > 0.0)
        return int(np.count_nonzero(hit))
    for i, w in enumerate(device.wheels, start=1):
        hit |= np.abs(trace.wheel(i, "voltage")[:end:control_steps]) >= w.supply_v * (1.0 - SATURATION_REL_TOL)
    return int(np.count_nonzero(hit))


def _power(result, wheels: list[dict]) -> dict:
    """Through the power chain: the one-wheel power keys over the shared bus (`sim.run.metrics.power_metrics`;
    each event names its wheel, null for the bus's own), each wheel's own figures added to its entry in
    `wheels` (trips, dead-band share, reversals, peak winding temperature when coupled), and the wheel
    speed margin at the sagged bus per wheel (`sag_speed_margin`: 1 - peak |w| k_e / V_min)."""
    out = power_metrics(result)
    v_min = out["min_supply_voltage_v"]
    for entry, own, unit in zip(wheels, result.power["wheels"], result.device.wheels):
        entry.update(own)
        entry["sag_speed_margin"] = (1.0 - entry["peak_speed_rad_s"] * unit.k_e_v_s_rad / v_min) if v_min > 0 else None
    return out
