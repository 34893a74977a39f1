"""Judging a 3D device (`Scenario.is_planar` false) for `sweep`, `tune` and `catch-map`.

What these studies need of a design with one to three wheels on a hinge or ball mount:
- `judge_trial3d`: the scenario's own trial judged against `requirements` (a flat row, as
  `sim.studies.monte_carlo.judge_trial` gives for a planar device), with the 3D figures:
  `peak_tilt_rad`, the worst wheel in today's scalar keys and one column group per wheel
  (`wheel1_peak_speed_rad_s`, ...; wheels numbered from 1 in the scenario's order, as the trace).
- `run_until_clear3d`: a balance trial stopped once clearly caught (tilt within the settle band
  and the tilt rates small for a while) or clearly lost (tilt past the release angle).
- `max_push3d`: the largest push survived along one horizontal world direction (bisection).
- `run_battery3d`: the nominal trial, an upright hold, the largest push in each direction (hinge:
  +-x; ball: +-x and +-y of the world), the bias holds and, with `trials`, Monte Carlo over the
  tolerances; the criteria in `check`'s names where they mean the same.

Burst, runaway and headroom are judged as `check` judges them, by the same functions
(`sim.studies.criteria3d`): each wheel's burst check, the bias holds per tilt axis, and the headroom
over the battery's hold. Left out and named in the verdict's `not_judged`: `check`'s step-halving
trial, and with power-chain keys `check`'s braking trial and power criteria (`check` judges them). Tilt is `tilt_rad` of
`sim.core.frames` (the angle between the pivot-to-centre-of-mass line and the vertical); impulses
are angular impulses about the pivot in the world frame, N m s.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..model.device3d import Device3D
from ..model.scenario import Push, validate_scenario
from ..model.tolerances import perturbed_raw, scenario_tolerances, trial_seed, wilson_interval
from ..run.metrics import PUSH_RECOVER_S, SETTLE_BAND_RAD
from ..run.metrics3d import trial_metrics3d
from ..run.trial import run_trial
from . import judge3d
from .stress import optimistic_summary
from .criteria3d import burst_criterion, headroom_criteria, runaway_criterion3d, runaway_holds3d, wheel_bursts
from .verdicts import PUSH_AT_S, SETTLED_RATE_RAD_S, EarlyStop, _Stop, largest_survived, with_trial

HOLD_S = 3.0            # the upright hold with sensor noise (shorter than check's 5 s: a 3D trial costs more)
PUSH_MAX_EVALS = 16     # per direction (check's 24 for one; a ball mount has four)
NOT_JUDGED = ("step_halving_change",)   # check's
NOT_JUDGED_POWER = ("power criteria",)  # check's braking trial and power criteria, for a device with power-chain keys


def judge_trial3d(scenario, *, seed: int) -> dict:
    """The scenario's own trial judged against its requirements, with the per-wheel columns
    (`sim.studies.judge3d`, which `check`'s Monte Carlo uses too)."""
    return judge3d.judge_trial3d(scenario, seed=seed, per_wheel=True)


# ----------------------------------------------------------------------------- early stopping

class EarlyStop3D(EarlyStop):
    """An `on_step` hook for a 3D trial: ends it once clearly caught or clearly lost (`EarlyStop`'s
    rules and figures, on the 3D state).

    Looks on control ticks only. Caught: after `not_before_s`, the tilt within the settle band
    (1 degree) and both tilt rates (about the heading frame's x and y; a hinge has one) below
    SETTLED_RATE_RAD_S for SETTLED_FOR_S; a turn about the vertical does not count against it.
    Lost: the tilt past the strategy's release angle. Records each wheel's peak speed (rad/s).
    """

    def __init__(self, scenario, *, not_before_s: float = 0.0):
        super().__init__(scenario, not_before_s=not_before_s)
        self.peak_wheels_rad_s = [0.0] * len(scenario.wheel_list)
        self._read = None

    def __call__(self, k: int, engine) -> None:
        if k % self.every:
            return
        if self._read is None:
            self._read = engine.io()[0]
        _, _, _, tilt, (wx, wy, _), _, speeds = self._read()
        peaks = self.peak_wheels_rad_s
        for i, s in enumerate(speeds):
            if abs(s) > peaks[i]:
                peaks[i] = abs(s)
        self.peak_wheel_rad_s = max(peaks)
        self.judge(k, tilt, tilt <= SETTLE_BAND_RAD and max(abs(wx), abs(wy)) <= SETTLED_RATE_RAD_S)


def run_until_clear3d(scenario, *, seed: int, not_before_s: float = 0.0) -> dict:
    """Run a 3D balance trial until clearly caught or lost. Returns caught, outcome, ended_at_s and
    the peak wheel speeds seen on ticks (rad/s: `peak_wheel_speed_rad_s` the fastest wheel,
    `peak_wheel_speeds_rad_s` each wheel)."""
    watch = EarlyStop3D(scenario, not_before_s=not_before_s)
    try:
        result = run_trial(scenario, seed=seed, stop_early=True, on_step=watch)
        outcome, ended = result.outcome, result.ended_at_s
        caught = outcome == "balanced" and all(p["survived"] for p in trial_metrics3d(result)["pushes"])
    except _Stop as stop:
        outcome, caught, ended = stop.outcome, stop.outcome == "caught", stop.t_s
    return {"caught": caught, "outcome": outcome, "ended_at_s": ended, "peak_wheel_speed_rad_s": watch.peak_wheel_rad_s,
            "peak_wheel_speeds_rad_s": list(watch.peak_wheels_rad_s)}


# ----------------------------------------------------------------------------- pushes

def upright_start(scenario) -> dict:
    """The start at rest upright: `tilt` on a ball mount, `angle` on a hinge."""
    if scenario.design_mount == "ball":
        return {"tilt": [0.0, 0.0], "angle": 0.0, "rate": 0.0, "wheel_speed": 0.0}
    return {"tilt": None, "angle": 0.0, "rate": 0.0, "wheel_speed": 0.0}


def push_directions(scenario) -> dict[str, tuple[float, float, float]]:
    """Horizontal world directions a push is tried along: +-x on a hinge (its axis), +-x and +-y on a ball."""
    out = {"+x": (1.0, 0.0, 0.0), "-x": (-1.0, 0.0, 0.0)}
    if scenario.design_mount == "ball":
        out |= {"+y": (0.0, 1.0, 0.0), "-y": (0.0, -1.0, 0.0)}
    return out


def push_survived3d(scenario, direction, impulse_n_m_s: float, *, seed: int) -> bool:
    """Held upright at rest, does the device recover from one push of this size along `direction`?"""
    vec = [float(impulse_n_m_s * c) for c in direction]
    sc = with_trial(scenario, duration=PUSH_AT_S + PUSH_RECOVER_S, start=upright_start(scenario),
                      pushes=[Push(at=PUSH_AT_S, impulse=tuple(vec))])
    return run_until_clear3d(sc, seed=seed, not_before_s=PUSH_AT_S + sc.world.step)["caught"]


def max_push3d(scenario, direction, *, seed: int, start_n_m_s: float) -> dict:
    """The largest push survived along `direction` (a horizontal unit 3-vector, world frame), N m s:
    `sim.studies.verdicts.largest_survived` (doubling from `start_n_m_s`, then bisection)."""
    found = largest_survived(lambda x: push_survived3d(scenario, direction, x, seed=seed), start_n_m_s=start_n_m_s,
                             max_evals=PUSH_MAX_EVALS)
    return {"max_survived_n_m_s": found["max_survived_n_m_s"], "first_lost_n_m_s": found["smallest_lost_n_m_s"],
            "evaluations": len(found["evals"]), "direction": list(direction)}


# ----------------------------------------------------------------------------- the battery

@dataclass
class Battery3D:
    """The battery's verdict (JSON-ready) and the Monte Carlo rows."""
    verdict: dict
    mc_rows: list = field(default_factory=list)


def _criterion(name, value, limit, passed, note=""):
    return {"name": name, "value": value, "limit": limit, "passed": bool(passed), "note": note}


def monte_carlo3d(raw: dict, where: str, scenario, *, trials: int) -> dict:
    """`trials` judged trials of perturbed copies (the scenario's tolerances), in this process."""
    tols = scenario_tolerances(scenario)
    rows = []
    for i in range(trials):
        rng = np.random.default_rng(trial_seed(scenario.trial.seed, i, 1))
        praw, drawn = perturbed_raw(raw, tols, rng)
        seed = trial_seed(scenario.trial.seed, i)
        try:
            sc = validate_scenario(praw, where=where)
        except Exception as exc:  # noqa: BLE001 - an invalid perturbed design fails its trial
            rows.append({"outcome": "invalid", "message": str(exc), "passed": False, "seed": seed, "drawn": drawn})
            continue
        rows.append(judge_trial3d(sc, seed=seed) | {"seed": seed, "drawn": drawn})
    passed = sum(bool(r["passed"]) for r in rows)
    low, high = wilson_interval(passed, trials)
    return {"trials": trials, "passed_trials": passed, "pass_fraction": passed / trials, "pass_fraction_low": low,
            "pass_fraction_high": high, "interval": "95% Wilson score interval", "rows": rows}


def run_battery3d(raw: dict, where: str, *, trials: int = 0) -> Battery3D:
    """Judge a 3D design: nominal trial, upright hold, largest push per direction, Monte Carlo (`trials`)."""
    sc = validate_scenario(raw, where=where)
    req = sc.requirements
    release = getattr(sc.strategy.params, "release_angle", math.pi)
    device = Device3D.from_scenario(sc)
    nominal = judge_trial3d(sc, seed=sc.trial.seed)
    hold_run = run_trial(with_trial(sc, duration=HOLD_S, start=upright_start(sc), pushes=[]), seed=sc.trial.seed,
                         stop_early=True)
    hold = judge3d.judge_result3d(hold_run, per_wheel=True)
    start = max(req.min_push, 1e-3)
    pushes = {name: max_push3d(sc, d, seed=sc.trial.seed, start_n_m_s=start) for name, d in push_directions(sc).items()}
    worse = min(pushes, key=lambda d: pushes[d]["max_survived_n_m_s"])
    push = pushes[worse]["max_survived_n_m_s"]
    runs = {"nominal": nominal, "hold": hold}
    margin = min((r["wheel_speed_margin"] for r in runs.values() if r["wheel_speed_margin"] is not None), default=None)
    temp = max(r["winding_temperature_c"] for r in runs.values())
    limit_c = min(sc.wheel_motor(i).thermal.max_temperature for i in range(len(sc.wheel_list)))
    settle = nominal["settle_time_s"]
    crit = [
        _criterion("hold_max_tilt_rad", hold["peak_tilt_rad"], release, hold["outcome"] == "balanced",
                   f"{HOLD_S:g} s upright with sensor noise: {hold['outcome']}"),
        _criterion("settle_time_s", settle, req.settle_time, settle is not None and settle <= req.settle_time,
                   f"the scenario's own trial: {nominal['outcome']}"),
        _criterion("max_push_survived_n_m_s", push, req.min_push, push >= req.min_push,
                   f"worse direction: {worse} (world frame)"),
        _criterion("wheel_speed_margin", margin, req.wheel_speed_margin,
                   margin is not None and margin >= req.wheel_speed_margin, "worst wheel over the battery's runs"),
        runaway_criterion3d(sc, runaway_holds3d(sc, device, seed=sc.trial.seed)),
        *headroom_criteria(sc, device, hold_run.trace),
        _criterion("winding_temperature_c", temp, limit_c, temp <= limit_c,
                   "steady temperature at the hottest wheel's RMS current"),
        burst_criterion(sc, wheel_bursts(sc, device)),
    ]
    mc = None
    if trials > 0:
        mc = monte_carlo3d(raw, where, sc, trials=trials)
        crit.append(_criterion("monte_carlo_pass_fraction", mc["pass_fraction"], req.pass_fraction,
                               mc["pass_fraction"] >= req.pass_fraction, f"{trials} trials over the tolerances"))
    verdict = {
        "passed": all(c["passed"] for c in crit), "scenario": sc.source, "name": sc.name,
        "strategy": sc.strategy.kind, "mount": sc.body.mount, "wheel_count": len(sc.wheel_list),
        "criteria": crit, "max_push_survived_n_m_s": push, "max_push_direction": worse, "pushes": pushes,
        "runs": runs, "not_judged": list(NOT_JUDGED) + (list(NOT_JUDGED_POWER) if sc.power_model else []),
        "monte_carlo": None if mc is None else {k: v for k, v in mc.items() if k != "rows"},
        "requirements": req.model_dump(),
    }
    return Battery3D(verdict=verdict, mc_rows=mc["rows"] if mc else [])


def write_battery3d(outcome: Battery3D, out_dir) -> list[str]:
    """verdict.json and report.md of a 3D battery (tune's winner)."""
    import json

    from ..core.outputs import clean_json, write_text
    from ..core.safety import SAFETY_NOTES
    v = outcome.verdict
    write_text(out_dir / "verdict.json", json.dumps(clean_json(v | {"safety": list(SAFETY_NOTES)}), indent=2) + "\n")
    lines = [f"# {v['name']}: {'PASS' if v['passed'] else 'FAIL'}", "",
             f"{v['mount']} mount, {v['wheel_count']} wheel(s), strategy {v['strategy']}.", "",
             "| criterion | value | limit | passed | note |", "|---|---|---|---|---|"]
    for c in v["criteria"]:
        value = "-" if c["value"] is None else f"{c['value']:.4g}"
        lines.append(f"| {c['name']} | {value} | {c['limit']:.4g} | {'yes' if c['passed'] else 'NO'} | {c['note']} |")
    lines += ["", "Not judged for 3D devices here: " + ", ".join(v["not_judged"]) + ".", ""]
    lines += [f"- {note}" for note in SAFETY_NOTES]
    write_text(out_dir / "report.md", "\n".join(lines) + "\n")
    return ["verdict.json", "report.md"]



def sweep_row3d(scenario, raw: dict, where: str, *, seed: int, trials: int) -> dict:
    """A sweep point of a 3D device: its judged trial, the burst check and the bias holds (as a planar
    point's, by `check`'s functions, `sim.studies.criteria3d`) and, with `trials`, Monte Carlo around it."""
    device = Device3D.from_scenario(scenario)
    row = judge_trial3d(scenario, seed=seed)
    bursts = wheel_bursts(scenario, device)
    burst = burst_criterion(scenario, bursts)
    runaway = runaway_criterion3d(scenario, runaway_holds3d(scenario, device, seed=seed))
    row |= {"wheel_burst_safety_factor": burst["value"], "wheel_runaway_time_s": runaway["value"],
            "burst_note": "; ".join(f"wheel {i}: {optimistic_summary(b)}" for i, b in enumerate(bursts, start=1)
                                    if optimistic_summary(b))}
    reasons = [r for r in row["fail_reasons"].split(";") if r]
    if not burst["passed"]:
        reasons.append("burst safety factor")
    if not runaway["passed"]:
        reasons.append("wheel runaway")
    if trials:
        mc = monte_carlo3d(raw, where, scenario.model_copy(update={"trial": scenario.trial.model_copy(
            update={"seed": seed})}), trials=trials)
        row.update(mc_trials=trials, pass_fraction=mc["pass_fraction"], pass_fraction_low=mc["pass_fraction_low"],
                   pass_fraction_high=mc["pass_fraction_high"])
        if mc["pass_fraction"] < scenario.requirements.pass_fraction:
            reasons.append("Monte Carlo pass fraction")
    return row | {"passed": not reasons, "fail_reasons": ";".join(reasons)}
