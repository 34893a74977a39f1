"""The `check` battery: does a design hold, and by how much?

Runs, on one scenario:
1. the scenario's own trial (its start, pushes and duration: the "nominal" run);
2. a hold: upright at rest for HOLD_S with the scenario's sensor noise and no pushes;
3. a swing-up from hanging, when the strategy can swing up (`swings_up = True`);
4. the largest push survived, by bisection on the impulse, in both directions;
5. Monte Carlo over the scenario's `tolerances` (each trial re-validates a perturbed copy of the
   raw scenario and runs its own trial);
6. static checks: wheel burst safety factor at the runaway speed, winding temperature.
7. with a battery or a drive model, a braking trial and the power criteria (`sim.studies.power_checks`);
8. long holds (`requirements.hold_time`) with the angle-sensor bias at each end of its tolerance
   band: the wheel's slow drift, extrapolated to its speed limit (`wheel_runaway_time_s`, see
   `sim.studies.runaway`).

Each criterion compares a value with a limit from `requirements`; a value that could not be
found (a run that failed, a material with no known strength) fails its criterion and says why.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..core.safety import SAFETY_NOTES
from ..model.device import Device
from ..model.scenario import Push, validate_scenario
from ..model.tolerances import interval_note
from ..run.metrics import PUSH_RECOVER_S, SETTLE_BAND_RAD, trial_metrics
from ..run.trial import run_trial
from .monte_carlo import monte_carlo, outcome_with_cause
from .stress import optimistic_summary, wheel_burst_check
from .thermal import trial_rms_current_a, winding_check

HOLD_S = 5.0            # long enough for the LQR-type laws to show drift from sensor bias (our choice)
PUSH_AT_S = 0.5         # push after a short settled hold
# PUSH_RECOVER_S (sim.run.metrics): time allowed to recover from a push before it counts as survived
SETTLED_FOR_S = 0.5     # "clearly caught": within the settle band, slowly turning, for this long
SETTLED_RATE_RAD_S = 0.2
PUSH_REL_TOL = 0.05     # bisection stops when the bracket is within 5% of its upper end
PUSH_MAX_EVALS = 24
DEFAULT_TRIALS = 20


# ----------------------------------------------------------------------------- early stopping

class _Stop(Exception):
    def __init__(self, outcome: str, t_s: float):
        super().__init__(outcome)
        self.outcome, self.t_s = outcome, t_s


class EarlyStop:
    """An `on_step` hook for `run_trial` that ends a run once it is clearly caught or clearly lost.

    Looks only on control ticks. Caught: after `not_before_s`, the true angle within the settle
    band (1 degree) and the body rate below SETTLED_RATE_RAD_S for SETTLED_FOR_S. Lost: the angle
    beyond the strategy's release angle once it is balancing. Also records the peak wheel speed
    seen on ticks (rad/s), which stays available when the run is cut short.
    """

    def __init__(self, scenario, *, not_before_s: float = 0.0):
        self.dt = scenario.world.step
        self.every = scenario.control_steps
        self.release = getattr(scenario.strategy.params, "release_angle", math.pi)
        self.first_k = int(round(not_before_s / self.dt))
        self.need = max(1, int(round(SETTLED_FOR_S / self.dt)))
        self.settled_since: int | None = None
        self.peak_wheel_rad_s = 0.0

    def __call__(self, k: int, engine) -> None:
        if k % self.every:
            return
        th, thd, _, phd = engine.read()
        self.peak_wheel_rad_s = max(self.peak_wheel_rad_s, abs(phd))
        angle = abs(math.remainder(th, 2 * math.pi))
        self.judge(k, angle, angle <= SETTLE_BAND_RAD and abs(thd) <= SETTLED_RATE_RAD_S)

    def judge(self, k: int, angle_rad: float, settled: bool) -> None:
        """Raise the stop for tick k: lost beyond the release angle (`angle_rad` >= 0), caught after
        `settled` (within the band, slowly turning) held for SETTLED_FOR_S from `not_before_s`."""
        if angle_rad > self.release:
            raise _Stop("lost", k * self.dt)
        if k < self.first_k or not settled:
            self.settled_since = None
            return
        if self.settled_since is None:
            self.settled_since = k
        elif k - self.settled_since >= self.need:
            raise _Stop("caught", k * self.dt)


def run_until_clear(scenario, *, seed: int, not_before_s: float = 0.0) -> dict:
    """Run a balance trial, stopping once clearly caught or lost. Returns caught, outcome, peak wheel speed."""
    watch = EarlyStop(scenario, not_before_s=not_before_s)
    try:
        result = run_trial(scenario, seed=seed, stop_early=True, on_step=watch)
        outcome = result.outcome
        caught = outcome == "balanced" and all(_pushes_survived(result))
        ended = result.ended_at_s
    except _Stop as stop:
        outcome, caught, ended = stop.outcome, stop.outcome == "caught", stop.t_s
    return {"caught": caught, "outcome": outcome, "ended_at_s": ended, "peak_wheel_speed_rad_s": watch.peak_wheel_rad_s}


def _pushes_survived(result) -> list[bool]:
    from ..core.angles import wrap_angles
    from ..run.metrics import push_outcomes
    return [p["survived"] for p in push_outcomes(result, wrap_angles(result.trace.view("angle").copy()))]


# ----------------------------------------------------------------------------- battery trials

def with_trial(scenario, *, because: str = "trial.duration", **changes):
    """A copy of a validated scenario with its `trial` section changed (fields re-checked by pydantic).

    The copy obeys the scenario's step limit like a loaded one (`sim.model.scenario.MAX_STEPS`): a
    longer trial raises ScenarioError naming `because`, the key that asked for it, before any
    trial of the battery runs.
    """
    from ..core.errors import ScenarioError
    from ..model.scenario import MAX_STEPS
    trial = scenario.trial.model_validate({**scenario.trial.model_dump(), **changes})
    steps = trial.duration / scenario.world.step
    if not steps <= MAX_STEPS:
        raise ScenarioError(f"{scenario.source}: {because}: a {trial.duration:g} s trial at a {scenario.world.step:g} s "
                            f"step needs {steps:.3g} steps; the limit is {MAX_STEPS:.0e}")
    return scenario.model_copy(update={"trial": trial})


def hold_scenario(scenario):
    return with_trial(scenario, duration=HOLD_S, start={"angle": 0.0, "rate": 0.0, "wheel_speed": 0.0}, pushes=[])


def swing_up_scenario(scenario):
    req = scenario.requirements
    return with_trial(scenario, because="requirements.swing_up_time (with settle_time, for check's swing-up trial)",
                      duration=req.swing_up_time + req.settle_time + 1.0,
                      start={"angle": math.pi, "rate": 0.0, "wheel_speed": 0.0}, pushes=[])


def push_scenario(scenario, impulse_n_m_s: float):
    """The push test's trial: upright at rest, one push of this angular impulse (N m s) after PUSH_AT_S."""
    return with_trial(scenario, duration=PUSH_AT_S + PUSH_RECOVER_S, pushes=[Push(at=PUSH_AT_S, impulse=impulse_n_m_s)],
                      start={"angle": 0.0, "rate": 0.0, "wheel_speed": 0.0})


