"""Why a trial failed: one cause code and one sentence with the figures behind it.

Every outcome other than `balanced` and `completed` gets a cause, picked by the first of these
plain rules that holds, read from the trace and the result (the thresholds are the constants
below; they are our choice, not a standard):

Outcome `strategy_failed` -> `strategy_failed`; outcome `diverged` -> `diverged` (the detail is
the runner's message).

Outcomes `fell` and `not_caught`, first of all: the power chain's protections (`sim.physics.drive`).
When the drive switched itself off before the fall (or, not caught, at any time in the trial), the
first such event is the cause: `battery_cutoff` (the bus sagged below the pack's cut-off),
`driver_tripped` (the over-current trip fired), `bus_over_voltage` (regeneration raised the bus above
`drive.max_bus_voltage`).

Outcome `fell` (the body left the release angle after it was held), in this order:

1. `push_too_large`: the fall came inside a push's recovery window (PUSH_RECOVER_S after it,
   `sim.run.metrics`) and the wheel was below WHEEL_NEAR_LIMIT of its no-load speed when the push
   came (a wheel already at its limit is the wheel's failure, not the push's).
2. `wheel_at_speed_limit`: in the LOOKBACK_S before the fall the wheel reached WHEEL_NEAR_LIMIT
   of its no-load speed at the supply: back-EMF left too little torque to hold the body.
3. `bias_drift`: over the stretch the body was held (from when it was last inside the release
   angle until LOOKBACK_S before the fall, at least DRIFT_MIN_S long) the wheel speed drifted
   steadily with one sign: a straight-line fit explains at least DRIFT_MIN_R2 of its variance,
   gains at least DRIFT_MIN_SHARE of the no-load speed, and the speed keeps its sign over the
   stretch's second half. A steady torque demand (a sensor bias, an off-centre mass) that the law
   does not cancel.
4. `estimator_misread`: with an estimator making the law's angle (an IMU), its angle was off the
   true angle by ESTIMATOR_MISREAD_RAD RMS or more over the stretch the body was held (up to
   LOOKBACK_S before the fall, or the whole held stretch when that is shorter): the law balanced a
   wrong angle (an IMU far from the pivot reading the body's own acceleration as tilt, a filter
   trusting its accelerometer too much, a misaligned mount).
5. `current_at_limit`: the drive's current limit was reached (CURRENT_AT_LIMIT of it) for a
   sustained stretch ending within LOOKBACK_S of the fall (sustained: SUSTAINED_S, or half the
   time the body was held, when that is shorter, and at least one control tick). Checked before the
   voltage: with the current at its limit the limit, not the supply, caps the torque.
6. `voltage_at_supply`: the voltage was at the supply for a sustained stretch ending within
   LOOKBACK_S of the fall, the wheel not at its limit: the motor could not give
   the torque the law asked for.
7. `gains_too_weak`: none of the limits above was reached and the body still fell.

Outcome `not_caught`:

8. `swing_energy_short`: a swing-up that never brought the body the energy to come upright: the
   peak of E = 1/2 J theta_d^2 + mbar g (cos theta - 1) (0 upright at rest, -2 mbar g hanging)
   stayed below 0.
9. `start_outside_release`: a balance-only law whose trial started beyond its release angle.
10. `catch_missed`: anything else not caught (the energy was there, the catch did not happen).
"""

from __future__ import annotations

import math

import numpy as np

from ..core.angles import wrap_angles
from .metrics import PUSH_RECOVER_S, saturated_ticks, supply_ceiling, totals_end_row

CAUSES = {
    "wheel_at_speed_limit": "the wheel neared its no-load speed before the fall",
    "voltage_at_supply": "the voltage sat at the supply before the fall, the wheel below its limit",
    "current_at_limit": "the current sat at the drive's limit before the fall",
    "swing_energy_short": "a swing-up never gave the body the energy to come upright",
    "push_too_large": "the body fell inside a push's recovery window",
    "bias_drift": "the wheel drifted steadily with one sign before the fall",
    "estimator_misread": "the estimator's angle was off the true angle while the body was held",
    "wheel_wrong_way": "a 3D device: a wheel's torque turned the body further over before the fall",
    "gains_too_weak": "the body fell with none of the limits reached",
    "strategy_failed": "the strategy raised, returned nonsense or ran past its time budget",
    "diverged": "the simulated state became non-finite or absurd",
    "start_outside_release": "a balance-only trial started beyond the release angle",
    "catch_missed": "the body had the energy to come upright but was not caught",
    "battery_cutoff": "the battery sagged below its cut-off and the drive switched off",
    "driver_tripped": "the driver's over-current protection tripped and stopped driving",
    "bus_over_voltage": "regeneration raised the bus above its limit and the drive switched off",
    "contact_slipped": "a body on the floor: its balancing contact slid farther than floor.slip_limit",
}
"""Every cause code, with what it means (the README's table says the same)."""

