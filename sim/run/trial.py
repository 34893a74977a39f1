"""The trial runner: one scenario, one strategy, one simulated trial -> trace + outcome.

The loop, per physics step: read the joint states -> (on control ticks) sensors -> strategy ->
(every step) drive and motor -> friction and pushes -> engine step. A strategy that raises,
returns nonsense or runs past its time budget, and a state that turns non-finite or absurd, end
the trial with an outcome; they never raise out of `run_trial`. A plug-in's trial runs in a forked
child process (`sim.core.isolation`), so that strategy code stuck in compiled code, or crashing, is an
outcome too.
"""

from __future__ import annotations

import math
import time

import numpy as np

from ..core import isolation
from ..core.angles import wrap_angle
from ..core.budget import StrategyClock
from ..core.errors import StrategyError
from ..model.device import Device
from ..physics.engine import EngineModel
from ..physics.drive import PowerChain
from ..physics.brake import BrakeRamp
from ..physics.motor import MotorDrive
from ..physics.imu_sensing import TIMING_STREAM, make_sensors, sensing_columns, stream
from ..physics.timing import TickSchedule
from ..strategies import plugins_in
from ..strategies.base import Reading
from .causes import find_cause
from .metrics import saturated_ticks, supply_ceiling
from .trace import POWER_CSV_COLUMNS, Trace
from .trial_common import TrialResult, close_trace  # noqa: F401 - TrialResult's home was here
from .trial_common import describe as _describe
from .trial_common import describe_unread as _describe_unread
from .trial_common import final_outcome as _final_outcome
from .trial_common import held_rows, with_strategy
from .trial_isolated import PublishedTrace as _PublishedTrace
from .trial_isolated import WatchedClock as _WatchedClock
from .trial_isolated import lost_child_message, run_watched

OUTCOMES = ("balanced", "fell", "not_caught", "diverged", "strategy_failed", "completed", "slipped")
ABSURD_RATE_RAD_S = 1e4          # a body spinning at 1,600 rev/s is a numerical blow-up
ABSURD_WHEEL_FACTOR = 20.0       # wheel beyond 20x its no-load speed: likewise
ABSURD_ANGLE_RAD = 1e6           # ~160,000 turns: the unwrapped angle has run away
STRATEGY_BUDGET_S = 60.0
"""Default wall-clock budget, s, for all strategy work in one trial (building it and every
control tick together). The built-in laws use well under 1 s for a minute of simulated time;
a plug-in past the budget ends the trial with outcome `strategy_failed`."""


def run_trial(scenario, *, seed: int | None = None, stop_early: bool | None = None,
              visual=None, on_step=None, strategy_budget_s: float | None = None,
              isolate: bool | None = None) -> TrialResult:
    """Simulate one trial of `scenario`.

    Parameters
    ----------
    seed : overrides `trial.seed` (all randomness of the trial comes from it).
    stop_early : overrides `trial.stop_early` (end as soon as the outcome is settled).
    visual : optional visual model for rendering (see `sim.media.render`); None for none.
    on_step : optional callable(k, engine) after every engine step (rendering hooks).
    strategy_budget_s : wall-clock budget for strategy code, s (default STRATEGY_BUDGET_S).
    isolate : run the trial in a forked child process watched by this one (`sim.core.isolation`), so
        that strategy code stuck in compiled code or crashing ends as `strategy_failed` instead of
        hanging or killing this process. None (default): exactly when the strategy, or one nested
        in it, is a plug-in, no `visual` is given and the platform can fork. The numbers are the
        same either way; an `on_step` hook then runs in the child (its exceptions and attributes
        come back, other side effects stay there).
    """
    if not scenario.is_planar:   # a 3D device: its own runner (the planar path below stays as it was)
        if visual is not None:
            raise ValueError("rendering a 3D device is not supported yet")
        from .trial3d import run_trial3d
        return run_trial3d(scenario, seed=seed, stop_early=stop_early, strategy_budget_s=strategy_budget_s,
                           on_step=on_step, isolate=isolate)
    device = Device.from_scenario(scenario)
    seed = scenario.trial.seed if seed is None else seed
    stop_early = scenario.trial.stop_early if stop_early is None else stop_early
    budget = STRATEGY_BUDGET_S if strategy_budget_s is None else strategy_budget_s
    if isolate is None:
        estimator = scenario.sensors.estimator
        isolate = visual is None and isolation.AVAILABLE and (bool(plugins_in(scenario.strategy))
                                                              or (estimator is not None and estimator.is_plugin))
    if not isolate:
        trace = Trace(scenario.n_steps, step_s=scenario.world.step, extra=trace_columns(scenario))
        return _simulate(scenario, device, trace, StrategyClock(budget), seed=seed, stop_early=stop_early,
                         visual=visual, on_step=on_step)
    if visual is not None or not isolation.AVAILABLE:
        raise ValueError("isolate=True needs os.fork and no visual (rendering runs in this process only)")
    return _run_isolated(scenario, device, budget, seed=seed, stop_early=stop_early, on_step=on_step)


