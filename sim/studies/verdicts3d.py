"""`check` on a 3D device: the battery run (`run_check3d`) and its criteria, per wheel where it matters.

Criteria (each a value against a `requirements` limit; a value that could not be found fails):
- `hold_max_tilt_rad`: the hold from a small tilt (`sim.studies.check3d`) ends balanced;
- `settle_time_s`: the scenario's own trial;
- `max_push_survived_n_m_s`: the smallest of the largest pushes over the directions tried (the note
  names that direction);
- `wheel_speed_margin`: the lowest over the battery's runs and the wheels (the note names the wheel
  and the run);
- `wheel_runaway_time_s`: the shortest over the per-axis bias holds and the wheels;
- `voltage_headroom`, `current_headroom`: the hold, the worst wheel;
- `winding_temperature_c`: each wheel's motor at its own RMS current in the scenario's own trial,
  the hottest judged;
- `wheel_burst_safety_factor`: each wheel's parts at its own runaway speed (its no-load speed at
  full supply), the weakest judged;
- `monte_carlo_pass_fraction`;
- `step_halving_change`: the scenario's own trial again at half the physics step (`sim.studies.step_check`;
  two trials that both fell are compared up to the earlier fall);
- through the power chain (a battery or a drive model), the one-wheel power criteria over the shared bus
  (`sim.studies.power_checks`): run time on a charge, the sag margin of the worst wheel, the bus's peak in
  a braking trial with every wheel braked at once, and the drivers' trips.
"""

from __future__ import annotations

import math

import numpy as np

from ..core.safety import SAFETY_NOTES
from ..model.device3d import Device3D
from ..model.device_figures3d import holdable_tilt, stall_torque_n_m
from ..model.scenario import validate_scenario
from ..model.tolerances import interval_note
from ..run.metrics3d import trial_metrics3d
from ..run.trial3d import run_trial3d
from . import check3d
from .criteria3d import (burst_criterion, headroom_criteria, hold_wheels, runaway_criterion3d, runaway_holds3d,
                         wheel_bursts)
from .judge3d import wheel_temperatures_c
from .monte_carlo import monte_carlo, outcome_with_cause
from .sensing_checks import sensing_checks3d
from .step_check import STEP_REL_TOL, step_convergence, step_note
from .thermal import temperature_history_c
from .verdicts import HOLD_S, CheckOutcome, _at_least, _at_most, _criterion, _failure_counts, runaway_summary


def run_check3d(raw: dict, where: str, *, trials: int, workers=None, cluster=None, on_stage=None,
                on_done=None) -> CheckOutcome:
    """Run the 3D battery on a raw scenario mapping (see `sim.studies.check3d`)."""
    stage = on_stage or (lambda text: None)
    sc = validate_scenario(raw, where=where)
    device = Device3D.from_scenario(sc)
    runs = {}
    for name, scen in (("nominal", sc), ("hold", check3d.hold_scenario3d(sc))):
        stage(f"{name} trial")
        runs[name] = run_trial3d(scen)
    metrics = {name: trial_metrics3d(r) for name, r in runs.items()}
    pushes = {}
    for label, direction in check3d.push_directions(device).items():
        stage(f"largest push about {label}")
        pushes[label] = check3d.max_push3d(sc, direction, seed=sc.trial.seed)
    mc = None
    if trials > 0:
        stage(f"Monte Carlo, {trials} trials")
        mc = monte_carlo(raw, where, sc, trials=trials, workers=workers, cluster=cluster, on_done=on_done)
    stage(f"{sc.requirements.hold_time:g} s holds for wheel drift, about each tilt axis")
    holds = runaway_holds3d(sc, device, seed=sc.trial.seed)
    twin = check3d.axis_twin(raw, where, sc, device, seed=sc.trial.seed, on_stage=stage)
    stage(f"the scenario's own trial at half the step ({sc.world.step / 2 * 1e3:g} ms)")
    conv = step_convergence(sc, coarse=runs["nominal"])
    power, braking_run = None, {}
    if sc.power_model:
        from .power_checks import braking_trial, power_criteria
        stage("braking trial, every wheel at once")
        braking_run["braking"], braking = braking_trial(raw, sc, where)
        power = power_criteria(sc, metrics, braking, _criterion)
    if sc.sensors.estimator is not None:
        stage("the estimator's tilt error after the largest push")
    directions = check3d.push_directions(device)
    sensing = sensing_checks3d(sc, runs, pushes, push_scenario=lambda label, impulse: check3d.push_scenario3d(
        sc, tuple(impulse * d for d in directions[label])))
    verdict = build_verdict3d(sc, device, runs, metrics, pushes, mc, holds, twin, conv, sensing,
                              power_criteria=power)
    return CheckOutcome(verdict=verdict, runs=runs | braking_run, pushes=pushes, mc_rows=mc["rows"] if mc else [])