WHEEL_NEAR_LIMIT = 0.85     # share of the no-load speed at the supply
LOOKBACK_S = 0.5            # how far before the fall the limits are looked at, s
SUSTAINED_S = 0.25          # a limit held this long is sustained, s
CURRENT_AT_LIMIT = 0.98     # share of the current limit
DRIFT_MIN_S = 2.0           # a drift needs a held stretch at least this long, s
DRIFT_MIN_SHARE = 0.2       # ... gaining at least this share of the no-load speed
DRIFT_MIN_R2 = 0.8          # ... and this straight (coefficient of determination of the line)
ESTIMATOR_MISREAD_RAD = math.radians(1.0)   # estimator's RMS angle error that misleads the law, rad


def find_cause(result) -> tuple[str | None, str | None]:
    """(cause code, one sentence with its figures) for a TrialResult; (None, None) when the outcome
    is `balanced` or `completed`."""
    outcome = result.outcome
    if outcome in ("balanced", "completed"):
        return None, None
    if outcome in ("strategy_failed", "diverged"):
        return outcome, result.message or outcome
    if result.trace.n == 0:
        return "catch_missed", "the trial recorded no steps"
    power = _power_event(result)
    if power is not None:
        return power
    if outcome == "fell" and result.fell_at_s is not None:
        return _fell(result)
    return _not_caught(result)


# ----------------------------------------------------------------------------- power

def _power_event(result, who=None) -> tuple[str, str] | None:
    """The first protection event of the power chain before the fall (any time when not caught).
    `who(event) -> str`: words naming the wheel an event concerns, put after its first clause (a 3D
    device's; none on one wheel)."""
    summary = getattr(result, "power", None)
    if not summary or not summary["power_events"]:
        return None
    t_end = result.fell_at_s if result.fell_at_s is not None else math.inf
    events = [e for e in summary["power_events"] if e["at_s"] <= t_end]
    if not events:
        return None
    first, sc = events[0], result.scenario
    t, code = first["at_s"], first["cause"]
    named = who(first) if who is not None else ""
    fell = (f"the body fell at {result.fell_at_s:.2f} s" if result.fell_at_s is not None
            else "the body was not caught")
    if code == "battery_cutoff":
        cut = sc.battery.cells * sc.battery.cutoff_per_cell
        return code, (f"the bus sagged to {summary['min_supply_voltage_v']:.2f} V, below the pack's {cut:.2f} V "
                      f"cut-off, at {t:.3f} s{named} and the drive switched off; {fell}")
    if code == "driver_tripped":
        trip = sc.drive.trip
        return code, (f"the driver{named} tripped at {t:.3f} s (|i| above {trip.current:.3g} A for {trip.time:g} s; "
                      f"{summary['driver_trips']} trip(s) in the trial) and stopped driving; {fell}")
    return code, (f"regeneration raised the bus to {summary['peak_supply_voltage_v']:.2f} V, above its "
                  f"{sc.drive.max_bus_voltage:.3g} V limit, at {t:.3f} s{named} and the drive switched off; {fell}")


# ----------------------------------------------------------------------------- fell