def _simulate(scenario, device, trace, clock, *, seed, stop_early, visual, on_step) -> TrialResult:
    """The trial in this process, its rows into `trace`, its strategy timed by `clock`."""
    dt, n = scenario.world.step, scenario.n_steps
    rng = np.random.default_rng(seed)
    start = scenario.trial.start
    engine = EngineModel(device, step_s=dt, start_angle_rad=start.angle, visual=visual)
    try:
        engine.reset(angle_rad=start.angle, rate_rad_s=start.rate, wheel_speed_rad_s=start.wheel_speed)
        if n > 0:  # where the body starts, recorded even if the strategy cannot be built
            trace.angle[0], trace.rate[0], trace.wheel_angle[0], trace.wheel_speed[0] = engine.read()
        sensors = make_sensors(scenario, step_s=dt, n_ticks=n // scenario.control_steps + 1, rng=rng, seed=seed,
                               trace=trace)
        schedule = None if scenario.timing is None else TickSchedule(
            scenario.timing, control_steps=scenario.control_steps, step_s=dt, rng=stream(seed, TIMING_STREAM), end_step=n)
        return with_strategy(scenario, device, rng, clock, lambda strategy, failure: _loop(
            scenario, device, engine, sensors, trace, strategy, failure, stop_early, on_step, clock, schedule))
    finally:
        engine.close()


def _run_isolated(scenario, device, budget: float, *, seed, stop_early, on_step) -> TrialResult:
    """The trial in a forked child (`sim.core.isolation`): its rows land in a shared trace, the rest of
    its result comes back pickled. A child stuck in strategy code or dead ends as strategy_failed."""
    from .parallel import _warm_imports
    # What a child would otherwise build for itself every time, it inherits: the heavy modules, and
    # an idle engine client holding this device's body (connecting and building cost ~25 ms).
    _warm_imports()
    EngineModel(device, step_s=scenario.world.step, start_angle_rad=scenario.trial.start.angle).close()
    beat = isolation.Heartbeat()
    try:
        trace = _PublishedTrace(scenario.n_steps, step_s=scenario.world.step, beat=beat,
                                extra=trace_columns(scenario))
    except OSError:     # no room for a shared trace, in the temporary folder or in memory: run here
        trace = Trace(scenario.n_steps, step_s=scenario.world.step, extra=trace_columns(scenario))
        return _simulate(scenario, device, trace, StrategyClock(budget), seed=seed, stop_early=stop_early,
                         visual=None, on_step=on_step)
    clock = _WatchedClock(budget, beat)
    return run_watched(
        lambda: _simulate(scenario, device, trace, clock, seed=seed, stop_early=stop_early, visual=None,
                          on_step=on_step),
        trace=trace, clock=clock, scenario=scenario, device=device, on_step=on_step,
        lost_result=lambda lost: _lost_child_result(scenario, device, trace, budget, lost))


def _lost_child_result(scenario, device, trace, budget: float, lost: isolation.LostChild) -> TrialResult:
    """strategy_failed at the step of the lost child's last strategy call, with the conventions of the
    in-process failure: row k holds the state at the failure, the tick's measurements and held mode."""
    dt, cs = scenario.world.step, scenario.control_steps
    building, k = lost.step < 0, max(lost.step, 0)
    message = lost_child_message(lost, budget_s=budget, step_s=dt, control_steps=cs)
    if not building:  # the call never returned: the phase is the one held from the tick before
        trace.mode[k] = trace.mode[k - cs] if k >= cs else 0
    trace.phases = list(lost.phases)
    strategy = isolation.record_from_spec(scenario.strategy, device=device, saturated_ticks=lost.saturated)
    ticks = 0 if building else k // cs + 1
    return _result(scenario, device, trace, strategy, "strategy_failed", message, k, None, None, False,
                   False, ticks, lost.wall_s)