def push_survived(scenario, impulse_n_m_s: float, *, seed: int) -> bool:
    """Does the design, held upright at rest, recover from one push of this angular impulse (N m s)?"""
    sc = push_scenario(scenario, impulse_n_m_s)
    return run_until_clear(sc, seed=seed, not_before_s=PUSH_AT_S + sc.world.step)["caught"]


def max_push(scenario, *, sign: float, seed: int, start_n_m_s: float, rel_tol: float = PUSH_REL_TOL,
             max_evals: int = PUSH_MAX_EVALS) -> dict:
    """Largest push survived in one direction (`largest_survived` over `push_survived`)."""
    return largest_survived(lambda x: push_survived(scenario, sign * x, seed=seed), start_n_m_s=start_n_m_s,
                            rel_tol=rel_tol, max_evals=max_evals)


def largest_survived(survived, *, start_n_m_s: float, rel_tol: float = PUSH_REL_TOL,
                     max_evals: int = PUSH_MAX_EVALS, floor_n_m_s: float = 0.0) -> dict:
    """Largest impulse (N m s) for which `survived(impulse) -> bool` holds, by doubling to bracket
    it and then bisection; the bisection also stops once the smallest lost push is at or below
    `floor_n_m_s` (a design that loses pushes that small needs no finer figure).

    Assumes survival falls off monotonically with the impulse. Returns `max_survived_n_m_s` (0
    when even the smallest tried push is lost), `smallest_lost_n_m_s` (None if none was lost
    within the doubling cap), and `evals` [(impulse, survived)] in the order tried.
    """
    evals: list[tuple[float, bool]] = []

    def survives(x: float) -> bool:
        ok = survived(x)
        evals.append((x, ok))
        return ok

    from ..model.scenario import MAX_TORQUE   # the largest impulse a scenario may hold (N m s)
    lo, hi, x = 0.0, None, max(start_n_m_s, 1e-5)
    while len(evals) < max_evals and hi is None and x <= MAX_TORQUE:
        if survives(x):
            lo, x = x, 2.0 * x
        else:
            hi = x
    while hi is not None and hi - lo > rel_tol * hi and len(evals) < max_evals and hi > floor_n_m_s:
        mid = 0.5 * (lo + hi)
        if survives(mid):
            lo = mid
        else:
            hi = mid
    return {"max_survived_n_m_s": lo, "smallest_lost_n_m_s": hi, "evals": evals}


