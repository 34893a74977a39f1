"""Metrics of one trial, computed from its trace: margins, times, currents, energy.

Every key carries its unit; a value that does not apply is None (null in JSON).
"""

from __future__ import annotations

import math

import numpy as np

from .engine import wrap_angles

SETTLE_BAND_RAD = math.radians(1.0)  # settled: within 1 degree of upright and staying there (our choice)


def trial_metrics(result) -> dict:
    """The metrics dictionary written to metrics.json."""
    tr, dev = result.trace, result.device
    dt = tr.step_s
    cur, volt, wheel = tr.view("current"), tr.view("voltage"), tr.view("wheel_speed")
    angle = wrap_angles(tr.view("angle").copy())
    finite = np.isfinite(wheel)
    limit = dev.no_load_speed_rad_s
    peak_wheel = float(np.max(np.abs(wheel[finite]))) if finite.any() else None
    ticks = max(result.control_ticks, 1)
    rms = float(np.sqrt(np.mean(cur**2))) if tr.n else 0.0
    energy = float(np.sum(volt * cur) * dt)
    caught = result.caught_at_s
    metrics = {
        "outcome": result.outcome,
        "message": result.message,
        "strategy": result.scenario.strategy.kind,
        "seed": None,
        "caught_at_s": caught,
        "fell_at_s": result.fell_at_s,
        "settle_time_s": settle_time(angle, dt, caught, result.scenario.trial.pushes),
        "settle_band_rad": SETTLE_BAND_RAD,
        "simulated_s": result.ended_at_s,
        "peak_wheel_speed_rad_s": peak_wheel,
        "wheel_speed_limit_rad_s": limit,
        "wheel_speed_margin": (1.0 - peak_wheel / limit) if peak_wheel is not None else None,
        "peak_current_a": float(np.max(np.abs(cur))) if tr.n else 0.0,
        "rms_current_a": rms,
        "current_limit_a": dev.current_limit_a if math.isfinite(dev.current_limit_a) else None,
        "peak_voltage_v": float(np.max(np.abs(volt))) if tr.n else 0.0,
        "supply_v": dev.supply_v,
        "voltage_saturated_fraction": result.saturated_ticks / ticks,
        "energy_from_supply_j": energy,
        "regenerated_energy_j": float(-np.sum(np.minimum(volt * cur, 0.0)) * dt),
        "max_angle_after_catch_rad": _max_after(angle, dt, caught),
        "final_angle_rad": float(angle[-1]) if tr.n else None,
        "pushes": push_outcomes(result, angle),
        "real_time_factor": result.ended_at_s / result.wall_s if result.wall_s > 0 else None,
        "physics_step_s": dt,
        "control_rate_hz": dev.control_rate_hz,
    }
    # a strategy may report figures of its own (e.g. a jump's needed and reached wheel speed);
    # they never replace the runner's keys
    extra = getattr(result.strategy, "extra_metrics", None) or {}
    metrics.update({k: v for k, v in extra.items() if k not in metrics})
    return metrics


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
    """For each push: its size, the largest angle until the next push (or the end), survived or not."""
    pushes = sorted(result.scenario.trial.pushes, key=lambda p: p.at)
    dt = result.trace.step_s
    release = getattr(getattr(result.strategy, "params", None), "release_angle", math.pi)
    out = []
    for i, p in enumerate(pushes):
        k0 = int(round(p.at / dt))
        k1 = int(round(pushes[i + 1].at / dt)) if i + 1 < len(pushes) else len(angle)
        seg = np.abs(angle[k0:k1])
        reached = k0 < len(angle)
        peak = float(seg.max()) if seg.size else None
        survived = bool(reached and peak is not None and peak <= release and result.outcome not in ("diverged", "strategy_failed")
                        and (result.fell_at_s is None or result.fell_at_s < p.at or result.fell_at_s > k1 * dt))
        out.append({"at_s": p.at, "impulse_n_m_s": p.impulse, "peak_angle_rad": peak, "survived": survived})
    return out