def _loop(scenario, device, engine, sensors, trace, strategy, failure, stop_early, on_step, clock,
          schedule=None) -> TrialResult:
    dt, n, cs = scenario.world.step, scenario.n_steps, scenario.control_steps
    outcome, message = ("strategy_failed", failure) if failure else (None, None)
    reading = Reading()
    release = getattr(getattr(strategy, "params", None), "release_angle", math.pi)
    wants_balance = strategy is not None and strategy.goal == "balance"
    # the supply as the scenario states it: nothing the strategy holds (its `supply_v`, its device)
    supply = float(scenario.drive.supply)
    fallen = None  # the trace's phase code "fallen", once a body has fallen
    chain = PowerChain(scenario, device, step_s=dt) if scenario.power_model else None
    if chain is None:
        motor = MotorDrive(device, step_s=dt)   # today's ideal source
    else:   # battery, PWM, current mode, ...: the same per-step call; the command's limit is the chain's
        motor, supply = chain, chain.command_limit
        applied = np.zeros(n)   # the chain's mean winding voltage per step (the trace's voltage column)
        t_sup, t_bus, t_app = (memoryview(c) for c in (trace.supply_voltage, trace.bus_current, applied))
    if chain is not None and getattr(strategy, "commands_duty", False):
        # a law that writes a PWM duty (firmware) answers in volts at the nominal supply: the duty is
        # that share of it, and acts on the bus as it is (a battery's sag)
        chain.duty_base_v = device.supply_v
    pushes = _push_schedule(scenario, dt, n)
    next_push, push_torque = pushes.pop() if pushes else (-1, 0.0)
    wheel_limit = ABSURD_WHEEL_FACTOR * device.no_load_speed_rad_s + 100.0
    bp, bw = device.pivot_viscous_n_m_s, device.wheel_viscous_n_m_s
    brake_on, open_circuit, volts, mode, phase, name = False, False, 0.0, 0, None, None
    ramp = _brake_ramp(scenario, device, engine, dt)   # None without drive.brake_engage_time
    meas = (0.0, 0.0, 0.0)
    catch_k = fell_k = None
    fall_final = False
    ticks = 0
    # the columns through memoryviews: a Python float in or out costs about half what numpy's
    # item access does, and the loop writes six to eleven values a step (the same memory)
    t_angle, t_rate, t_wangle, t_wspeed = (memoryview(c) for c in (trace.angle, trace.rate, trace.wheel_angle,
                                                                   trace.wheel_speed))
    t_volt, t_cur, t_torq, t_mode = (memoryview(c) for c in (trace.voltage, trace.current, trace.torque, trace.mode))
    t_ma, t_mr, t_mw = (memoryview(c) for c in (trace.meas_angle, trace.meas_rate, trace.meas_wheel))
    read, advance = engine.io()
    reading.supply_v = float(scenario.drive.supply)    # the bus as it stands, per tick through a chain
    command = strategy.command if strategy is not None else None
    if command is not None and hasattr(sensors, "wrap"):
        command = sensors.wrap(command)     # an estimator runs first, in the strategy's time window
    # ticks: every cs steps from 0, each command applied on its tick's step; or, with `timing`,
    # where `schedule` (sim.physics.timing) places them, a command reaching the drive at change_k
    timed = schedule is not None
    tick_k, change_k, pending, tick_rows = (schedule.first(), -1, 0.0, []) if timed else (0, -1, 0.0, None)
    sense, enter, leave, update = sensors.read, clock.enter, clock.leave, motor.update
    # Angles at the instant of their rates. The engine's semi-implicit Euler step moves each angle
    # with the rate at the step's end (w[k+1] = w[k] + a dt, x[k+1] = x[k] + w[k+1] dt), so its
    # angle x[k] = x[0] + dt (w[1] + ... + w[k]) runs half a step ahead of the rate w[k] (which is
    # at t = k dt: the motor's step-mean current gives each step's exact impulse). Recorded, and
    # read by the sensors, is the trapezoid integral of the rates from the start angle, i.e.
    # x[k] - (w[k] - w[0]) dt / 2: row 0 is the start angle exactly.
    half_dt = 0.5 * dt
    thd0, phd0 = (float(trace.rate[0]), float(trace.wheel_speed[0])) if n > 0 else (0.0, 0.0)  # as read at the start
    k = 0
    wall0 = time.perf_counter()
    while k < n and outcome is None:
        th, thd, ph, phd = read()
        t_angle[k], t_rate[k] = th - (thd - thd0) * half_dt, thd
        t_wangle[k], t_wspeed[k] = ph - (phd - phd0) * half_dt, phd
        # written as inside-the-range tests so that NaN fails them too
        if not (-ABSURD_RATE_RAD_S < thd < ABSURD_RATE_RAD_S and -wheel_limit < phd < wheel_limit
                and -ABSURD_ANGLE_RAD < th < ABSURD_ANGLE_RAD):
            outcome, message = "diverged", f"the state became non-finite or absurd at t = {k * dt:.4f} s"
            break
        if k == change_k:
            volts, change_k = pending, -1
        if k == tick_k:
            t = k * dt
            meas = sense(k, t_angle, t_rate, t_wangle, t_wspeed)
            reading.t_s, reading.angle_rad, reading.rate_rad_s, reading.wheel_speed_rad_s = t, meas[0], meas[1], meas[2]
            # the vector form too, so a law written for it reads a one-wheel hinge device as well
            reading.angles_rad, reading.rates_rad_s, reading.wheel_speeds_rad_s = (meas[0],), (meas[1],), (meas[2],)
            if chain is not None:
                reading.supply_v = chain.supply.volts
            ticks += 1
            t_ma[k], t_mr[k], t_mw[k] = meas  # before the call: an isolated child may never come back
            try:
                enter(k)
                held = volts
                volts = command(reading)
                if not -supply <= volts <= supply:  # the drive's limit, whatever the strategy did
                    volts = _drive_limit(volts, supply)
                if strategy.phase != phase:
                    phase = strategy.phase
                    name = str(phase)   # the strategy's own __str__: timed with it
                if strategy.brake != brake_on:
                    brake_on = _set_brake(engine, device, bool(strategy.brake), ramp)
                open_circuit = bool(strategy.open_circuit)
                leave()
            except BaseException as exc:  # noqa: B036 - the strategy's failure is its outcome
                clock.t_in = None       # first, and no call before it: no timeout is raised into the runner now
                if isinstance(exc, KeyboardInterrupt) and clock.user_interrupt:
                    raise               # the user's Ctrl-C, not the strategy's
                message = clock.after(lambda: _describe(exc, t), _describe_unread(exc, t))  # __str__ is theirs
                clock.abandon()
                outcome = "strategy_failed"
                t_mode[k] = mode if name is None else trace.phase_code(name)  # a phase named before the failure
                break
            if name is not None:    # the runner's bookkeeping, not charged to the strategy's budget
                mode, name = trace.phase_code(name), None
            if timed:
                tick_rows.append(k)
                apply_k, tick_k = schedule.after(k)
                if apply_k != k:     # computing: the drive keeps the command in force until apply_k
                    pending, volts, change_k = volts, held, apply_k
            else:
                tick_k += cs
            # held until the next tick: written once here, copied down the tick's rows at the end
            t_volt[k], t_mode[k] = (0.0 if open_circuit else volts), mode
            if wants_balance:
                inside = abs(wrap_angle(th)) <= release
                if strategy.balancing and inside:
                    if catch_k is None and not fall_final:
                        catch_k, fell_k = k, None
                elif catch_k is not None:
                    fell_k, catch_k = k, None
                    # a balance-only law that did not hand over will not catch it again; a swing-up
                    # supervisor sees the angle through its sensors a little later and may catch it again
                    fall_final = strategy.balancing and not getattr(strategy, "swings_up", False)
                    if stop_early and fall_final:
                        outcome = "fell"  # this step still runs; the loop ends after it
                if fell_k is not None and catch_k is None and strategy.balancing:
                    # the law still says "balance", but the body is down: the trace says so
                    fallen = trace.phase_code("fallen") if fallen is None else fallen
                    t_mode[k] = fallen
        if open_circuit:
            if chain is None:
                motor.current, cur, torque = 0.0, 0.0, 0.0
            else:
                cur, torque = chain.float_winding()
        else:
            cur, torque = update(volts, phd)
        if chain is not None:
            t_sup[k], t_bus[k], t_app[k] = chain.bus_v, chain.bus_current_a, chain.applied_v
        pivot_torque = -bp * thd
        if k == next_push:
            pivot_torque += push_torque
            next_push, push_torque = pushes.pop() if pushes else (-1, 0.0)
        if ramp is not None and ramp.active:
            ramp.step()
        advance(pivot_torque, torque - bw * phd)
        t_cur[k], t_torq[k] = cur, torque
        if timed:
            t_volt[k] = 0.0 if open_circuit else volts
        if on_step is not None:
            on_step(k, engine)
        k += 1
    wall = time.perf_counter() - wall0
    power = {} if chain is None else {"power": chain.summary(), "applied": applied}
    return _result(scenario, device, trace, strategy, outcome, message, k, catch_k, fell_k, fall_final,
                   wants_balance, ticks, wall, tick_rows=tick_rows, overruns=schedule.overruns if timed else None,
                   **power)


