"""One 3D trial judged against its requirements, as a flat row (`check`'s Monte Carlo, sweeps).

The 3D sibling of `sim.studies.monte_carlo.judge_trial`, with the same row keys: the scalar keys
hold the worst wheel (`sim.run.metrics3d`), and `winding_temperature_c` the hottest wheel's
motor at its own RMS current. A row also names that wheel (`worst_wheel`, 1-based, by speed margin).
"""

from __future__ import annotations

from ..run.metrics import POWER_ROW_KEYS
from ..run.metrics3d import trial_metrics3d
from ..run.trial import run_trial
from .thermal import trial_rms_current_a, winding_check


def wheel_temperatures_c(result) -> list[float]:
    """Each wheel motor's steady winding temperature at its RMS current over the trial, degC."""
    tr, sc = result.trace, result.scenario
    return [winding_check(sc.wheel_motor(i), trial_rms_current_a(
        tr.wheel(i + 1, "current")[: tr.n], tr.step_s, result.fell_at_s, result.caught_at_s))["steady_winding_temperature_c"]
        for i in range(result.device.n_wheels)]


WHEEL_KEYS = ("peak_speed_rad_s", "speed_margin", "peak_current_a", "rms_current_a")


def wheel_columns(n_wheels: int) -> list[str]:
    """The per-wheel columns of a judged row with `per_wheel`, wheel by wheel."""
    return [f"wheel{i}_{k}" for i in range(1, n_wheels + 1) for k in WHEEL_KEYS]


def judge_trial3d(scenario, *, seed: int, per_wheel: bool = False) -> dict:
    """Run a 3D scenario's own trial and judge it against its requirements. A flat row, no traces.

    `per_wheel`: add the peak tilt, the mount, the wheel count and each wheel's figures
    (`wheel_columns`; sweeps and tuning show them)."""
    return judge_result3d(run_trial(scenario, seed=seed, stop_early=True), per_wheel=per_wheel)


def judge_result3d(result, *, per_wheel: bool = False) -> dict:
    """A 3D trial already run (`sim.run.trial3d.TrialResult3D`) judged as `judge_trial3d` does."""
    scenario = result.scenario
    m = trial_metrics3d(result)
    req = scenario.requirements
    reasons = []
    if m["outcome"] not in ("balanced", "completed"):
        reasons.append(f"{m['outcome']} ({m['cause']})" if m.get("cause") else m["outcome"])
    if not all(p["survived"] for p in m["pushes"]):
        reasons.append("push lost")
    if result.strategy is not None and result.strategy.goal == "balance" and m["outcome"] == "balanced" and (
            m["settle_time_s"] is None or m["settle_time_s"] > req.settle_time):
        reasons.append("slow to settle")
    margins = [w["speed_margin"] for w in m["wheels"]]
    if min(margins) < req.wheel_speed_margin:
        reasons.append("wheel speed margin")
    row = {
        "outcome": m["outcome"], "message": m["message"], "caught_at_s": m["caught_at_s"],
        "settle_time_s": m["settle_time_s"], "peak_wheel_speed_rad_s": m["peak_wheel_speed_rad_s"],
        "wheel_speed_margin": m["wheel_speed_margin"], "worst_wheel": margins.index(min(margins)) + 1,
        "peak_current_a": m["peak_current_a"], "rms_current_a": m["rms_current_a"],
        "winding_temperature_c": max(wheel_temperatures_c(result)),
        "pushes_survived": sum(p["survived"] for p in m["pushes"]), "pushes": len(m["pushes"]),
    }
    if "min_supply_voltage_v" in m:     # the power chain ran: the planar row's power figures, over the bus
        row = {k: m[k] for k in POWER_ROW_KEYS} | row
    if per_wheel:
        row.update({"peak_tilt_rad": m["peak_tilt_rad"], "wheel_count": m["wheel_count"], "mount": m["mount"]})
        for i, w in enumerate(m["wheels"], start=1):
            row.update({f"wheel{i}_{k}": w[k] for k in WHEEL_KEYS})
    return row | {"passed": not reasons, "fail_reasons": ";".join(reasons)}