def build_verdict3d(sc, device, runs: dict, metrics: dict, pushes: dict, mc: dict | None, holds: list[dict],
                    twin: dict | None, conv: dict | None = None, sensing: tuple[list, dict] | None = None, *,
                    power_criteria: list[dict] | None = None) -> dict:
    """Criteria and the verdict dictionary written to verdict.json (SI, units in the keys); `conv`: the
    step-halving figures (`sim.studies.step_check`), judged as `step_halving_change` (None: left out);
    `sensing`: (criteria, summary) of `sim.studies.sensing_checks.sensing_checks3d` (None or empty: nothing);
    `power_criteria`: `sim.studies.power_checks.power_criteria`'s, appended (None: none)."""
    worst_dir = min(pushes, key=lambda d: pushes[d]["max_survived_n_m_s"])
    wheels = wheel_figures(sc, device, runs, metrics)
    sensing_crit, sensing_summary = sensing or ([], {})
    crit = (_run_criteria(sc, metrics, pushes, worst_dir, wheels) + [runaway_criterion3d(sc, holds)]
            + _static_criteria(sc, device, runs["hold"], wheels, mc) + ([step_criterion(conv)] if conv else [])
            + sensing_crit + (power_criteria or []))
    return {
        "passed": all(c["passed"] for c in crit),
        "scenario": sc.source, "name": sc.name, "strategy": sc.strategy.kind,
        "mount": device.mount, "wheel_count": device.n_wheels,
        "criteria": crit,
        "max_push_survived_n_m_s": pushes[worst_dir]["max_survived_n_m_s"],
        "max_push_direction": worst_dir,
        "pushes": pushes,
        "wheels": wheels,
        "wheel_burst_safety_factor": _smallest([w["burst"]["safety_factor"] for w in wheels]),
        "monte_carlo": (None if mc is None else
                        {k: v for k, v in mc.items() if k != "rows"} | {"failures": _failure_counts(mc["rows"])}),
        "runs": {name: {k: m[k] for k in ("outcome", "message", "cause", "cause_detail", "caught_at_s", "settle_time_s",
                                          "peak_tilt_rad", "peak_wheel_speed_rad_s", "wheel_speed_margin",
                                          "peak_current_a", "rms_current_a")}
                 for name, m in metrics.items()},
        "runaway_holds": [{"axis": h["axis"], "wheel": h["wheel"], **s, "wheels": hold_wheels(h)}
                          for h, s in zip(holds, runaway_summary(holds))],
        **({"axis_cost": axis_cost(device, pushes, metrics["nominal"], twin)} if twin is not None else {}),
        **({"step_convergence": conv} if conv else {}),
        **({"sensing": sensing_summary} if sensing_summary else {}),
        "requirements": sc.requirements.model_dump(),
        "safety": list(SAFETY_NOTES),
    }


def step_criterion(conv: dict) -> dict:
    """`step_halving_change`: the largest relative change of peak tilt or peak wheel speed when the physics
    step halves, against STEP_REL_TOL; fails too on a changed or diverged outcome or parted traces
    (pybullet takes the gyroscopic coupling explicitly: README, 3D devices)."""
    value = max(conv["peak_tilt_change"], conv["peak_wheel_speed_change"])
    return _criterion("step_halving_change", value, STEP_REL_TOL, conv["converged"], step_note(conv))


def _smallest(values):
    known = [v for v in values if v is not None]
    return min(known) if known else None


def wheel_figures(sc, device, runs: dict, metrics: dict) -> list[dict]:
    """Per wheel: speed margin (lowest run named), burst check at its runaway speed, winding temperature."""
    out = []
    temps = wheel_temperatures_c(runs["nominal"])
    for i, (w, burst) in enumerate(zip(device.wheels, wheel_bursts(sc, device))):
        margins = {name: m["wheels"][i]["speed_margin"] for name, m in metrics.items()}
        low = min(margins, key=margins.get)
        motor = sc.wheel_motor(i)
        out.append({"wheel": i + 1, "axis": list(w.axis), "speed_limit_rad_s": w.no_load_speed_rad_s,
                    "speed_margin": margins[low], "speed_margin_run": low,
                    "peak_speed_rad_s": metrics[low]["wheels"][i]["peak_speed_rad_s"],
                    "burst": burst, "winding_temperature_c": temps[i],
                    "max_winding_temperature_c": motor.thermal.max_temperature,
                    "rms_current_a": metrics["nominal"]["wheels"][i]["rms_current_a"],
                    "peak_winding_over_runs_c": _transient_peaks(sc, motor, runs, i)})
    return out


def _transient_peaks(sc, motor, runs: dict, i: int) -> dict:
    """Peak winding temperature of wheel i's motor over each run, from ambient, degC (first-order model)."""
    th, out = motor.thermal, {}
    stride = max(1, int(round(0.01 / sc.world.step)))   # one value per 10 ms: plenty for minutes
    for name, r in runs.items():
        current = r.trace.wheel(i + 1, "current")
        rms = np.sqrt(np.add.reduceat(current**2, np.arange(0, len(current), stride)) / stride) if len(current) else current
        temps = temperature_history_c(rms, stride * sc.world.step, resistance_20c_ohm=motor.resistance,
                                      thermal_resistance_k_w=th.thermal_resistance,
                                      thermal_capacity_j_k=th.thermal_capacity, ambient_c=th.ambient)
        out[name] = float(temps.max()) if len(temps) else th.ambient
    return out