# ----------------------------------------------------------------------------- slow wheel runaway

RUNAWAY_HORIZON_FACTOR = 10.0   # a drift reaching the limit after 10x run_time counts as none (our choice)
NO_DRIFT_RAD_S2 = 1e-9   # a predicted drift below this is the linear loop's rounding, not a drift (our choice)
RUNAWAY_NEAR_LIMIT = 0.8       # a fall with the wheel past 80% of its no-load speed ran out of wheel (our choice)


def bias_ends(scenario) -> list[float]:
    """Angle-sensor biases for the long holds, rad: the scenario's own bias +- its tolerance band.

    The band is the scenario's `tolerances` entry for `sensors.angle.bias`, or the default band of
    `sim.model.tolerances` when there is none (a relative band is taken of the nominal bias).
    """
    from ..model.tolerances import ANGLE_BIAS_KEYS, DEFAULT_TOLERANCES, parse_tolerances, scenario_tolerances
    key = ANGLE_BIAS_KEYS[scenario.sensors.estimator is not None]
    tol = next((t for t in scenario_tolerances(scenario) if t.key == key), None)
    if tol is None:
        tol = parse_tolerances(scenario, {key: DEFAULT_TOLERANCES[ANGLE_BIAS_KEYS[False]]})[0]
    own = _angle_bias(scenario)
    band = tol.band * abs(own) if tol.relative else tol.band
    return sorted({own - band, own + band})