def _fell(result) -> tuple[str, str]:
    tr, dev, sc = result.trace, result.device, result.scenario
    dt, t_fall = tr.step_s, result.fell_at_s
    end = max(totals_end_row(result), 1)
    look = max(1, int(round(LOOKBACK_S / dt)))
    limit = dev.no_load_speed_rad_s
    wheel = np.abs(tr.wheel_speed[:end])
    share = float(np.max(wheel[max(0, end - look):])) / limit
    supply = sc.drive.supply
    ceiling = supply_ceiling(tr, sc)
    if isinstance(ceiling, np.ndarray):     # through the power chain: the bus row by row (0: no bus)
        ceiling = ceiling[:end]
        at_ceiling = (np.abs(tr.voltage[:end]) >= ceiling * (1.0 - 1e-9)) & (ceiling > 0.0)
    else:
        at_ceiling = np.abs(tr.voltage[:end]) >= ceiling * (1.0 - 1e-9)
    volt_s = _run_before(at_ceiling, look) * dt
    held_from = _held_from(result, end)
    # sustained: SUSTAINED_S, or half the time the body was held when that was shorter
    sustained = max(min(SUSTAINED_S, 0.5 * (end - held_from) * dt), sc.control_steps * dt)
    at = f"fell at {t_fall:.2f} s"

    push = _push_before(sc.trial.pushes, t_fall)
    if push is not None:
        w_push = float(wheel[min(int(round(push.at / dt)), end - 1)]) / limit
        if w_push < WHEEL_NEAR_LIMIT:
            return "push_too_large", (
                f"{at}, {t_fall - push.at:.2f} s after a push of {push.impulse * 1e3:.3g} mN m s (inside its "
                f"{PUSH_RECOVER_S:g} s recovery window), with the voltage at the supply for the last {volt_s:.2f} s "
                f"and the wheel at {share:.0%} of its no-load speed: the push was more than the design can take")
    drift = _drift(result, held_from, end - look)
    if share >= WHEEL_NEAR_LIMIT:
        after = f" after a steady drift of {drift[0]:+.3g} rad/s per s over {drift[1]:.1f} s" if drift else ""
        return "wheel_at_speed_limit", (
            f"{at} with the wheel at {share:.0%} of its no-load speed{after} and the voltage at the supply for "
            f"the last {volt_s:.2f} s: the wheel ran out of speed")
    if drift:
        return "bias_drift", (
            f"{at} after the wheel drifted steadily at {drift[0]:+.3g} rad/s per s for {drift[1]:.1f} s, to "
            f"{share:.0%} of its no-load speed: a steady torque demand (such as an angle-sensor bias or an "
            f"off-centre mass) that the law does not cancel")
    misread = _estimator_error(result, held_from, end, look)
    if misread is not None and misread[0] >= ESTIMATOR_MISREAD_RAD:
        rms, peak = misread
        return "estimator_misread", (
            f"{at} after the estimator's angle was off the true angle by {math.degrees(rms):.2f} deg RMS "
            f"({math.degrees(peak):.2f} deg at most) while the body was held: the law balanced a wrong angle "
            f"(the IMU's place, its mounting or the filter's trust in the accelerometer)")
    i_lim = dev.current_limit_a
    if math.isfinite(i_lim):
        cur_s = _run_before(np.abs(tr.current[:end]) >= CURRENT_AT_LIMIT * i_lim, look) * dt
        if cur_s >= sustained:
            return "current_at_limit", (
                f"{at} with the current at its {i_lim:.3g} A limit for the last {cur_s:.2f} s and the wheel at "
                f"{share:.0%} of its no-load speed: the drive's current limit cut the torque short")
    if volt_s >= sustained:
        return "voltage_at_supply", (
            f"{at} with the voltage at the supply ({supply:.3g} V) for the last {volt_s:.2f} s and the wheel at "
            f"{share:.0%} of its no-load speed: the motor could not give the torque the law asked for")
    return "gains_too_weak", (
        f"{at} with the wheel at most at {share:.0%} of its no-load speed and the voltage at the supply for "
        f"only {volt_s:.2f} s before it: the law let the body go with power to spare (gains too weak or too slow)")


def _push_before(pushes, t_fall: float):
    """The push whose recovery window holds `t_fall` (cut short by the next push), or None."""
    ordered = sorted(pushes, key=lambda p: p.at)
    for i, p in enumerate(ordered):
        t_end = min(p.at + PUSH_RECOVER_S, ordered[i + 1].at if i + 1 < len(ordered) else math.inf)
        if p.at <= t_fall < t_end:
            return p
    return None


def _run_before(flags: np.ndarray, look: int) -> int:
    """Rows in the last run of True in `flags` that ends within the final `look` rows (0: none)."""
    first = max(0, len(flags) - look)
    recent = np.flatnonzero(flags[first:])
    if recent.size == 0:
        return 0
    last = first + int(recent[-1])
    gaps = np.flatnonzero(~flags[: last + 1])
    return last - (int(gaps[-1]) if gaps.size else -1)