def _result(scenario, device, trace, strategy, outcome, message, k, catch_k, fell_k, fall_final,
            wants_balance, ticks, wall, *, tick_rows=None, overruns=None, power=None, applied=None) -> TrialResult:
    """Close the trace and judge the outcome. `k` is the step the loop stopped at."""
    dt, n = scenario.world.step, scenario.n_steps
    ended = close_trace(trace, outcome=outcome, k=k, n=n, dt=dt, fell_k=fell_k)
    _hold_tick_values(trace, scenario.control_steps, tick_rows)
    if applied is not None:     # through the power chain: what reached the winding, step by step
        trace.voltage[: trace.n] = applied[: trace.n]
    if outcome in ("diverged", "strategy_failed") and k < n:
        trace.voltage[k] = 0.0  # nothing was applied after the failure
    if outcome is None:
        outcome = _final_outcome(wants_balance, strategy, catch_k, fell_k, fall_final)
    result = TrialResult(
        outcome=outcome, message=message, trace=trace, device=device, scenario=scenario,
        # a body balanced from the first step was never caught: it started inside the catch region
        caught_at_s=catch_k * dt if (catch_k and outcome == "balanced") else None,
        fell_at_s=fell_k * dt if fell_k is not None else None, ended_at_s=ended,
        control_ticks=ticks, saturated_ticks=saturated_ticks(trace, scenario.control_steps,
                                                             supply_ceiling(trace, scenario)),
        wall_s=wall, strategy=strategy, loop_overruns=overruns, power=power,
    )
    result.cause, result.cause_detail = find_cause(result)
    return result