def runaway_hold(scenario, *, bias_rad: float, seed: int) -> dict:
    """Hold upright at rest for `requirements.hold_time` with the angle bias set; stops at a fall.

    Returns bias_rad, outcome, fell_at_s, the wheel's fitted `drift` (`sim.studies.runaway.Drift`, None
    after a fall or when the hold is too short to fit), `runaway_time_s`, peak wheel speed (rad/s)
    and the law's predicted response (`sim.studies.runaway.BiasResponse` or None).
    """
    from .runaway import fit_drift, predict_bias_response, runaway_time_s, settling
    req = scenario.requirements
    sc = with_trial(scenario, duration=req.hold_time, start={"angle": 0.0, "rate": 0.0, "wheel_speed": 0.0}, pushes=[])
    sc = sc.model_copy(update={"sensors": _with_angle_bias(sc.sensors, bias_rad)})
    device = Device.from_scenario(sc)
    result = run_trial(sc, seed=seed, stop_early=True)
    wheel = result.trace.view("wheel_speed").copy()
    out = {"bias_rad": bias_rad, "outcome": result.outcome, "fell_at_s": result.fell_at_s, "drift": None,
           "runaway_time_s": None, "peak_wheel_speed_rad_s": float(np.max(np.abs(wheel))) if wheel.size else 0.0,
           "prediction": predict_bias_response(device, sc.strategy, bias_rad=bias_rad)}
    t = np.arange(wheel.size) * sc.world.step
    if result.outcome == "balanced" and wheel.size >= 60:
        drift = fit_drift(t, wheel)
        out["drift"] = drift
        k = 2 * wheel.size // 3
        out["settling"] = settling(fit_drift(t[:k], wheel[:k], fraction=0.5), drift)
        out["runaway_time_s"] = None if out["settling"] else runaway_time_s(
            drift, limit_rad_s=device.no_load_speed_rad_s, horizon_s=RUNAWAY_HORIZON_FACTOR * req.run_time)
    elif wheel.size >= 90:
        # before a fall: the middle third of the run (past the start, before the wheel ran out of speed)
        k = 2 * wheel.size // 3
        out["drift"] = fit_drift(t[:k], wheel[:k], fraction=0.5)
    return out


def _angle_bias(scenario) -> float:
    """The bias of the law's angle the scenario states, rad: the encoder's, or with an estimator
    the IMU's misalignment about the pivot axis (`sim.model.tolerances.ANGLE_BIAS_KEYS`)."""
    s = scenario.sensors
    return s.imu.orientation.roll if s.estimator is not None else s.angle.bias


def _with_angle_bias(sensors, bias_rad: float):
    """`sensors` with the law's angle bias set (see `_angle_bias`)."""
    if sensors.estimator is None:
        return sensors.model_copy(update={"angle": sensors.angle.model_copy(update={"bias": bias_rad})})
    orientation = sensors.imu.orientation.model_copy(update={"roll": bias_rad})
    return sensors.model_copy(update={"imu": sensors.imu.model_copy(update={"orientation": orientation})})


def runaway_criterion(scenario, device, holds: list[dict]) -> dict:
    """`wheel_runaway_time_s`: the shortest time to the wheel's speed limit over the holds.

    A fall during a hold gives 0; no drift in every hold gives None (passes). The note names the
    worst hold's bias, the simulated drift and what the law predicts; a failure carries cause `bias_drift`.
    """
    req = scenario.requirements
    worst, value, passed, fallen = worst_hold(holds, run_time_s=req.run_time)
    # a fall with the wheel far from its limit is not a slow runaway: no bias_drift cause for it
    drifted = not passed and (not fallen or worst["peak_wheel_speed_rad_s"] >= RUNAWAY_NEAR_LIMIT * device.no_load_speed_rad_s)
    biases = ", ".join(f"{math.degrees(h['bias_rad']):+.2f}" for h in holds)
    note = f"{req.hold_time:g} s holds at angle bias {biases} deg; " + runaway_note(worst, device.no_load_speed_rad_s)
    return _criterion("wheel_runaway_time_s", value, req.run_time, passed, note + ("; cause bias_drift" if drifted else ""))


def worst_hold(holds: list[dict], *, run_time_s: float) -> tuple[dict, float | None, bool, bool]:
    """(the hold to report, the runaway time judged (s; 0 after a fall, None for no drift), passed,
    some hold fell) over bias holds with the keys of `runaway_hold`."""
    fallen = [h for h in holds if h["outcome"] != "balanced"]
    timed = [h for h in holds if h["runaway_time_s"] is not None]
    if fallen:
        worst, value = min(fallen, key=lambda h: h["fell_at_s"] if h["fell_at_s"] is not None else 0.0), 0.0
    elif timed:
        worst = min(timed, key=lambda h: h["runaway_time_s"])
        value = worst["runaway_time_s"]
    else:
        worst, value = max(holds, key=lambda h: abs(h["bias_rad"])), None
    unmeasured = [h for h in holds if h["outcome"] == "balanced" and h["drift"] is None]
    if unmeasured and not fallen and value is None:
        worst = unmeasured[0]       # too short a hold to fit: cannot vouch for the wheel
    return worst, value, not fallen and not unmeasured and (value is None or value >= run_time_s), bool(fallen)


