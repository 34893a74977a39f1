"""Does the answer depend on the physics step? The scenario's trial at its step and at half of it.

pybullet advances with a first-order step and takes the gyroscopic coupling explicitly, so a 3D
device with fast wheels can drift or even diverge at a step that looks short enough (README, "3D
devices"). The honest test is the one numerical analysts use: halve the step and see whether the
result moves (step-halving, common practice, no source). Compared: the outcome, the peak tilt,
the worst wheel's peak speed, and the largest tilt difference between the two traces at the
coarse trace's rows. The control rate, sensors and seed stay as they are; only `world.step` halves.
When both trials fell, the peaks and traces are compared up to the earlier fall: a body tumbling
after a fall (on a ball mount, with its wheels spinning) follows a chaotic path that parts at any
step, so the motion after it says nothing about the step; a fall at a different time parts the
tilt traces before it, and that is judged.
"""

from __future__ import annotations

import math

import numpy as np

STEP_REL_TOL = 0.05   # a change of more than 5% in peak tilt or peak wheel speed fails (our choice)
TRACE_REL_TOL = 0.10  # nor may the tilt traces part by more than 10% of the peak tilt (at least 1 deg; our choice)


def _peaks(result, rows: int | None = None) -> tuple[float, float, np.ndarray]:
    """(peak tilt rad, the worst wheel's peak |speed| rad/s, tilt per row rad) of a planar or 3D trial,
    over its first `rows` rows (None: all)."""
    tr = result.trace
    n = tr.n if rows is None else min(rows, tr.n)
    if getattr(result, "is_3d", False):
        tilt = np.asarray(tr.tilt[:n], dtype=float)
        speed = max(float(np.max(np.abs(tr.wheel(i, "speed")[:n]))) if n else 0.0
                    for i in range(1, result.device.n_wheels + 1))
    else:
        from ..core.angles import wrap_angles
        tilt = np.abs(wrap_angles(tr.view("angle")[:n].copy()))
        speed = float(np.max(np.abs(tr.wheel_speed[:n]))) if n else 0.0
    return (float(np.max(tilt)) if len(tilt) else 0.0), speed, tilt


def _rel(a: float, b: float) -> float:
    scale = max(abs(a), abs(b))
    return abs(a - b) / scale if scale > 0 else 0.0


def step_convergence(scenario, *, seed: int | None = None, coarse=None) -> dict:
    """Run the scenario at its step and at half of it; SI figures of how far the two differ.

    `coarse`: the trial at the scenario's own step when it has already been run (same seed), else None.

    Returns step_s, outcomes (coarse, fine), peak_tilt_rad (coarse, fine), peak_wheel_speed_rad_s
    (coarse, fine), their relative changes, max_tilt_difference_rad over the common rows (up to the
    shorter trial's end, or when both fell up to the earlier fall) and its share of the peak tilt,
    fell_at_s (coarse, fine; None where a trial did not fall), compared_until_s (the earlier fall, s,
    when both fell, else None), and `converged`: the same outcome, neither diverged, both relative
    changes within STEP_REL_TOL and the traces within TRACE_REL_TOL.
    """
    from ..run.trial import run_trial
    fine_world = scenario.world.model_copy(update={"step": scenario.world.step / 2.0})
    fine_sc = scenario.model_copy(update={"world": fine_world})
    coarse = run_trial(scenario, seed=seed) if coarse is None else coarse
    fine = run_trial(fine_sc, seed=seed)
    # both fell: up to the earlier fall (its row included), in each trace's own rows
    fell = coarse.fell_at_s is not None and fine.fell_at_s is not None
    until_s = min(coarse.fell_at_s, fine.fell_at_s) if fell else None
    cut_c = cut_f = None
    if fell:
        cut_c = int(round(until_s / scenario.world.step)) + 1
        cut_f = int(round(until_s / fine_world.step)) + 1
    (pt_c, ws_c, tilt_c), (pt_f, ws_f, tilt_f) = _peaks(coarse, cut_c), _peaks(fine, cut_f)
    rows = min(len(tilt_c), (len(tilt_f) + 1) // 2)
    diff = float(np.max(np.abs(tilt_c[:rows] - tilt_f[: 2 * rows : 2]))) if rows else 0.0
    out = {
        "step_s": scenario.world.step, "half_step_s": fine_world.step,
        "outcomes": [coarse.outcome, fine.outcome],
        "peak_tilt_rad": [pt_c, pt_f], "peak_tilt_change": _rel(pt_c, pt_f),
        "peak_wheel_speed_rad_s": [ws_c, ws_f], "peak_wheel_speed_change": _rel(ws_c, ws_f),
        "max_tilt_difference_rad": diff, "fell_at_s": [coarse.fell_at_s, fine.fell_at_s],
        "compared_until_s": until_s,
    }
    out["tilt_difference_share"] = diff / max(pt_c, pt_f, math.radians(1.0))
    out["converged"] = (coarse.outcome == fine.outcome and "diverged" not in out["outcomes"]
                        and out["peak_tilt_change"] <= STEP_REL_TOL and out["peak_wheel_speed_change"] <= STEP_REL_TOL
                        and out["tilt_difference_share"] <= TRACE_REL_TOL)
    return out


def step_note(conv: dict) -> str:
    """One line for a report: what halving the step did."""
    o = conv["outcomes"]
    text = (f"at {conv['step_s'] * 1e3:g} ms and {conv['half_step_s'] * 1e3:g} ms: peak tilt "
            f"{math.degrees(conv['peak_tilt_rad'][0]):.2f} vs {math.degrees(conv['peak_tilt_rad'][1]):.2f} deg, "
            f"peak wheel speed {conv['peak_wheel_speed_rad_s'][0]:.1f} vs {conv['peak_wheel_speed_rad_s'][1]:.1f} rad/s")
    text += f", traces apart by up to {math.degrees(conv['max_tilt_difference_rad']):.2f} deg"
    if conv.get("compared_until_s") is not None:
        fc, ff = conv["fell_at_s"]
        text += (f", up to the earlier fall at {conv['compared_until_s']:.3f} s (fell at {fc:.3f} vs {ff:.3f} s; "
                 "the motion after a fall is not compared)")
    if o[0] != o[1] or "diverged" in o:
        text += f"; outcome {o[0]} vs {o[1]}"
    if not conv["converged"]:
        text += "; shorten world.step until halving it changes little"
    return text
