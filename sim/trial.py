"""The trial runner: one scenario, one strategy, one simulated trial -> trace + outcome.

The loop, per physics step: read the joint states -> (on control ticks) sensors -> strategy ->
(every step) drive and motor -> friction and pushes -> engine step. A strategy that raises or
returns nonsense, and a state that turns non-finite or absurd, end the trial with an outcome;
they never raise out of `run_trial`.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np

from .device import Device
from .engine import EngineModel, wrap_angle
from .errors import StrategyError
from .motor import MotorDrive
from .sensors import SensorSuite
from .strategies.base import Reading
from .trace import Trace

OUTCOMES = ("balanced", "fell", "not_caught", "diverged", "strategy_failed", "completed")
ABSURD_RATE_RAD_S = 1e4          # a body spinning at 1,600 rev/s is a numerical blow-up
ABSURD_WHEEL_FACTOR = 20.0       # wheel beyond 20x its no-load speed: likewise


@dataclass
class TrialResult:
    """What a trial produced. `outcome` is one of OUTCOMES; `message` explains failures."""

    outcome: str
    message: str | None
    trace: Trace
    device: Device
    scenario: object
    caught_at_s: float | None
    fell_at_s: float | None
    ended_at_s: float
    control_ticks: int
    saturated_ticks: int
    wall_s: float
    strategy: object = None
    events: list = field(default_factory=list)


def run_trial(scenario, *, seed: int | None = None, stop_early: bool | None = None,
              visual=None, on_step=None) -> TrialResult:
    """Simulate one trial of `scenario`.

    Parameters
    ----------
    seed : overrides `trial.seed` (all randomness of the trial comes from it).
    stop_early : overrides `trial.stop_early` (end as soon as the outcome is settled).
    visual : optional visual model for rendering (see `sim.render`); None for none.
    on_step : optional callable(k, engine) after every engine step (rendering hooks).
    """
    device = Device.from_scenario(scenario)
    dt = scenario.world.step
    n = scenario.n_steps
    cs = scenario.control_steps
    seed = scenario.trial.seed if seed is None else seed
    stop_early = scenario.trial.stop_early if stop_early is None else stop_early
    rng = np.random.default_rng(seed)
    trace = Trace(n, step_s=dt)
    start = scenario.trial.start
    engine = EngineModel(device, step_s=dt, start_angle_rad=start.angle, visual=visual)
    try:
        engine.reset(angle_rad=start.angle, rate_rad_s=start.rate, wheel_speed_rad_s=start.wheel_speed)
        sensors = SensorSuite(scenario.sensors, step_s=dt, n_ticks=n // cs + 1, rng=rng)
        return _loop(scenario, device, engine, sensors, trace, rng, dt, n, cs, stop_early, on_step)
    finally:
        engine.close()


def _loop(scenario, device, engine, sensors, trace, rng, dt, n, cs, stop_early, on_step) -> TrialResult:
    outcome, message = None, None
    try:
        strategy = scenario.strategy.build(device, rng=rng)
    except Exception as exc:  # a strategy whose design fails is an outcome, like one that raises later
        strategy = None
        outcome, message = "strategy_failed", f"building the strategy failed: {type(exc).__name__}: {exc}"
    reading = Reading()
    release = getattr(getattr(strategy, "params", None), "release_angle", math.pi)
    wants_balance = strategy is not None and strategy.goal == "balance"
    motor = MotorDrive(device, step_s=dt)
    push_steps = sorted((int(round(p.at / dt)), p.impulse / dt) for p in scenario.trial.pushes)
    push_i = 0
    wheel_limit = ABSURD_WHEEL_FACTOR * device.no_load_speed_rad_s + 100.0
    bp, bw = device.pivot_viscous_n_m_s, device.wheel_viscous_n_m_s
    brake_on, open_circuit, volts, mode = False, False, 0.0, 0
    meas = (0.0, 0.0, 0.0)
    catch_k = fell_k = None
    fall_final = False
    ticks = 0
    t_angle, t_rate, t_wangle, t_wspeed = trace.angle, trace.rate, trace.wheel_angle, trace.wheel_speed
    t_volt, t_cur, t_torq, t_mode, t_time = trace.voltage, trace.current, trace.torque, trace.mode, trace.t
    t_ma, t_mr, t_mw = trace.meas_angle, trace.meas_rate, trace.meas_wheel
    read, advance = engine.read, engine.advance
    wall0 = time.perf_counter()
    k = 0
    while k < n and outcome is None:
        th, thd, ph, phd = read()
        t = k * dt
        t_time[k], t_angle[k], t_rate[k], t_wangle[k], t_wspeed[k] = t, th, thd, ph, phd
        if not (abs(thd) < ABSURD_RATE_RAD_S and abs(phd) < wheel_limit and abs(th) < 1e6):
            outcome, message = "diverged", f"the state became non-finite or absurd at t = {t:.4f} s"
            break
        if k % cs == 0:
            meas = sensors.read(k, t_angle, t_rate, t_wangle, t_wspeed)
            reading.t_s, reading.angle_rad, reading.rate_rad_s, reading.wheel_speed_rad_s = t, meas[0], meas[1], meas[2]
            ticks += 1
            try:
                volts = strategy.command(reading)
                mode = trace.phase_code(str(strategy.phase))
                if strategy.brake != brake_on:
                    brake_on = _set_brake(engine, device, bool(strategy.brake))
                open_circuit = bool(strategy.open_circuit)
            except Exception as exc:  # any failure inside the strategy is its outcome, not a crash
                outcome, message = "strategy_failed", _describe(exc, t)
                break
            if wants_balance:
                inside = abs(wrap_angle(th)) <= release
                if strategy.balancing and inside:
                    if catch_k is None and not fall_final:
                        catch_k, fell_k = k, None
                elif catch_k is not None:
                    fell_k, catch_k = k, None
                    fall_final = strategy.balancing  # it did not hand over: nothing will catch it again
                    if stop_early and fall_final:
                        outcome = "fell"
        if open_circuit:
            motor.current, cur, torque = 0.0, 0.0, 0.0
        else:
            cur, torque = motor.update(volts, phd)
        pivot_torque = -bp * thd
        if push_i < len(push_steps) and push_steps[push_i][0] == k:
            pivot_torque += push_steps[push_i][1]
            push_i += 1
        advance(pivot_torque, torque - bw * phd)
        t_volt[k], t_cur[k], t_torq[k], t_mode[k] = (0.0 if open_circuit else volts), cur, torque, mode
        t_ma[k], t_mr[k], t_mw[k] = meas
        if on_step is not None:
            on_step(k, engine)
        k += 1
    wall = time.perf_counter() - wall0
    trace.n = k + 1 if outcome in ("diverged", "strategy_failed") and k < n else k
    trace.n = min(trace.n, n)
    ended = trace.n * dt
    if outcome is None:
        outcome = _final_outcome(wants_balance, strategy, catch_k, fell_k, fall_final)
    elif outcome == "fell":
        ended = (fell_k or k) * dt
    return TrialResult(
        outcome=outcome, message=message, trace=trace, device=device, scenario=scenario,
        caught_at_s=catch_k * dt if (catch_k is not None and outcome == "balanced") else None,
        fell_at_s=fell_k * dt if fell_k is not None else None, ended_at_s=ended,
        control_ticks=ticks, saturated_ticks=getattr(strategy, "saturated_ticks", 0), wall_s=wall,
        strategy=strategy,
    )


def _final_outcome(wants_balance, strategy, catch_k, fell_k, fall_final) -> str:
    if not wants_balance:
        return "completed"
    if catch_k is not None:
        return "balanced"
    return "fell" if fell_k is not None else "not_caught"


def _set_brake(engine, device, on: bool) -> bool:
    if on and device.brake_torque_n_m is None:
        raise StrategyError("the strategy engaged a brake, but the scenario has no drive.brake_torque")
    wheel = device.wheel_coulomb_n_m + (device.brake_torque_n_m if on else 0.0)
    engine.set_dry_friction(pivot_n_m=device.pivot_coulomb_n_m, wheel_n_m=wheel)
    return on


def _describe(exc: BaseException, t: float) -> str:
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
    return f"{type(exc).__name__} at t = {t:.4f} s" + (f": {text}" if text else "")