def runaway_note(hold: dict, limit_rad_s: float, *, unpredicted: str = "no linear prediction for this law") -> str:
    """What one hold showed and what the law predicts (`unpredicted` when there is no prediction), in a few words."""
    b = f"{math.degrees(hold['bias_rad']):+.2f} deg"
    if hold["outcome"] != "balanced":
        text = (f"at {b} the body {hold['outcome'].replace('_', ' ')} at {hold['fell_at_s'] or 0:.1f} s with the wheel "
                f"at {100 * hold['peak_wheel_speed_rad_s'] / limit_rad_s:.0f}% of its no-load speed")
        if hold["drift"] is not None:
            text += f", after drifting {hold['drift'].slope_rad_s2:.3g} rad/s^2"
    elif hold["drift"] is None:
        text = f"at {b}: too short to fit a drift"
    else:
        d = hold["drift"]
        text = (f"at {b} the wheel drifts {d.slope_rad_s2:.3g} +- {d.slope_se_rad_s2:.2g} rad/s^2 "
                f"(mean {d.mean_rad_s:.1f} rad/s over the last third)")
        text += "" if hold["runaway_time_s"] is None else f", reaching {limit_rad_s:.0f} rad/s at {hold['runaway_time_s']:.1f} s"
    p = hold["prediction"]
    if p is None:
        return text + "; " + unpredicted
    if p.kind == "ramp" and p.wheel_accel_rad_s2 is None:
        return text + f"; the law predicts a wheel speed growing without bound ({p.basis})"
    if p.kind == "ramp":
        return text + f"; the law predicts an unbounded wheel acceleration of {p.wheel_accel_rad_s2:.3g} rad/s^2 ({p.basis})"
    text += f"; the law predicts a steady wheel offset of {p.wheel_speed_rad_s:.1f} rad/s ({p.basis})"
    if p.wheel_accel_rad_s2 is not None:    # a 3D hold's prediction: the linear loop over the same window too
        accel = p.wheel_accel_rad_s2
        text += (f", drifting {accel:.3g} rad/s^2 over the hold's last third" if abs(accel) >= NO_DRIFT_RAD_S2 else
                 f", settled over the hold's last third (drift under {NO_DRIFT_RAD_S2:g} rad/s^2)")
    return text


def runaway_summary(holds: list[dict]) -> list[dict]:
    """The holds as plain data for verdict.json (SI, units in the keys)."""
    out = []
    for h in holds:
        d, p = h["drift"], h["prediction"]
        out.append({"bias_rad": h["bias_rad"], "outcome": h["outcome"], "fell_at_s": h["fell_at_s"],
                    "peak_wheel_speed_rad_s": h["peak_wheel_speed_rad_s"], "runaway_time_s": h["runaway_time_s"],
                    "settling": h.get("settling", False),
                    "drift_rad_s2": None if d is None else d.slope_rad_s2,
                    "drift_se_rad_s2": None if d is None else d.slope_se_rad_s2,
                    "mean_wheel_speed_rad_s": None if d is None else d.mean_rad_s,
                    "predicted": None if p is None else p.kind,
                    "predicted_wheel_speed_rad_s": None if p is None else p.wheel_speed_rad_s,
                    "predicted_wheel_accel_rad_s2": None if p is None else p.wheel_accel_rad_s2})
    return out


# ----------------------------------------------------------------------------- the battery

