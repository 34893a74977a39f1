"""Why a 3D trial failed: one cause code (from `sim.run.causes.CAUSES`) and one sentence with figures.

The planar rules, cut to what a 3D trace shows plainly, in this order (thresholds from
`sim.run.causes`): `strategy_failed` and `diverged` carry the runner's message; a fall is
`push_too_large` when it came inside a push's recovery window with every wheel below
WHEEL_NEAR_LIMIT of its no-load speed at the push, `wheel_at_speed_limit` when a wheel (named) reached
WHEEL_NEAR_LIMIT in the LOOKBACK_S before the fall, `estimator_misread` when an estimator (an IMU) made
the law's tilts and their error was ESTIMATOR_MISREAD_RAD RMS or more (x and y together) over the
stretch the body was held (up to LOOKBACK_S before the fall, or the whole held stretch when that is
shorter), `wheel_wrong_way` when a wheel (named, each one that did) turned the body further over
through the LOOKBACK_S before the fall (`wrong_way_wheels`), `current_at_limit` / `voltage_at_supply` when a
wheel's current or voltage sat at its limit for SUSTAINED_S of that stretch, else `gains_too_weak`;
not caught is `start_outside_release` when the start tilt was beyond the release angle, else
`catch_missed`.

Through the power chain, first of all (as on one wheel): the first protection event before the fall,
`driver_tripped` naming the wheel whose driver tripped, `battery_cutoff` and `bus_over_voltage` (the
shared bus's, which switch every bridge off) naming the wheel that drew the most from the bus, or
pushed the most back into it, on the step before.
"""

from __future__ import annotations

import math

import numpy as np

from .causes import (CURRENT_AT_LIMIT, ESTIMATOR_MISREAD_RAD, LOOKBACK_S, SUSTAINED_S, WHEEL_NEAR_LIMIT, _power_event,
                     held_start)
from .metrics import PUSH_RECOVER_S, supply_ceiling
from .metrics3d import tilt_errors


def find_cause3d(result) -> tuple[str | None, str | None]:
    """(cause code, sentence) for a `TrialResult3D`; (None, None) when balanced or completed."""
    if result.outcome in ("balanced", "completed"):
        return None, None
    if result.outcome in ("strategy_failed", "diverged"):
        return result.outcome, result.message or result.outcome
    tr = result.trace
    if tr.n == 0:
        return "catch_missed", "the trial recorded no steps"
    power = _power_event(result, who=lambda event: _wheel_words(result, event))
    if power is not None:
        return power
    release = getattr(getattr(result.strategy, "params", None), "release_angle", math.pi)
    if result.outcome != "fell" or result.fell_at_s is None:
        tilt0 = float(tr.tilt[0])
        if tilt0 > release:
            return "start_outside_release", (f"the trial started at a tilt of {math.degrees(tilt0):.1f} deg, beyond "
                                             f"the release angle of {math.degrees(release):.1f} deg")
        return "catch_missed", "the body was never inside the release angle while the law balanced"
    return _fell(result)