def trace_columns(scenario) -> tuple[str, ...]:
    """The extra trace columns of a scenario: its sensing columns, then the power chain's."""
    return sensing_columns(scenario) + (POWER_CSV_COLUMNS if scenario.power_model else ())


def _hold_tick_values(trace: Trace, cs: int, tick_rows: list[int] | None = None) -> None:
    """Copy each control tick's held values (voltage, mode, measurements, extra columns) down to
    the rows until the next tick: the loop writes them on tick rows only. With `tick_rows` (a
    timed loop: ticks where the schedule put them) the voltage is left as written, every row."""
    # the power chain's columns are written every step: not held
    cols = [trace.mode, trace.meas_angle, trace.meas_rate, trace.meas_wheel,
            *(c for name, c in trace.extra.items() if name not in POWER_CSV_COLUMNS)]
    if tick_rows is None:
        cols.insert(0, trace.voltage)
    rows = held_rows(trace.n, cs, tick_rows)
    for col in cols:
        col[: trace.n] = col[rows]


def _push_schedule(scenario, dt: float, n: int) -> list[tuple[int, float]]:
    """Pushes as (step, torque N m) in reverse time order, to be popped; pushes on one step add up."""
    torques: dict[int, float] = {}
    for p in scenario.trial.pushes:
        k = int(round(p.at / dt))
        torques[k] = torques.get(k, 0.0) + p.impulse / dt
    return sorted(torques.items(), reverse=True)


def _drive_limit(volts, supply_v: float) -> float:
    """A command outside +-supply_v clamped to it, V. A command that is no finite number (possible
    from a strategy that replaces `command`) ends the trial, as the base's own check does."""
    try:
        v = float(volts)
    except (TypeError, ValueError):
        raise StrategyError(f"the strategy's command was {type(volts).__name__}, not a voltage") from None
    if not math.isfinite(v):
        raise StrategyError(f"the strategy's command was a non-finite voltage ({v})")
    return math.copysign(supply_v, v)


def _set_brake(engine, device, on: bool, ramp=None) -> bool:
    if on and device.brake_torque_n_m is None:
        raise StrategyError("the strategy engaged a brake, but the scenario has no drive.brake_torque")
    if ramp is not None:    # an engagement time: the cap rises step by step from the next step
        ramp.set([on])
        return on
    wheel = device.wheel_coulomb_n_m + (device.brake_torque_n_m if on else 0.0)
    engine.set_dry_friction(pivot_n_m=device.pivot_coulomb_n_m, wheel_n_m=wheel)
    return on


def _brake_ramp(scenario, device, engine, dt: float):
    """The brake's engagement ramp (`sim.physics.brake`), or None when the scenario sets no engagement time."""
    engage = scenario.drive.brake_engage_time
    if engage is None:
        return None
    pivot = device.pivot_coulomb_n_m
    return BrakeRamp(brake_n_m=[device.brake_torque_n_m], engage_s=[engage], coulomb_n_m=[device.wheel_coulomb_n_m],
                     step_s=dt, apply=lambda caps: engine.set_dry_friction(pivot_n_m=pivot, wheel_n_m=caps[0]))