@dataclass
class CheckOutcome:
    verdict: dict
    runs: dict = field(default_factory=dict)       # name -> TrialResult, for the report's plots
    pushes: dict = field(default_factory=dict)     # direction -> max_push() result
    mc_rows: list = field(default_factory=list)    # Monte Carlo rows in trial order (monte_carlo.csv)


def run_check(raw: dict, where: str, *, trials: int = DEFAULT_TRIALS, workers: int | None = None,
              cluster=None, on_stage=None, on_done=None) -> CheckOutcome:
    """Run the whole battery on a raw scenario mapping. `on_stage(text)` reports progress."""
    stage = on_stage or (lambda text: None)
    sc = validate_scenario(raw, where=where)
    device = Device.from_scenario(sc)
    runs, metrics = {}, {}
    plan = [("nominal", sc), ("hold", hold_scenario(sc))]
    if getattr(sc.strategy.cls, "swings_up", False):
        plan.append(("swing_up", swing_up_scenario(sc)))
    for name, scen in plan:
        stage(f"{name} trial")
        runs[name] = run_trial(scen)
        metrics[name] = trial_metrics(runs[name])
    pushes = {}
    for direction, sign in (("positive", 1.0), ("negative", -1.0)):
        stage(f"largest push, {direction} direction")
        pushes[direction] = max_push(sc, sign=sign, seed=sc.trial.seed, start_n_m_s=max(sc.requirements.min_push, 1e-3))
    mc = None
    if trials > 0:   # 0: the battery without its Monte Carlo part (tune's cheap evaluations)
        stage(f"Monte Carlo, {trials} trials")
        mc = monte_carlo(raw, where, sc, trials=trials, workers=workers, cluster=cluster, on_done=on_done)
    stage(f"{sc.requirements.hold_time:g} s holds for wheel drift")
    holds = [runaway_hold(sc, bias_rad=b, seed=sc.trial.seed) for b in bias_ends(sc)]
    from .sensing_checks import sensing_checks
    sensing = sensing_checks(sc, runs, pushes, push_scenario=lambda impulse: push_scenario(sc, impulse))
    power = None
    if sc.power_model:
        from .power_checks import braking_trial, power_criteria
        stage("braking trial")
        runs["braking"], braking = braking_trial(raw, sc, where)
        power = power_criteria(sc, metrics, braking, _criterion)
    hold_tr = runs["hold"].trace
    verdict = build_verdict(sc, device, metrics, pushes, mc,
                            hold_signals=(hold_tr.view("voltage").copy(), hold_tr.view("current").copy()),
                            runs_current={name: r.trace.view("current") for name, r in runs.items() if name != "braking"},
                            holds=holds, sensing=sensing, power_criteria=power)
    return CheckOutcome(verdict=verdict, runs=runs, pushes=pushes, mc_rows=mc["rows"] if mc else [])


def _headroom(values: np.ndarray, limit: float) -> float | None:
    if values.size == 0 or not (limit > 0 and math.isfinite(limit)):
        return None
    return float(1.0 - np.percentile(np.abs(values), 99) / limit)


def _criterion(name: str, value, limit, passed: bool, note: str = "") -> dict:
    return {"name": name, "value": value, "limit": limit, "passed": bool(passed), "note": note}


def _at_least(name, value, limit, note=""):
    ok = value is not None and math.isfinite(value) and value >= limit
    return _criterion(name, value, limit, ok, note if value is not None else (note or "could not be found"))


def _at_most(name, value, limit, note=""):
    ok = value is not None and value <= limit
    return _criterion(name, value, limit, ok, note if value is not None else (note or "could not be found"))


HOLD_DERIVED = ("hold_max_angle_rad", "voltage_headroom", "current_headroom")
UNEXERCISED_NOTE = ("NOT EXERCISED: the hold starts exactly upright at rest and the sensors add no noise or "
                    "bias, so nothing moved; this value says nothing about a real build's sensors (give the "
                    "scenario's `sensors` noise and bias figures)")