def _fell(result) -> tuple[str, str]:
    tr, dev, dt, t_fall = result.trace, result.device, result.trace.step_s, result.fell_at_s
    end = max(min(int(round(t_fall / dt)), tr.n), 1)
    start = max(0, end - max(1, int(round(LOOKBACK_S / dt))))
    shares = [float(np.max(np.abs(tr.wheel(i + 1, "speed")[start:end]))) / w.no_load_speed_rad_s
              for i, w in enumerate(dev.wheels)]
    pushes = [p for p in result.scenario.trial.pushes if p.at <= t_fall < p.at + PUSH_RECOVER_S]
    if pushes:
        k_push = min(int(round(pushes[-1].at / dt)), tr.n - 1)
        at_push = [abs(float(tr.wheel(i + 1, "speed")[k_push])) / w.no_load_speed_rad_s for i, w in enumerate(dev.wheels)]
        if max(at_push) < WHEEL_NEAR_LIMIT:
            return "push_too_large", (f"the body fell at {t_fall:.3f} s, {t_fall - pushes[-1].at:.3f} s after a push "
                                      f"of {_size(pushes[-1].impulse):.4g} N m s, every wheel below "
                                      f"{WHEEL_NEAR_LIMIT:.0%} of its no-load speed at the push")
    worst = int(np.argmax(shares))
    if shares[worst] >= WHEEL_NEAR_LIMIT:
        return "wheel_at_speed_limit", (f"wheel {worst + 1} reached {shares[worst]:.0%} of its no-load speed "
                                        f"({dev.wheels[worst].no_load_speed_rad_s:.1f} rad/s) in the "
                                        f"{LOOKBACK_S:g} s before the fall at {t_fall:.3f} s")
    misread = _misread(result, start, end)
    if misread is not None and misread[0] >= ESTIMATOR_MISREAD_RAD:
        return "estimator_misread", (
            f"the body fell at {t_fall:.3f} s after the estimator's tilt was off the true tilt by "
            f"{math.degrees(misread[0]):.2f} deg RMS ({math.degrees(misread[1]):.2f} deg at most) while it was held: "
            "the law balanced a wrong tilt (the IMU's place, its mounting or the filter's trust in the accelerometer)")
    wrong = wrong_way_wheels(result, start, end) if dev.floor is None else []
    if wrong:
        words = ", ".join(f"wheel {i + 1} ({share:.0%} of its torque along gravity's pushed over, "
                          f"{impulse * 1e3:.3g} mN m s)" for i, share, impulse in wrong)
        return "wheel_wrong_way", (f"the body fell at {t_fall:.3f} s after {words} in the {LOOKBACK_S:g} s before: "
                                   "each named wheel's torque turned the body further from upright (a command of the "
                                   "wrong sign, a motor wired the wrong way round, or two wheels' outputs swapped)")
    sustained = max(1, int(round(SUSTAINED_S / dt)))
    for i, w in enumerate(dev.wheels):
        if math.isfinite(w.current_limit_a):
            at_limit = np.abs(tr.wheel(i + 1, "current")[start:end]) >= CURRENT_AT_LIMIT * w.current_limit_a
            if int(np.count_nonzero(at_limit)) >= sustained:
                return "current_at_limit", (f"wheel {i + 1}'s current sat at its {w.current_limit_a:g} A limit for "
                                            f"{np.count_nonzero(at_limit) * dt:.3f} s before the fall at {t_fall:.3f} s")
    # current mode: the bridge's applied voltage against the bus it had (its current loop ran out of it)
    bus = supply_ceiling(tr, result.scenario)[start:end] if result.scenario.drive.mode == "current" else None
    for i, w in enumerate(dev.wheels):
        ref = w.supply_v if bus is None else bus
        at_supply = np.abs(tr.wheel(i + 1, "voltage")[start:end]) >= ref * (1.0 - 1e-9)
        if int(np.count_nonzero(at_supply)) >= sustained:
            where = f"the {w.supply_v:g} V supply" if bus is None else "the bus (its current loop out of voltage)"
            return "voltage_at_supply", (f"wheel {i + 1}'s voltage sat at {where} for "
                                         f"{np.count_nonzero(at_supply) * dt:.3f} s before the fall at {t_fall:.3f} s")
    return "gains_too_weak", (f"the body fell at {t_fall:.3f} s with no wheel, current or voltage at its limit "
                              f"(fastest wheel {worst + 1} at {shares[worst]:.0%} of its no-load speed)")


WRONG_WAY_SHARE = 0.9     # share of a wheel's reaction impulse along gravity's torque that pushed over
WRONG_WAY_WEIGHT = 0.25   # that wheel's share of all the wheels' impulse along gravity's torque


