"""What `check` adds for sensing as built, where it applies (nothing for a scenario without the keys).

- With an estimator: its steady error in the battery's upright hold (the mean of estimate minus
  true angle over the hold's last third: an accelerometer offset or a gyro bias through the filter
  is an angle bias, which is what drives the wheel's slow runaway; the runaway holds of
  `wheel_runaway_time_s` vary the IMU's misalignment about the pivot axis for that reason), and
  the tilt error during a push test: the estimator's peak error in a trial with the largest push
  the design survived (worse direction), recovery window included. Both are reported (verdict.json
  `sensing`, report.md); the runaway criterion judges their effect.
- With an encoder `max_speed`: criterion `encoder_over_speed_s`, the longest time any of the
  battery's runs spent with a channel past its tracking limit (limit 0: the sensor must never
  lose track while the device holds itself).

On a 3D device (`sensing_checks3d`) the same figures from the 3D battery: the steady error per tilt
axis (x, and y on a ball) and its size, the hold's RMS error size, and the peak error size after the
largest push survived about the worst direction; the over-speed criterion reads every wheel (and
the tilt rates for the attitude channel).
"""

from __future__ import annotations

import math

import numpy as np

from ..core.angles import wrap_angles
from ..run.metrics import PUSH_RECOVER_S, totals_end_row
from ..run.metrics3d import tilt_errors
from ..run.trial import run_trial


def estimator_errors(result) -> np.ndarray | None:
    """Estimate minus true angle, wrapped, rad, up to the totals' end (None without an estimator)."""
    est = result.trace.extra.get("estimated_angle_rad")
    if est is None:
        return None
    end = totals_end_row(result)
    return wrap_angles(est[:end] - result.trace.angle[:end])