def hold_unexercised(volts, hold_metrics: dict) -> bool:
    """True when the upright hold never moved: no voltage was ever commanded and the angle stayed at 0
    (ideal sensors and an exact upright start). Its headroom and angle then measure nothing."""
    return (hold_metrics["outcome"] == "balanced" and not np.any(volts)
            and not hold_metrics["max_angle_after_catch_rad"])


def build_verdict(sc, device, metrics: dict, pushes: dict, mc: dict, *, hold_signals, runs_current,
                  holds: list[dict] | None = None, sensing: tuple[list, dict] | None = None,
                  power_criteria: list[dict] | None = None) -> dict:
    """Criteria and the verdict dictionary written to verdict.json.

    `hold_signals` = (voltage V, current A) arrays of the hold trial, for the headroom criteria;
    `runs_current` = {run name: current array A}, for the transient winding temperatures;
    `holds` = `runaway_hold` results, for `wheel_runaway_time_s` (None: that criterion is left out);
    `sensing` = (criteria, summary) of `sim.studies.sensing_checks` (None or empty: nothing added).
    `power_criteria` = `sim.studies.power_checks.power_criteria`'s, appended (None: none).
    """
    sensing_crit, sensing_summary = sensing or ([], {})
    worse = min(pushes, key=lambda d: pushes[d]["max_survived_n_m_s"])
    thermal = winding_check(sc.motor, trial_rms_current_a(runs_current["nominal"], sc.world.step,
                                                          metrics["nominal"]["fell_at_s"],
                                                          metrics["nominal"]["caught_at_s"]))
    thermal["hold_steady_winding_temperature_c"] = winding_check(
        sc.motor, metrics["hold"]["rms_current_a"])["steady_winding_temperature_c"]   # for the report only
    thermal["peak_over_runs_c"] = _transient_peaks(sc, runs_current)
    burst = wheel_burst_check(sc, device)
    crit = (_run_criteria(sc, metrics, pushes[worse]["max_survived_n_m_s"], worse)
            + ([runaway_criterion(sc, device, holds)] if holds else [])
            + _static_criteria(sc, device, hold_signals, thermal, burst, mc) + sensing_crit + (power_criteria or []))
    steady = sensing_summary.get("estimator_steady_error_rad")
    if hold_unexercised(hold_signals[0], metrics["hold"]):
        for c in crit:
            if c["name"] in HOLD_DERIVED:
                c["note"] += "; " + UNEXERCISED_NOTE
    for c in crit:
        if c["name"] == "wheel_runaway_time_s" and steady is not None:
            c["note"] += f"; the estimator's steady error in the upright hold is {math.degrees(steady):+.2f} deg (an angle bias)"
    return {
        "passed": all(c["passed"] for c in crit),
        "scenario": sc.source, "name": sc.name, "strategy": sc.strategy.kind,
        "criteria": crit,
        "max_push_survived_n_m_s": pushes[worse]["max_survived_n_m_s"],
        "max_push_direction": worse,
        "pushes": pushes,
        "wheel_burst_safety_factor": burst["safety_factor"],
        "burst": burst,
        "thermal": thermal,
        "monte_carlo": (None if mc is None else
                        {k: v for k, v in mc.items() if k != "rows"} | {"failures": _failure_counts(mc["rows"])}),
        "runs": {name: {k: m[k] for k in ("outcome", "message", "cause", "cause_detail", "caught_at_s", "settle_time_s", "peak_wheel_speed_rad_s",
                                          "wheel_speed_margin", "peak_current_a", "rms_current_a")}
                 for name, m in metrics.items()},
        "runaway_holds": runaway_summary(holds or []),
        **({"sensing": sensing_summary} if sensing_summary else {}),
        "requirements": sc.requirements.model_dump(),
        "safety": list(SAFETY_NOTES),
    }


