"""Does the answer depend on the physics step? The scenario's trial at its step and at half of it.

pybullet advances with a first-order step and takes the gyroscopic coupling explicitly, so a 3D
device with fast wheels can drift or even diverge at a step that looks short enough (README, "3D
devices"). The honest test is the one numerical analysts use: halve the step and see whether the
result moves (step-halving, common practice, no source). Compared: the outcome, the peak tilt,
the worst wheel's peak speed, and the largest tilt difference between the two traces at the
coarse trace's rows. The control rate, sensors and seed stay as they are; only `world.step` halves.
"""

from __future__ import annotations

import math

import numpy as np

STEP_REL_TOL = 0.05   # a change of more than 5% in peak tilt or peak wheel speed fails (our choice)
TRACE_REL_TOL = 0.10  # nor may the tilt traces part by more than 10% of the peak tilt (at least 1 deg; our choice)


def _peaks(result) -> tuple[float, float, np.ndarray]:
    """(peak tilt rad, the worst wheel's peak |speed| rad/s, tilt per row rad) of a planar or 3D trial."""
    tr = result.trace
    if getattr(result, "is_3d", False):
        tilt = np.asarray(tr.tilt[: tr.n], dtype=float)
        speed = max(float(np.max(np.abs(tr.wheel(i, "speed")[: tr.n]))) if tr.n else 0.0
                    for i in range(1, result.device.n_wheels + 1))
    else:
        from ..core.angles import wrap_angles
        tilt = np.abs(wrap_angles(tr.view("angle").copy()))
        speed = float(np.max(np.abs(tr.wheel_speed[: tr.n]))) if tr.n else 0.0
    return (float(np.max(tilt)) if len(tilt) else 0.0), speed, tilt


def _rel(a: float, b: float) -> float:
    scale = max(abs(a), abs(b))
    return abs(a - b) / scale if scale > 0 else 0.0


def step_convergence(scenario, *, seed: int | None = None) -> dict:
    """Run the scenario at its step and at half of it; SI figures of how far the two differ.

    Returns step_s, outcomes (coarse, fine), peak_tilt_rad (coarse, fine), peak_wheel_speed_rad_s
    (coarse, fine), their relative changes, max_tilt_difference_rad over the common rows (up to the
    shorter trial's end) and its share of the peak tilt, and `converged`: the same outcome, neither
    diverged, both relative changes within STEP_REL_TOL and the traces within TRACE_REL_TOL.
    """
    from ..run.trial import run_trial
    fine_world = scenario.world.model_copy(update={"step": scenario.world.step / 2.0})
    fine_sc = scenario.model_copy(update={"world": fine_world})
    coarse, fine = run_trial(scenario, seed=seed), run_trial(fine_sc, seed=seed)
    (pt_c, ws_c, tilt_c), (pt_f, ws_f, tilt_f) = _peaks(coarse), _peaks(fine)
    rows = min(len(tilt_c), (len(tilt_f) + 1) // 2)
    diff = float(np.max(np.abs(tilt_c[:rows] - tilt_f[: 2 * rows : 2]))) if rows else 0.0
    out = {
        "step_s": scenario.world.step, "half_step_s": fine_world.step,
        "outcomes": [coarse.outcome, fine.outcome],
        "peak_tilt_rad": [pt_c, pt_f], "peak_tilt_change": _rel(pt_c, pt_f),
        "peak_wheel_speed_rad_s": [ws_c, ws_f], "peak_wheel_speed_change": _rel(ws_c, ws_f),
        "max_tilt_difference_rad": diff,
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
    if o[0] != o[1] or "diverged" in o:
        text += f"; outcome {o[0]} vs {o[1]}"
    if not conv["converged"]:
        text += "; shorten world.step until halving it changes little"
    return text