def _held_from(result, end: int) -> int:
    """The first row of the last stretch before row `end` with the body inside the release angle
    (the runner sees the fall at a control tick, so the last rows before it may be outside)."""
    release = getattr(getattr(result.strategy, "params", None), "release_angle", math.pi)
    start = held_start(np.abs(wrap_angles(result.trace.angle[:end].copy())) > release)
    return end if start is None else start


def held_start(outside: np.ndarray) -> int | None:
    """The first row of the last stretch of rows not `outside` (the body inside the release angle),
    None when there is none."""
    inside = np.flatnonzero(~outside)
    if inside.size == 0:
        return None
    before = np.flatnonzero(outside[: inside[-1]])
    return int(before[-1]) + 1 if before.size else 0


def _estimator_error(result, held_from: int, end: int, look: int) -> tuple[float, float] | None:
    """(RMS, peak) of the estimator's angle error, rad, over the held stretch before the last `look`
    rows (the whole held stretch when that leaves none); None without an estimator."""
    est = result.trace.extra.get("estimated_angle_rad")
    if est is None:
        return None
    stop = end - look if end - look > held_from else end
    if stop <= held_from:
        return None
    err = wrap_angles(est[held_from:stop] - result.trace.angle[held_from:stop])
    return float(np.sqrt(np.mean(err**2))), float(np.max(np.abs(err)))


def _drift(result, start: int, stop: int) -> tuple[float, float] | None:
    """(slope rad/s per s, length s) of a steady one-signed wheel drift over rows start..stop-1, or None."""
    tr, dev = result.trace, result.device
    dt = tr.step_s
    if (stop - start) * dt < DRIFT_MIN_S:
        return None
    w = tr.wheel_speed[start:stop]
    t = np.arange(w.size) * dt
    slope, icpt = np.polyfit(t, w, 1)
    fit_res = float(np.sum((w - (slope * t + icpt)) ** 2))
    spread = float(np.sum((w - w.mean()) ** 2))
    r2 = 1.0 - fit_res / spread if spread > 0 else 0.0
    gained = abs(slope) * t[-1]
    one_sign = bool(np.all(np.sign(w[w.size // 2:]) == np.sign(slope)))
    if r2 >= DRIFT_MIN_R2 and gained >= DRIFT_MIN_SHARE * dev.no_load_speed_rad_s and one_sign:
        return float(slope), float(t[-1])
    return None


# ----------------------------------------------------------------------------- not caught

def _not_caught(result) -> tuple[str, str]:
    tr, dev, sc = result.trace, result.device, result.scenario
    n = tr.n
    energy = 0.5 * dev.J_kg_m2 * tr.rate[:n] ** 2 + dev.gravity_torque_coeff_n_m * (np.cos(tr.angle[:n]) - 1.0)
    e_peak, well = float(np.max(energy)), 2.0 * dev.gravity_torque_coeff_n_m
    w_share = float(np.max(np.abs(tr.wheel_speed[:n]))) / dev.no_load_speed_rad_s
    ticks = -(-n // sc.control_steps)
    sat = saturated_ticks(tr, sc.control_steps, supply_ceiling(tr, sc)) / ticks
    limits = (f"the wheel peaked at {w_share:.0%} of its no-load speed and the voltage was at the supply "
              f"on {sat:.0%} of the ticks")
    strategy = result.strategy
    if getattr(strategy, "swings_up", False) and e_peak < 0.0:
        reached = 1.0 + e_peak / well if well > 0 else 0.0
        return "swing_energy_short", (
            f"the body's swing energy peaked at {e_peak:.3g} J, {reached:.0%} of the way from hanging "
            f"({-well:.3g} J) to upright (0 J); {limits}: the swing never had the energy to come up")
    release = getattr(getattr(strategy, "params", None), "release_angle", math.pi)
    start = abs(math.remainder(sc.trial.start.angle, 2 * math.pi))
    if not getattr(strategy, "swings_up", False) and start > release:
        return "start_outside_release", (
            f"the trial started {math.degrees(start):.1f} deg from upright, beyond the release angle of "
            f"{math.degrees(release):.1f} deg: a balance-only law does not take a body it is not given upright")
    return "catch_missed", (
        f"the body's swing energy peaked at {e_peak:.3g} J (upright needs 0 J) but it was not caught "
        f"within the {result.ended_at_s:.2f} s trial; {limits}")
