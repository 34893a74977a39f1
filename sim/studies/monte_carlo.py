"""Monte Carlo over a scenario's `tolerances`: one judged trial per perturbed copy, and the rows.

Each trial perturbs the raw scenario mapping with draws from the seeded generator of its index,
validates the copy again and judges its own trial against the requirements (`judge_trial`: a
flat row, no traces). `monte_carlo` runs the trials (in this process, local processes or dask)
and returns the rows in trial order with the pass fraction and its Wilson interval. Used by the
`check` battery (`sim.studies.verdicts`) and by sweeps.
"""

from __future__ import annotations

import numpy as np

from ..model.scenario import validate_scenario
from ..model.tolerances import perturbed_raw, scenario_tolerances, trial_seed, wilson_interval
from ..run.metrics import POWER_ROW_KEYS, trial_metrics
from ..run.parallel import run_tasks
from ..run.trial import run_trial
from .thermal import trial_rms_current_a, winding_check


def outcome_with_cause(m: dict) -> str:
    """A run's outcome for a criterion's note, with its cause when it failed: "fell (bias_drift)"."""
    return f"{m['outcome']} ({m['cause']})" if m.get("cause") else m["outcome"]



def judge_trial(scenario, *, seed: int) -> dict:
    """Run a scenario's own trial and judge it against its requirements. A flat row, no traces.
    A 3D scenario is judged by `sim.studies.judge3d.judge_trial3d` (the same row keys)."""
    if not scenario.is_planar:
        from .judge3d import judge_trial3d
        return judge_trial3d(scenario, seed=seed)
    result = run_trial(scenario, seed=seed, stop_early=True)
    m = trial_metrics(result)
    req = scenario.requirements
    reasons = []
    if m["outcome"] not in ("balanced", "completed"):
        reasons.append(outcome_with_cause(m))
    if not all(p["survived"] for p in m["pushes"]):
        reasons.append("push lost")
    if result.strategy is not None and result.strategy.goal == "balance" and m["outcome"] == "balanced" and (
            m["settle_time_s"] is None or m["settle_time_s"] > req.settle_time):
        reasons.append("slow to settle")
    if m["wheel_speed_margin"] is None or m["wheel_speed_margin"] < req.wheel_speed_margin:
        reasons.append("wheel speed margin")
    rms = trial_rms_current_a(result.trace.view("current"), result.trace.step_s, result.fell_at_s, result.caught_at_s)
    temp = winding_check(scenario.motor, rms)["steady_winding_temperature_c"]
    power = {k: m[k] for k in POWER_ROW_KEYS} if "min_supply_voltage_v" in m else {}   # the power chain ran
    return power | {
        "outcome": m["outcome"], "message": m["message"], "caught_at_s": m["caught_at_s"],
        "settle_time_s": m["settle_time_s"], "peak_wheel_speed_rad_s": m["peak_wheel_speed_rad_s"],
        "wheel_speed_margin": m["wheel_speed_margin"], "peak_current_a": m["peak_current_a"],
        "rms_current_a": m["rms_current_a"], "winding_temperature_c": temp,
        "pushes_survived": sum(p["survived"] for p in m["pushes"]), "pushes": len(m["pushes"]),
        "passed": not reasons, "fail_reasons": ";".join(reasons),
    }


def monte_carlo_task(payload: dict) -> dict:
    """One Monte Carlo trial (module-level so worker processes can run it).

    payload: raw, where, tolerances (list of Tolerance), base_seed, index, and optionally judge (a
    module-level `judge(scenario, *, seed) -> row` in place of `judge_trial`). Perturbs the raw
    mapping, validates it again and judges its trial. An invalid perturbed design fails the trial.
    """
    from ..core.errors import ScenarioError
    rng = np.random.default_rng(trial_seed(payload["base_seed"], payload["index"], 1))
    raw, drawn = perturbed_raw(payload["raw"], payload["tolerances"], rng)
    seed = trial_seed(payload["base_seed"], payload["index"])
    try:
        sc = validate_scenario(raw, where=payload["where"])
    except ScenarioError as exc:
        return {"outcome": "invalid", "message": str(exc), "passed": False, "fail_reasons": "invalid", "drawn": drawn,
                "seed": seed}
    row = (payload.get("judge") or judge_trial)(sc, seed=seed)
    row["drawn"], row["seed"] = drawn, seed
    return row


def monte_carlo(raw: dict, where: str, scenario, *, trials: int, workers: int | None = None, cluster=None,
                on_done=None, judge=None) -> dict:
    """`trials` Monte Carlo trials over the scenario's tolerances; rows in trial order plus the pass fraction.
    `judge`: a module-level function judging one trial in place of `judge_trial` (the jump check's)."""
    tols = scenario_tolerances(scenario)
    extra = {"judge": judge} if judge is not None else {}
    tasks = ((i, {"raw": raw, "where": where, "tolerances": tols, "base_seed": scenario.trial.seed, "index": i,
                  **extra}) for i in range(trials))
    rows: list = [None] * trials
    for i, row in run_tasks(monte_carlo_task, tasks, workers=workers, cluster=cluster):
        rows[i] = row
        if on_done is not None:
            on_done()
    passed = sum(bool(r["passed"]) for r in rows)
    low, high = wilson_interval(passed, trials) if trials else (None, None)
    return {"trials": trials, "passed_trials": passed, "pass_fraction": passed / trials if trials else None,
            "pass_fraction_low": low, "pass_fraction_high": high, "interval": "95% Wilson score interval",
            "tolerances": {t.key: (f"{t.band:.4g} (relative)" if t.relative else f"{t.band:.6g} (absolute, SI)")
                           for t in tols},
            "rows": rows}