def _run_criteria(sc, metrics: dict, pushes: dict, worst_dir: str, wheels: list[dict]) -> list[dict]:
    req = sc.requirements
    hold, nominal = metrics["hold"], metrics["nominal"]
    tried = ", ".join(f"{d} {p['max_survived_n_m_s'] * 1e3:.3g}" for d, p in pushes.items())
    low = min(wheels, key=lambda w: w["speed_margin"])
    return [
        _criterion("hold_max_tilt_rad", hold["max_angle_after_catch_rad"], sc.strategy.params.release_angle
                   if hasattr(sc.strategy.params, "release_angle") else math.pi, hold["outcome"] == "balanced",
                   f"{HOLD_S:g} s from a {math.degrees(check3d.HOLD_TILT_RAD):g} deg tilt with the scenario's sensors: "
                   f"{outcome_with_cause(hold)}"),
        _at_most("settle_time_s", nominal["settle_time_s"], req.settle_time,
                 f"the scenario's own trial: {outcome_with_cause(nominal)}"),
        _at_least("max_push_survived_n_m_s", pushes[worst_dir]["max_survived_n_m_s"], req.min_push,
                  f"worst direction: about {worst_dir} (of {tried} mN m s)"),
        _at_least("wheel_speed_margin", low["speed_margin"], req.wheel_speed_margin,
                  f"worst wheel {low['wheel']} (axis {_axis(low['axis'])}) in the {low['speed_margin_run']} run; "
                  "lowest over the battery's runs: "
                  + ", ".join(f"wheel {w['wheel']} {100 * w['speed_margin']:.0f}%" for w in wheels)),
    ]


def _axis(axis) -> str:
    return "[" + ", ".join(f"{v:.3g}" for v in axis) + "]"


def _static_criteria(sc, device, hold_run, wheels: list[dict], mc: dict | None) -> list[dict]:
    """Headroom (worst wheel in the hold), winding temperature, burst and Monte Carlo criteria."""
    req = sc.requirements
    hot = max(wheels, key=lambda w: w["winding_temperature_c"] - w["max_winding_temperature_c"])
    return headroom_criteria(sc, device, hold_run.trace) + [
        _at_most("winding_temperature_c", hot["winding_temperature_c"], hot["max_winding_temperature_c"],
                 f"hottest: wheel {hot['wheel']}'s motor at {hot['rms_current_a']:.3g} A RMS, steady state over the "
                 "scenario's own trial; " + ", ".join(f"wheel {w['wheel']} {w['winding_temperature_c']:.1f} degC" for w in wheels)),
        burst_criterion(sc, [w["burst"] for w in wheels]),
    ] + ([] if mc is None else [
        _at_least("monte_carlo_pass_fraction", mc["pass_fraction"], req.pass_fraction,
                  f"{mc['trials']} trials over the tolerances; " + interval_note(mc["passed_trials"], mc["trials"], req.pass_fraction))])


def axis_cost(device, pushes: dict, nominal: dict, twin: dict) -> dict:
    """What tilted wheel axes cost a hinge device, against its twin with every axis along the hinge.

    `hinge_torque_share` per wheel: |a_x| = cos(angle from the hinge) (statics: a hinge turns with
    the torque's x component only); the largest tilt the wheels' stall torque can hold, each way
    (`sim.model.device_figures3d.holdable_tilt`); the largest push (worst direction), the peak wheel
    speed and the energy from the supply in the scenario's own trial, each way.
    """
    tilt, tilt_twin = holdable_tilt(device)[0], holdable_tilt(twin["device"])[0]
    push = min(p["max_survived_n_m_s"] for p in pushes.values())
    push_twin = min(p["max_survived_n_m_s"] for p in twin["pushes"].values())
    tw = twin["nominal"]
    return {
        "hinge_torque_share": check3d.hinge_shares(device),
        "axis_from_hinge_deg": [math.degrees(math.acos(min(1.0, s))) for s in check3d.hinge_shares(device)],
        "stall_torque_n_m": [stall_torque_n_m(w) for w in device.wheels],
        "holdable_tilt_rad": tilt, "aligned_holdable_tilt_rad": tilt_twin,
        "max_push_survived_n_m_s": push, "aligned_max_push_survived_n_m_s": push_twin,
        "peak_wheel_speed_rad_s": nominal["peak_wheel_speed_rad_s"], "aligned_peak_wheel_speed_rad_s": tw["peak_wheel_speed_rad_s"],
        "energy_from_supply_j": nominal["energy_from_supply_j"], "aligned_energy_from_supply_j": tw["energy_from_supply_j"],
        "aligned_outcome": tw["outcome"],
    }