def wrong_way_wheels(result, start: int, end: int) -> list[tuple[int, float, float]]:
    """The wheels whose reaction torque on the body turned it further over through rows start..end-1:
    (index, share, impulse N m s) for each wheel whose impulse along the gravity torque's direction was
    that way for WRONG_WAY_SHARE of its magnitude and carried WRONG_WAY_WEIGHT of all the wheels' (a
    balance law's wheels, even when beaten, push against gravity; our thresholds, no source).

    Body frame: wheel i puts -tau_i a_i on the body (a_i its axis, tau_i its motor torque); gravity puts
    r x (-m g up) about the pivot, up = R_wb^T e_z = U^T (-sin b, cos b sin a, cos b cos a) for tilts a
    about x and b about y (`sim.core.frames`); on a hinge only the components about x count."""
    tr, dev = result.trace, result.device
    if end - start < 2:
        return []
    ball = dev.mount == "ball"
    a = np.asarray(tr.tilt_x[start:end])
    b = np.asarray(tr.tilt_y[start:end]) if ball else np.zeros_like(a)
    up = np.stack([-np.sin(b), np.cos(b) * np.sin(a), np.cos(b) * np.cos(a)], axis=1) @ np.array(dev.upright())
    g = np.cross(np.array(dev.com_m), -up)
    if not ball:
        g[:, 1:] = 0.0
    size = np.linalg.norm(g, axis=1)
    rows = size > 1e-12
    if not np.any(rows):
        return []
    g = g[rows] / size[rows, None]
    dt = tr.step_s
    along = [-np.asarray(tr.wheel(i + 1, "torque")[start:end])[rows] * (g @ np.array(w.axis)) * dt
             for i, w in enumerate(dev.wheels)]
    total = sum(float(np.sum(np.abs(x))) for x in along)
    out = []
    for i, x in enumerate(along):
        size_i = float(np.sum(np.abs(x)))
        over = float(np.sum(x))
        if total > 0.0 and size_i >= WRONG_WAY_WEIGHT * total and over >= WRONG_WAY_SHARE * size_i:
            out.append((i, over / size_i, over))
    return out


def _misread(result, look_from: int, end: int) -> tuple[float, float] | None:
    """(RMS, peak) of the estimator's tilt error's size, rad, over the held stretch before row
    `look_from` (the whole held stretch when that leaves none); None without an estimator."""
    tr = result.trace
    release = getattr(getattr(result.strategy, "params", None), "release_angle", math.pi)
    held_from = held_start(~(tr.tilt[:end] <= release))
    if held_from is None:
        return None
    stop = look_from if look_from > held_from else end
    err = tilt_errors(tr, held_from, stop)
    if err is None or err.shape[0] == 0:
        return None
    size = np.sqrt(np.sum(err ** 2, axis=1))
    return float(np.sqrt(np.mean(size ** 2))), float(np.max(size))


def _size(impulse) -> float:
    return math.sqrt(sum(x * x for x in impulse)) if isinstance(impulse, tuple) else abs(impulse)


def _wheel_words(result, event: dict) -> str:
    """' (wheel N)' for a trip; for a bus event, the wheel whose bus current (its applied voltage times
    its current over the bus) was the largest drawn (cut-off) or pushed back (over-voltage) on the
    step before it."""
    if event.get("wheel") is not None:
        return f" (wheel {event['wheel']})"
    tr = result.trace
    k = min(max(int(round(event["at_s"] / tr.step_s)) - 1, 0), tr.n - 1)
    bus = float(tr.bus_volts[k])
    if bus <= 0.0:
        return ""
    amps = [float(tr.wheel(i, "voltage")[k] * tr.wheel(i, "current")[k]) / bus for i in range(1, tr.n_wheels + 1)]
    if event["cause"] == "battery_cutoff":
        j = int(np.argmax(amps))
        return f" (wheel {j + 1} drew the most from the bus then, {amps[j]:.2f} A of {float(tr.bus_amps[k]):.2f} A)"
    j = int(np.argmin(amps))
    return f" (wheel {j + 1} pushed the most back into the bus then, {-amps[j]:.2f} A)"
