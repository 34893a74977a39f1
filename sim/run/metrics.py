"""Metrics of one trial, computed from its trace: margins, times, currents, energy.

Every key carries its unit; a value that does not apply is None (null in JSON).

Totals and peaks (voltage saturation, RMS current, energy, peak wheel speed, current and voltage)
cover the trial up to the fall (`fell_at_s`) when the body fell, and leave out the flailing after
it; `totals_until_s` says up to when they run.
"""

from __future__ import annotations

import math

import numpy as np

from ..core.angles import wrap_angles

SETTLE_BAND_RAD = math.radians(1.0)  # settled: within 1 degree of upright and staying there (our choice)
PUSH_RECOVER_S = 3.0
"""Recovery window of a push, s: a push is survived when the body stays within the release angle
for this long after it (or until the next push, or the end of the trial, when sooner). `check`'s
push trials run exactly this long after their push. A fall later is its own event."""
SATURATION_REL_TOL = 1e-9
"""A tick counts as at the supply when |V| >= supply * (1 - this): a law asking for exactly the
supply counts, whatever rounding its arithmetic did."""


def saturated_ticks(trace, control_steps: int, supply_v, end_row: int | None = None) -> int:
    """Control ticks in rows [0, end_row) whose voltage reached the supply (see SATURATION_REL_TOL).

    Ticks are the rows k with k % control_steps == 0; the trace holds the voltage the drive applied.
    `supply_v`: V, or an array of it by row (`supply_ceiling` of a trial through the power chain).
    """
    end = trace.n if end_row is None else min(end_row, trace.n)
    volts = trace.voltage[:end:control_steps]
    if isinstance(supply_v, np.ndarray):   # a row with no bus (the row of a failure) is no saturation
        ref = supply_v[:end:control_steps]
        return int(np.count_nonzero((np.abs(volts) >= ref * (1.0 - SATURATION_REL_TOL)) & (ref > 0.0)))
    return int(np.count_nonzero(np.abs(volts) >= supply_v * (1.0 - SATURATION_REL_TOL)))


def supply_ceiling(trace, scenario):
    """The most the drive could apply, V: the scenario's supply, or, through the power chain, the bus
    at each row less the dead-time loss (an array by row: a sagging pack's duty at 100% counts)."""
    if not getattr(trace, "has_power_columns", False):
        return scenario.drive.supply
    pwm = scenario.drive.pwm
    loss = 2.0 * pwm.dead_time * pwm.frequency if pwm is not None and pwm.frequency is not None else 0.0
    return trace.supply_voltage * (1.0 - loss)


def totals_end_row(result) -> int:
    """The first row the totals leave out: the fall's row, or the trace's end."""
    n = result.trace.n
    if result.fell_at_s is None:
        return n
    return min(int(round(result.fell_at_s / result.trace.step_s)), n)