def _run_criteria(sc, metrics: dict, push_value: float, worse: str) -> list[dict]:
    """Criteria judged from the simulated runs: swing-up, hold, settling, push, wheel speed."""
    req = sc.requirements
    crit = []
    if "swing_up" in metrics:
        m = metrics["swing_up"]
        crit.append(_at_most("swing_up_time_s", m["caught_at_s"] if m["outcome"] == "balanced" else None,
                             req.swing_up_time, f"outcome {outcome_with_cause(m)}"))
    hold, nominal = metrics["hold"], metrics["nominal"]
    crit.append(_criterion("hold_max_angle_rad", hold["max_angle_after_catch_rad"],
                           getattr(sc.strategy.params, "release_angle", math.pi), hold["outcome"] == "balanced",
                           f"{HOLD_S:g} s upright with the scenario's sensors: {outcome_with_cause(hold)}"))
    crit.append(_at_most("settle_time_s", nominal["settle_time_s"], req.settle_time,
                         f"the scenario's own trial: {outcome_with_cause(nominal)}"))
    crit.append(_at_least("max_push_survived_n_m_s", push_value, req.min_push, f"worse direction: {worse}"))
    margins = [m["wheel_speed_margin"] for m in metrics.values()]
    margin = None if any(v is None for v in margins) else min(margins)
    crit.append(_at_least("wheel_speed_margin", margin, req.wheel_speed_margin, "lowest over the battery's runs"))
    return crit


def _static_criteria(sc, device, hold_signals, thermal: dict, burst: dict, mc: dict) -> list[dict]:
    """Headroom, winding temperature, burst and Monte Carlo criteria."""
    req = sc.requirements
    volts, amps = hold_signals
    limited = math.isfinite(device.current_limit_a)
    i_ref = device.current_limit_a if limited else device.supply_v / device.resistance_ohm
    note = "at the runaway speed (no-load speed at full supply)"
    if burst["unknown_parts"]:
        note = f"strength unknown for {', '.join(burst['unknown_parts'])}: cannot confirm; " + note
    if optimistic_summary(burst):
        note += "; " + optimistic_summary(burst)
    return [
        _at_least("voltage_headroom", _headroom(volts, device.supply_v), req.voltage_headroom,
                  "holding: 1 - p99(|V|)/supply"),
        _at_least("current_headroom", _headroom(amps, i_ref), req.current_headroom,
                  "holding: 1 - p99(|i|)/" + ("current limit" if limited else "stall current")),
        _at_most("winding_temperature_c", thermal["steady_winding_temperature_c"], sc.motor.thermal.max_temperature,
                 thermal["basis"]),
        _criterion("wheel_burst_safety_factor", burst["safety_factor"], req.burst_safety_factor,
                   burst["safety_factor"] is not None and not burst["unknown_parts"]
                   and burst["safety_factor"] >= req.burst_safety_factor, note),
    ] + ([] if mc is None else [
        _at_least("monte_carlo_pass_fraction", mc["pass_fraction"], req.pass_fraction,
                  f"{mc['trials']} trials over the tolerances; "
                  + interval_note(mc["passed_trials"], mc["trials"], req.pass_fraction))])


def _transient_peaks(sc, runs_current: dict) -> dict:
    """Peak winding temperature over each run, starting from ambient, degC (first-order model)."""
    from .thermal import temperature_history_c
    th = sc.motor.thermal
    out = {}
    for name, current in runs_current.items():
        # one value per 10 ms is plenty for a time constant of minutes
        stride = max(1, int(round(0.01 / sc.world.step)))
        rms = np.sqrt(np.add.reduceat(current**2, np.arange(0, len(current), stride)) / stride) if len(current) else current
        temps = temperature_history_c(rms, stride * sc.world.step, resistance_20c_ohm=sc.motor.resistance,
                                      thermal_resistance_k_w=th.thermal_resistance,
                                      thermal_capacity_j_k=th.thermal_capacity, ambient_c=th.ambient)
        out[name] = float(temps.max()) if len(temps) else th.ambient
    return out


def _failure_counts(rows) -> dict:
    counts: dict[str, int] = {}
    for r in rows:
        for reason in filter(None, (r.get("fail_reasons") or "").split(";")):
            counts[reason] = counts.get(reason, 0) + 1
    return counts
