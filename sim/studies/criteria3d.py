"""What `check` (sim.studies.verdicts3d) and the 3D judge of sweep and tune (sim.studies.battery3d)
both judge a 3D device by, in one place so the two give the same figures:

- the bias holds (`runaway_holds3d`: `requirements.hold_time` upright at rest with the angle sensor's
  bias at each end of its band, one tilt axis at a time; each wheel's drift fitted and extrapolated
  to its own no-load speed, the linear model's prediction beside it, `sim.studies.runaway3d`) and
  their criterion `wheel_runaway_time_s` (`runaway_criterion3d`);
- `voltage_headroom`, `current_headroom` over a hold's trace, the worst wheel (`headroom_criteria`);
- each wheel's burst check at its own runaway speed (`wheel_bursts`) and the criterion
  `wheel_burst_safety_factor` on the weakest (`burst_criterion`).
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np

from ..run.trial3d import run_trial3d
from .runaway import fit_drift, runaway_time_s, settling
from .runaway3d import predict_bias_response3d
from .stress import optimistic_summary, wheel_burst_check
from .verdicts import (RUNAWAY_HORIZON_FACTOR, _angle_bias, RUNAWAY_NEAR_LIMIT, _at_least, _criterion, _headroom, bias_ends,
                       runaway_note, with_trial, worst_hold)


def tilt_axes(device) -> tuple[str, ...]:
    """The tilt axes the law reads an angle about: x (and y on a ball)."""
    return ("x", "y") if device.mount == "ball" else ("x",)


def at_rest(sc, *, tilt_rad: float = 0.0) -> dict:
    """A start at rest, `tilt_rad` from upright (on a ball split evenly about x and y)."""
    if sc.design_mount == "ball":   # a floor device on a corner designs (and starts) as a ball
        each = tilt_rad / math.sqrt(2.0)
        return {"tilt": [each, each], "angle": 0.0, "rate": 0.0, "wheel_speed": 0.0}
    return {"angle": tilt_rad, "rate": 0.0, "wheel_speed": 0.0}


def runaway_hold3d(sc, device, *, axis: int, bias_rad: float, seed: int) -> dict:
    """Hold upright at rest for `requirements.hold_time` with the angle bias set about one tilt axis.

    The other axis keeps the scenario's own bias. Each wheel's speed is fitted (`fit_drift`) and
    extrapolated to its own no-load speed; the hold reports the wheel that gets there first (or, with
    none drifting, the one with the largest drift against its limit). Keys as
    `sim.studies.verdicts.runaway_hold`'s (`prediction`: that wheel's, from the linear model), plus
    `axis` ("x"/"y"), `wheel` (1-based), `limit_rad_s`, `wheels` (every wheel's entry) and
    `prediction3d` (`sim.studies.runaway3d.BiasPrediction3D` or None: every wheel's prediction).
    """
    req = sc.requirements
    hold = with_trial(sc, duration=req.hold_time, start=at_rest(sc), pushes=[])
    if sc.sensors.estimator is None:
        biases = [sc.sensors.angle.bias] * len(tilt_axes(device))
        biases[axis] = bias_rad
    else:   # the IMU keeps its own misalignment; the band's offset from it is added to the estimated tilt
        biases = [0.0] * len(tilt_axes(device))
        biases[axis] = bias_rad - _angle_bias(sc)
    result = run_trial3d(hold, seed=seed, stop_early=True, angle_bias_rad=tuple(biases))
    tr = result.trace
    t = np.arange(tr.n) * tr.step_s
    per_wheel = []
    for i, w in enumerate(device.wheels):
        speed = tr.wheel(i + 1, "speed")[: tr.n].copy()
        entry = {"wheel": i + 1, "limit_rad_s": w.no_load_speed_rad_s, "drift": None, "runaway_time_s": None,
                 "settling": False, "peak_wheel_speed_rad_s": float(np.max(np.abs(speed))) if speed.size else 0.0}
        if result.outcome == "balanced" and speed.size >= 60:
            drift = fit_drift(t, speed)
            k = 2 * speed.size // 3
            entry["drift"], entry["settling"] = drift, settling(fit_drift(t[:k], speed[:k], fraction=0.5), drift)
            entry["runaway_time_s"] = None if entry["settling"] else runaway_time_s(
                drift, limit_rad_s=w.no_load_speed_rad_s, horizon_s=RUNAWAY_HORIZON_FACTOR * req.run_time)
        elif speed.size >= 90:
            k = 2 * speed.size // 3
            entry["drift"] = fit_drift(t[:k], speed[:k], fraction=0.5)
        per_wheel.append(entry)
    timed = [e for e in per_wheel if e["runaway_time_s"] is not None]
    if timed:
        worst = min(timed, key=lambda e: e["runaway_time_s"])
    elif result.outcome != "balanced":
        worst = max(per_wheel, key=lambda e: e["peak_wheel_speed_rad_s"] / e["limit_rad_s"])
    else:
        worst = max(per_wheel, key=lambda e: 0.0 if e["drift"] is None else abs(e["drift"].slope_rad_s2) / e["limit_rad_s"])
    predicted = predict_bias_response3d(sc, device, angle_bias_rad=biases, hold_s=req.hold_time,
                                        horizon_s=RUNAWAY_HORIZON_FACTOR * req.run_time)
    return {"axis": tilt_axes(device)[axis], "bias_rad": bias_rad, "outcome": result.outcome,
            "fell_at_s": result.fell_at_s, "wheels": per_wheel, "prediction3d": predicted,
            "prediction": None if predicted is None else predicted.for_wheel(worst["wheel"]), **worst}


def runaway_holds3d(sc, device, *, seed: int) -> list[dict]:
    """The bias holds: each tilt axis at each end of the angle bias's band (`bias_ends`)."""
    return [runaway_hold3d(sc, device, axis=j, bias_rad=b, seed=seed)
            for j in range(len(tilt_axes(device))) for b in bias_ends(sc)]


def runaway_criterion3d(sc, holds: list[dict]) -> dict:
    """`wheel_runaway_time_s`: the shortest time to a wheel's speed limit over the per-axis holds.

    A fall during a hold gives 0; no drift in any hold gives None (passes). The note names the worst
    hold's axis, bias and wheel; a failure with a wheel near its limit carries cause `bias_drift`.
    """
    req = sc.requirements
    worst, value, passed, fallen = worst_hold(holds, run_time_s=req.run_time)
    drifted = not passed and (not fallen or worst["peak_wheel_speed_rad_s"] >= RUNAWAY_NEAR_LIMIT * worst["limit_rad_s"])
    biases = sorted({round(math.degrees(h["bias_rad"]), 4) for h in holds})
    axes = sorted({h["axis"] for h in holds})
    note = (f"{req.hold_time:g} s holds at angle bias {', '.join(f'{b:+.2f}' for b in biases)} deg about "
            f"{' and '.join(axes)} in turn; worst: about {worst['axis']}, wheel {worst['wheel']}: "
            + runaway_note(worst, worst["limit_rad_s"], unpredicted="no linear prediction for this law (the built-in "
                           "lqr has one)"))
    return _criterion("wheel_runaway_time_s", value, req.run_time, passed, note + ("; cause bias_drift" if drifted else ""))


def hold_wheels(hold: dict) -> list[dict]:
    """Every wheel of one bias hold, simulated beside predicted (SI, units in the keys): the fitted drift
    and mean speed over the hold's last third, and the linear loop's steady speed, drift over the same
    window and time at its no-load speed (`sim.studies.runaway3d`; None where there is none)."""
    predicted = hold.get("prediction3d")
    out = []
    for i, e in enumerate(hold.get("wheels") or []):
        d = e["drift"]
        p = predicted.wheels[i] if predicted is not None else None
        out.append({"wheel": e["wheel"], "limit_rad_s": e["limit_rad_s"],
                    "drift_rad_s2": None if d is None else d.slope_rad_s2,
                    "drift_se_rad_s2": None if d is None else d.slope_se_rad_s2,
                    "mean_wheel_speed_rad_s": None if d is None else d.mean_rad_s,
                    "runaway_time_s": e["runaway_time_s"],
                    "predicted_steady_speed_rad_s": None if p is None else p.steady_speed_rad_s,
                    "predicted_drift_rad_s2": None if p is None else p.drift_rad_s2,
                    "predicted_limit_time_s": None if p is None else p.limit_time_s})
    return out


def headroom_criteria(sc, device, trace) -> list[dict]:
    """`voltage_headroom` and `current_headroom` over a hold's trace (`sim.run.trace3d.Trace3D`):
    1 - p99(|V|)/supply and 1 - p99(|i|)/current limit (or stall current), the worst wheel judged."""
    req = sc.requirements
    volt, amp = [], []
    for i, w in enumerate(device.wheels):
        limited = math.isfinite(w.current_limit_a)
        volt.append(_headroom(trace.wheel(i + 1, "voltage").copy(), w.supply_v))
        amp.append(_headroom(trace.wheel(i + 1, "current").copy(), w.current_limit_a if limited else w.supply_v / w.resistance_ohm))
    return [
        _at_least("voltage_headroom", _worst_of(volt), req.voltage_headroom,
                  f"holding: 1 - p99(|V|)/supply, worst wheel {_worst_index(volt)}"),
        _at_least("current_headroom", _worst_of(amp), req.current_headroom,
                  f"holding: 1 - p99(|i|)/current limit (or stall current), worst wheel {_worst_index(amp)}"),
    ]


def wheel_bursts(sc, device) -> list[dict]:
    """Each wheel's burst check (`sim.studies.stress.wheel_burst_check`) at its own runaway speed, its
    no-load speed at full supply; wheel by wheel in the scenario's order."""
    return [wheel_burst_check(SimpleNamespace(wheel=sc.wheel_list[i]),
                              SimpleNamespace(no_load_speed_rad_s=w.no_load_speed_rad_s))
            for i, w in enumerate(device.wheels)]


def burst_criterion(sc, bursts: list[dict]) -> dict:
    """`wheel_burst_safety_factor`: the weakest wheel's (`wheel_bursts`); a part of unknown strength
    fails it (cannot confirm). The note names the weakest part by its scenario key."""
    req = sc.requirements
    numbered = list(enumerate(bursts, start=1))
    known = [(i, b) for i, b in numbered if b["safety_factor"] is not None]
    weak_i, weak = min(known, key=lambda ib: ib[1]["safety_factor"]) if known else (None, None)
    # the stress check names a part as `wheel.parts[k]`; with a `wheels:` list the key is wheels[i].parts[k]
    listed = sc.wheels is not None

    def key(i: int, text: str) -> str:
        return text.replace("wheel.parts[", f"wheels[{i - 1}].parts[") if listed else text
    unknown = [f"wheel {i}: {key(i, ', '.join(b['unknown_parts']))}" for i, b in numbered if b["unknown_parts"]]
    note = "each wheel's parts at its own runaway speed (no-load speed at full supply)"
    if weak is not None:
        part = min((p for p in weak["parts"] if p["safety_factor"] is not None), key=lambda p: p["safety_factor"])
        note = f"weakest: wheel {weak_i}, {key(weak_i, part['part'])} at {weak['runaway_speed_rad_s']:.0f} rad/s; " + note
    if unknown:
        note = f"strength unknown for {'; '.join(unknown)}: cannot confirm; " + note
    notes = [f"wheel {i}: {key(i, optimistic_summary(b))}" for i, b in numbered if optimistic_summary(b)]
    if notes:
        note += "; " + "; ".join(notes)
    factor = weak["safety_factor"] if weak is not None else None
    return _criterion("wheel_burst_safety_factor", factor, req.burst_safety_factor,
                      factor is not None and not unknown and factor >= req.burst_safety_factor, note)


def _worst_of(values):
    return None if any(v is None for v in values) else min(values)


def _worst_index(values) -> str:
    known = [(v, i) for i, v in enumerate(values) if v is not None]
    return str(min(known)[1] + 1) if known else "-"