def sensing_checks(sc, runs: dict, pushes: dict, *, push_scenario) -> tuple[list[dict], dict]:
    """(criteria, summary) for `check` (see the module docstring). `runs`: name -> TrialResult;
    `pushes`: direction -> `max_push` result; `push_scenario(impulse)`: the push test's scenario."""
    criteria, summary = [], {}
    if sc.sensors.estimator is not None:
        err = estimator_errors(runs["hold"])
        tail = err[2 * err.size // 3:] if err is not None and err.size >= 3 else np.zeros(0)
        summary["estimator"] = sc.sensors.estimator.kind
        summary["estimator_steady_error_rad"] = float(np.mean(tail)) if tail.size else None
        summary["estimator_hold_rms_error_rad"] = float(np.sqrt(np.mean(err**2))) if err is not None and err.size else None
        worse = min(pushes, key=lambda d: pushes[d]["max_survived_n_m_s"])
        impulse = pushes[worse]["max_survived_n_m_s"] * (1.0 if worse == "positive" else -1.0)
        summary["push_tilt_error_rad"] = None
        summary["push_tilt_error_impulse_n_m_s"] = impulse
        if impulse:
            res = run_trial(push_scenario(impulse))
            err = estimator_errors(res)
            push = res.scenario.trial.pushes[0]
            k0 = int(round(push.at / res.trace.step_s))
            k1 = int(round((push.at + PUSH_RECOVER_S) / res.trace.step_s))
            seg = err[k0:k1] if err is not None else np.zeros(0)
            summary["push_tilt_error_rad"] = float(np.max(np.abs(seg))) if seg.size else None
    over = _over_speed(sc, runs)
    if over is not None:
        seconds, note = over
        criteria.append({"name": "encoder_over_speed_s", "value": seconds, "limit": 0.0, "passed": seconds == 0.0,
                         "note": note})
    return criteria, summary


def sensing_checks3d(sc, runs: dict, pushes: dict, *, push_scenario) -> tuple[list[dict], dict]:
    """(criteria, summary) for a 3D `check` (see the module docstring). `runs`: name -> TrialResult3D;
    `pushes`: direction label -> `max_push3d` result; `push_scenario(label, impulse)`: the push test's
    scenario about that direction."""
    from ..run.trial3d import run_trial3d
    criteria, summary = [], {}
    if sc.sensors.estimator is not None:
        hold = runs["hold"]
        err = tilt_errors(hold.trace, 0, totals_end_row(hold))
        tail = err[2 * err.shape[0] // 3:] if err is not None and err.shape[0] >= 3 else np.zeros((0, 1))
        steady = tail.mean(axis=0) if tail.size else None
        summary["estimator"] = sc.sensors.estimator.kind
        summary["estimator_steady_error_by_axis_rad"] = None if steady is None else dict(zip("xy", map(float, steady)))
        # one axis: the signed error; two: the size of the mean error (its direction is in by_axis)
        summary["estimator_steady_error_rad"] = (None if steady is None else float(steady[0]) if steady.size == 1
                                                 else float(np.hypot(*steady)))
        summary["estimator_hold_rms_error_rad"] = (float(np.sqrt(np.mean(np.sum(err ** 2, axis=1))))
                                                   if err is not None and err.size else None)
        worse = min(pushes, key=lambda d: pushes[d]["max_survived_n_m_s"])
        impulse = pushes[worse]["max_survived_n_m_s"]
        summary["push_tilt_error_rad"] = None
        summary["push_tilt_error_impulse_n_m_s"] = impulse
        summary["push_tilt_error_direction"] = worse
        if impulse:
            res = run_trial3d(push_scenario(worse, impulse))
            push = res.scenario.trial.pushes[0]
            k0 = int(round(push.at / res.trace.step_s))
            k1 = min(int(round((push.at + PUSH_RECOVER_S) / res.trace.step_s)), totals_end_row(res))
            seg = tilt_errors(res.trace, k0, k1) if k1 > k0 else None
            summary["push_tilt_error_rad"] = float(np.max(np.sqrt(np.sum(seg ** 2, axis=1)))) if seg is not None and seg.size else None
    wheels = [f"w{i}_speed" for i in range(1, len(sc.wheel_list) + 1)]
    rates = ["rate_x", "rate_y"] if sc.design_mount == "ball" else ["rate_x"]
    over = _over_speed(sc, runs, columns={"angle": rates, "wheel": wheels})
    if over is not None:
        seconds, note = over
        criteria.append({"name": "encoder_over_speed_s", "value": seconds, "limit": 0.0, "passed": seconds == 0.0,
                         "note": note})
    return criteria, summary


def _over_speed(sc, runs: dict, *, columns: dict | None = None) -> tuple[float, str] | None:
    """(longest time past a tracking limit over the runs, s; a note), or None when no encoder has one.
    `columns`: channel -> the trace columns it reads (default: one wheel's `rate` and `wheel_speed`)."""
    named = columns is not None     # several columns per channel: the note names the column
    columns = columns or {"angle": ["rate"], "wheel": ["wheel_speed"]}
    channels = [(f"{name} ({column})" if named else name, getattr(getattr(sc.sensors, name), "max_speed", None), column)
                for name in ("angle", "wheel") if getattr(sc.sensors, name) is not None for column in columns[name]]
    channels = [c for c in channels if c[1] is not None]
    if not channels:
        return None
    worst, note = 0.0, "no run took an encoder past its max_speed"
    for run_name, res in runs.items():
        end = totals_end_row(res)
        for name, limit, column in channels:
            seconds = float(np.count_nonzero(np.abs(getattr(res.trace, column)[:end]) > limit)) * res.trace.step_s
            if seconds > worst:
                peak = float(np.max(np.abs(getattr(res.trace, column)[:end])))
                worst = seconds
                note = (f"{run_name} run: the {name} encoder past its {limit:.4g} rad/s for {seconds:.3g} s "
                        f"(peak {peak:.4g} rad/s); it reads its last tracked position meanwhile")
    return worst, note


def sensing_markdown(summary: dict) -> list[str]:
    """report.md's lines about the estimator (none when there is none)."""
    if not summary:
        return []
    deg = 180.0 / math.pi

    def show(v, sign="+"):
        return "unknown" if v is None else f"{v * deg:{sign}.3f} deg"

    push = summary["push_tilt_error_rad"]
    return ["## Sensing", "",
            f"Estimator `{summary['estimator']}`: steady error in the upright hold {show(summary['estimator_steady_error_rad'])} "
            f"(RMS {show(summary['estimator_hold_rms_error_rad'], '')}); a steady error acts as an angle bias (see "
            "wheel_runaway_time_s). Peak tilt error after the largest survived push "
            f"({summary['push_tilt_error_impulse_n_m_s'] * 1e3:.3g} mN m s): "
            + ("no push survived" if push is None and not summary["push_tilt_error_impulse_n_m_s"] else show(push, '')) + ".", ""]