def trial_metrics(result) -> dict:
    """The metrics dictionary written to metrics.json."""
    tr, dev, sc = result.trace, result.device, result.scenario
    dt = tr.step_s
    end = totals_end_row(result)
    cur, volt, wheel = tr.current[:end], tr.voltage[:end], tr.wheel_speed[:end]
    angle = wrap_angles(tr.view("angle").copy())
    finite = np.isfinite(wheel)
    limit = dev.no_load_speed_rad_s
    peak_wheel = float(np.max(np.abs(wheel[finite]))) if finite.any() else None
    ticks = -(-end // sc.control_steps)  # the tick rows among the first `end` rows
    sat = saturated_ticks(tr, sc.control_steps, supply_ceiling(tr, sc), end)
    rms = float(np.sqrt(np.mean(cur**2))) if end else 0.0
    energy = float(np.sum(volt * cur) * dt)
    caught = result.caught_at_s
    # balanced from the first step (caught_at_s is null then): margins count from the start
    held_from = caught if caught is not None else (0.0 if result.outcome == "balanced" else None)
    metrics = {
        "outcome": result.outcome,
        "message": result.message,
        "cause": result.cause,
        "cause_detail": result.cause_detail,
        "strategy": sc.strategy.kind,
        "seed": None,
        "caught_at_s": caught,
        "fell_at_s": result.fell_at_s,
        "settle_time_s": settle_time(angle, dt, held_from, sc.trial.pushes),
        "settle_band_rad": SETTLE_BAND_RAD,
        "simulated_s": result.ended_at_s,
        "totals_until_s": end * dt,
        "peak_wheel_speed_rad_s": peak_wheel,
        "wheel_speed_limit_rad_s": limit,
        "wheel_speed_margin": (1.0 - peak_wheel / limit) if peak_wheel is not None else None,
        "peak_current_a": float(np.max(np.abs(cur))) if end else 0.0,
        "rms_current_a": rms,
        "current_limit_a": dev.current_limit_a if math.isfinite(dev.current_limit_a) else None,
        "peak_voltage_v": float(np.max(np.abs(volt))) if end else 0.0,
        "supply_v": sc.drive.supply,
        "voltage_saturated_fraction": sat / ticks if ticks else 0.0,
        "energy_from_supply_j": energy,
        "regenerated_energy_j": float(-np.sum(np.minimum(volt * cur, 0.0)) * dt),
        "max_angle_after_catch_rad": _max_after(angle, dt, held_from),
        "final_angle_rad": float(angle[-1]) if tr.n else None,
        "pushes": push_outcomes(result, angle),
        "push_recovery_window_s": PUSH_RECOVER_S,
        "real_time_factor": result.ended_at_s / result.wall_s if result.wall_s > 0 else None,
        "physics_step_s": dt,
        "control_rate_hz": dev.control_rate_hz,
    }
    if result.power is not None:    # the power chain's figures, only when it ran (today's keys stay as they were)
        metrics.update(power_metrics(result))
    # a strategy may report figures of its own (e.g. a jump's needed and reached wheel speed);
    # they never replace the runner's keys
    extra = getattr(result.strategy, "extra_metrics", None) or {}
    metrics.update({k: v for k, v in extra.items() if k not in metrics})
    return metrics | sensing_metrics(result, angle, end)


def sensing_metrics(result, angle: np.ndarray, end: int) -> dict:
    """With an estimator: its angle error against the true angle, wrapped, over rows [0, end) (the
    estimate as held between ticks): RMS, peak and mean (a steady error acts like an angle-sensor
    bias), rad. With a `timing` section: `loop_overruns`. Empty otherwise (today's keys only)."""
    out = {}
    est = result.trace.extra.get("estimated_angle_rad")
    if est is not None:
        err = wrap_angles(est[:end] - angle[:end]) if end else np.zeros(0)
        out |= {"estimator": result.scenario.sensors.estimator.kind,
                "estimator_angle_rms_error_rad": float(np.sqrt(np.mean(err**2))) if err.size else None,
                "estimator_angle_peak_error_rad": float(np.max(np.abs(err))) if err.size else None,
                "estimator_angle_mean_error_rad": float(np.mean(err)) if err.size else None}
    if result.loop_overruns is not None:
        out["loop_overruns"] = result.loop_overruns
    return out


POWER_ROW_KEYS = ("min_supply_voltage_v", "peak_supply_voltage_v", "charge_used_mah", "driver_trips")
"""The power chain's figures a judged row carries when the chain ran (sweep's results.csv adds them)."""


def power_metrics(result) -> dict:
    """The power chain's keys: the bus voltage's extremes (V; the peak shows regeneration), the charge
    used (mAh, net of regeneration), the pack's state of charge at the end (null on a bench supply),
    the driver's trips, the share of steps whose non-zero command fell in the PWM dead band (null
    without a PWM model), the protection events, the reversals of a bridge with a reversal delay and
    the share of steps a command waited for one (null without a delay), the mean bus current over the trial (A) and the energy
    drawn from the bus (J)."""
    p = result.power
    tr = result.trace
    out = {k: p[k] for k in ("min_supply_voltage_v", "peak_supply_voltage_v", "charge_used_mah",
                             "battery_state_of_charge_end", "driver_trips", "pwm_dead_band_fraction",
                             "power_events", "reversals", "reversal_held_fraction")}
    out["mean_bus_current_a"] = float(np.mean(tr.bus_current[: tr.n])) if tr.n else 0.0
    # what the supply gave (negative: took back), the integral of V_bus I_bus; `energy_from_supply_j`
    # stays the winding's V i, as without the chain
    out["bus_energy_j"] = float(np.dot(tr.supply_voltage[: tr.n], tr.bus_current[: tr.n]) * tr.step_s)
    if "peak_winding_temperature_c" in p:
        out["peak_winding_temperature_c"] = p["peak_winding_temperature_c"]
    return out


def settle_time(angle: np.ndarray, dt: float, caught_at_s: float | None, pushes) -> float | None:
    """Seconds from the catch until |angle| enters the settle band for good (before any later push).

    None when the body was never caught or never settled in the window.
    """
    if caught_at_s is None or len(angle) == 0:
        return None
    k0 = int(round(caught_at_s / dt))
    later = [p.at for p in pushes if p.at > caught_at_s]
    k1 = int(round(min(later) / dt)) if later else len(angle)
    window = np.abs(angle[k0:k1]) > SETTLE_BAND_RAD
    if window.size == 0 or window[-1]:
        return None
    outside = np.nonzero(window)[0]
    return float((outside[-1] + 1) * dt) if outside.size else 0.0


def _max_after(angle: np.ndarray, dt: float, caught_at_s: float | None) -> float | None:
    if caught_at_s is None or len(angle) == 0:
        return None
    return float(np.max(np.abs(angle[int(round(caught_at_s / dt)):])))


def push_outcomes(result, angle: np.ndarray) -> list[dict]:
    """For each push: its size, the largest angle in its recovery window, survived or not.

    The window runs PUSH_RECOVER_S from the push, cut short by the next push or the trial's end
    (`recovery_window_s` is what was seen). Survived: the trial reached the push, and within the
    window the body stayed within the release angle, did not fall and the run neither diverged
    nor failed. A fall after the window is not the push's failure.
    """
    pushes = sorted(result.scenario.trial.pushes, key=lambda p: p.at)
    dt = result.trace.step_s
    release = getattr(getattr(result.strategy, "params", None), "release_angle", math.pi)
    broke = result.outcome in ("diverged", "strategy_failed")
    out = []
    for i, p in enumerate(pushes):
        t_end = min(p.at + PUSH_RECOVER_S, pushes[i + 1].at if i + 1 < len(pushes) else math.inf)
        k0, k1 = int(round(p.at / dt)), min(int(round(t_end / dt)), len(angle))
        seg = np.abs(angle[k0:k1])
        reached = k0 < len(angle)
        peak = float(seg.max()) if seg.size else None
        fell_inside = result.fell_at_s is not None and p.at <= result.fell_at_s < t_end
        broke_inside = broke and result.ended_at_s < t_end
        survived = bool(reached and peak is not None and peak <= release and not fell_inside and not broke_inside)
        out.append({"at_s": p.at, "impulse_n_m_s": p.impulse, "peak_angle_rad": peak, "survived": survived,
                    "recovery_window_s": max(k1 * dt - p.at, 0.0)})
    return out
