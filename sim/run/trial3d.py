"""The 3D trial runner: one to three wheels, a hinge or ball mount -> trace + outcome.

The loop, per physics step: read the body's attitude and rate and the wheels' states -> (on
control ticks) the sensors, one suite per axis -> the strategy's volts, one per wheel -> each
wheel's drive and motor -> friction and pushes -> engine step. Each wheel's drive is one
`update(volts, wheel_speed) -> (current, torque)` per step: its motor on the ideal source, or, with any
power key, its chain on the bus every wheel shares (`sim.physics.drive.shared_chains`, built in
`_simulate`); the bus steps once the last wheel has, and its columns go into the trace at the end. As on the planar runner, a strategy
that raises, returns nonsense or runs past its time budget, and a state that turns non-finite or
absurd, end the trial with an outcome, never an exception.

Outcomes use `tilt_rad` (the angle between the pivot-to-centre-of-mass line and the vertical; on a
hinge, the body angle from upright about x) against the strategy's release angle: `balanced`,
`fell`, `not_caught`, `diverged`, `strategy_failed`, `completed` (bench strategies), and on the floor
`slipped` (the balancing contact slid more than `floor.slip_limit` from where it was when balancing
began, before any fall; `sim.run.floor_contact`).

A plug-in's trial (or compiled firmware's) runs in a forked child as on the planar runner
(`sim.core.isolation`, `sim.run.trial_isolated`): its rows land in a shared trace, and strategy code
stuck in compiled code or crashing ends as `strategy_failed` with the tick and the signal.

Not yet here (planar runner only): rendering hooks.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np

from ..core import isolation
from ..core.budget import StrategyClock
from ..core.errors import StrategyError
from ..core.frames import matmul, rotation_about_x_y
from ..model.device3d import Device3D
from ..model.floor import start_attitude
from ..physics.engine3d import Engine3D
from ..physics.brake import BrakeRamp
from ..physics.engine_floor import FloorEngine
from ..physics.drive import shared_chains, shared_summary
from ..physics.motor import MotorDrive
from ..physics.sensors import SensorSuite, axes_reader
from ..strategies import plugins_in
from ..strategies.base import Reading
from .floor_contact import FloorWatch, floor_cause
from .metrics3d import saturated_ticks3d
from . import attitude_rows
from .trace3d import Trace3D
from .wheel_steps import command_records, motor_steps, wheel_records
from .trial_common import (TrialResult, close_trace, describe, describe_unread, final_outcome, held_rows,
                           with_strategy)
from .trial_isolated import PublishedTrace3D, WatchedClock, lost_child_message, run_watched

ABSURD_RATE_RAD_S = 1e4          # as the planar runner
ABSURD_WHEEL_FACTOR = 20.0
STRATEGY_BUDGET_S = 60.0


@dataclass
class TrialResult3D(TrialResult):
    """What a 3D trial produced (fields as `sim.run.trial_common.TrialResult`; `is_3d` marks it)."""

    is_3d: bool = True
    floor: dict | None = None   # a body on the floor: `sim.run.floor_contact.FloorWatch.summary`


class _WheelMotor:
    """The figures `MotorDrive` reads, for one wheel: its motor against the inertia it turns
    (the wheel in series with the body about its axis, or on a locked body the wheel alone:
    `Device3D.inertia_seen_by_wheel_kg_m2`)."""

    locked = True   # MotorDrive then takes I_w_kg_m2 as the inertia seen, as given

    def __init__(self, device: Device3D, i: int):
        w = device.wheels[i]
        self.k_e_v_s_rad, self.k_t_n_m_a, self.resistance_ohm = w.k_e_v_s_rad, w.k_t_n_m_a, w.resistance_ohm
        self.inductance_h, self.current_limit_a = w.inductance_h, w.current_limit_a
        self.I_w_kg_m2, self.J_kg_m2 = device.inertia_seen_by_wheel_kg_m2(i), math.inf


def run_trial3d(scenario, *, seed: int | None = None, stop_early: bool | None = None,
                strategy_budget_s: float | None = None, on_step=None, isolate: bool | None = None,
                angle_bias_rad: tuple[float, ...] | None = None) -> TrialResult3D:
    """Simulate one trial of a 3D scenario (`Scenario.is_planar` false).

    `on_step`: optional callable(k, engine) after every engine step (checks and rendering hooks).
    `isolate`: run the trial in a forked child watched by this process, as `sim.run.trial.run_trial`
    does; None (default): exactly when the strategy, or one nested in it, is a plug-in or compiled
    firmware and the platform can fork. The numbers are the same either way.
    `angle_bias_rad`: the angle sensor's bias per tilt axis (x, then y on a ball), rad, in place of
    `sensors.angle.bias` on those axes (check's per-axis bias holds); None keeps the scenario's."""
    device = Device3D.from_scenario(scenario)
    seed = scenario.trial.seed if seed is None else seed
    stop_early = scenario.trial.stop_early if stop_early is None else stop_early
    budget = STRATEGY_BUDGET_S if strategy_budget_s is None else strategy_budget_s
    if isolate is None:
        estimator = scenario.sensors.estimator
        isolate = isolation.AVAILABLE and (bool(plugins_in(scenario.strategy))
                                           or (estimator is not None and estimator.is_plugin))
    if isolate and not isolation.AVAILABLE:
        raise ValueError("isolate=True needs os.fork")
    if not isolate:
        return _simulate(scenario, device, _trace(scenario, device), StrategyClock(budget),
                         seed=seed, stop_early=stop_early, on_step=on_step, angle_bias_rad=angle_bias_rad)
    return _run_isolated(scenario, device, budget, seed=seed, stop_early=stop_early, on_step=on_step,
                         angle_bias_rad=angle_bias_rad)


def _trace(scenario, device: Device3D, **shared) -> Trace3D:
    """The trial's trace; with `beat=` a shared one that publishes its phases (isolated trials)."""
    kind = PublishedTrace3D if shared else Trace3D
    extra = () if scenario.sensors.imu is None else _sensing().sensing_columns3d(scenario, two_tilts=device.mount == "ball")
    return kind(scenario.n_steps, step_s=scenario.world.step, ball=device.mount == "ball",
                n_wheels=device.n_wheels, floor=device.floor is not None, power=scenario.power_model, extra=extra,
                **shared)


def _sensing():
    """The IMU's module, imported when a scenario has one (a trial without it never loads it)."""
    from ..physics import imu_sensing3d
    return imu_sensing3d


def _simulate(scenario, device, trace, clock, *, seed, stop_early, on_step, angle_bias_rad=None) -> TrialResult3D:
    """The trial in this process, its rows into `trace`, its strategy timed by `clock`."""
    dt, n = scenario.world.step, scenario.n_steps
    rng = np.random.default_rng(seed)
    ball = device.mount == "ball"
    if device.floor is not None:
        engine = FloorEngine(device, step_s=dt)
    else:
        engine = Engine3D(device, step_s=dt, attitude=_held_attitude(scenario, device) if device.locked else None)
    try:
        _reset(engine, scenario, device)
        n_suites = max(3 if ball else 1, device.n_wheels)
        sensors = scenario.sensors
        if sensors.angle is None:   # an IMU-only device: the suites still draw their noise (the estimate replaces it)
            from ..model.scenario import AngleSensor
            sensors = sensors.model_copy(update={"angle": AngleSensor()})
        suites = [SensorSuite(sensors, step_s=dt, n_ticks=n // scenario.control_steps + 1, rng=rng)
                  for _ in range(n_suites)]
        imu = schedule = None
        if sensors.imu is not None:   # the IMU and the estimator (`sim.physics.imu_sensing3d`)
            imu = _sensing().ImuSensing3D(scenario, device, trace, step_s=dt, seed=seed, n_tilts=2 if ball else 1,
                                          n_rates=3 if ball else 1,
                                          tilt_bias_rad=angle_bias_rad if sensors.estimator is not None else None)
        if sensors.imu is None or sensors.estimator is None:
            for suite, bias in zip(suites, angle_bias_rad or ()):
                suite.angle_bias = float(bias)
        if scenario.timing is not None:
            from ..physics.imu_sensing import TIMING_STREAM, stream
            from ..physics.timing import TickSchedule
            schedule = TickSchedule(scenario.timing, control_steps=scenario.control_steps, step_s=dt,
                                    rng=stream(seed, TIMING_STREAM), end_step=n)
        return with_strategy(scenario, device, rng, clock, lambda strategy, failure: _loop(
            scenario, device, engine, suites, trace, strategy, failure, stop_early, clock, on_step, imu, schedule,
            power=_power_chains(scenario, device, strategy, dt, n), limits=_command_limits(scenario, device)))
    finally:
        engine.close()


def _power_chains(scenario, device: Device3D, strategy, dt: float, n: int):
    """(bus, one chain per wheel) through the power chain (`sim.physics.drive.shared_chains`: one pack
    or bench supply shared by every wheel's bridge), or None without a power key (today's ideal source)."""
    if not scenario.power_model:
        return None
    bus, chains = shared_chains(scenario, [_WheelMotor(device, i) for i in range(device.n_wheels)],
                                step_s=dt, record_steps=n)
    if strategy is not None and getattr(strategy, "commands_duty", False):
        for chain in chains:    # a law writing PWM duties answers in volts at the nominal supply (as on one wheel)
            chain.duty_base_v = device.supply_v
    return bus, chains


def _command_limits(scenario, device: Device3D) -> tuple[float, ...]:
    """Each wheel's command clamp: the supply, V, or with `drive.mode: current` its drive's current
    limit, A (the current limit, or the stall current at the supply when lower: `WheelUnit.command_limit`,
    as the one-wheel runner clamps to `PowerChain.command_limit`)."""
    if scenario.drive.mode == "current":
        return tuple(w.command_limit("current") for w in device.wheels)
    return (float(scenario.drive.supply),) * device.n_wheels


def _run_isolated(scenario, device, budget: float, *, seed, stop_early, on_step, angle_bias_rad=None) -> TrialResult3D:
    """The trial in a forked child (`sim.core.isolation`): its rows land in a shared trace, the rest of
    its result comes back pickled. A child stuck in strategy code or dead ends as strategy_failed."""
    from .parallel import _warm_imports
    _warm_imports()      # the heavy modules, inherited by the child instead of imported there
    beat = isolation.Heartbeat()
    try:
        trace = _trace(scenario, device, beat=beat)
    except OSError:     # no room for a shared trace, in the temporary folder or in memory: run here
        return _simulate(scenario, device, _trace(scenario, device), StrategyClock(budget),
                         seed=seed, stop_early=stop_early, on_step=on_step, angle_bias_rad=angle_bias_rad)
    clock = WatchedClock(budget, beat)
    return run_watched(
        lambda: _simulate(scenario, device, trace, clock, seed=seed, stop_early=stop_early, on_step=on_step,
                          angle_bias_rad=angle_bias_rad),
        trace=trace, clock=clock, scenario=scenario, device=device, on_step=on_step,
        lost_result=lambda lost: _lost_child_result(scenario, device, trace, budget, lost))


def _lost_child_result(scenario, device, trace, budget: float, lost: isolation.LostChild) -> TrialResult3D:
    """strategy_failed at the step of the lost child's last strategy call, with the conventions of the
    in-process failure: row k holds the state at the failure, the tick's measurements and held mode.
    The saturated ticks are counted again from the shared trace's commands (the child's count is lost)."""
    cs = scenario.control_steps
    building, k = lost.step < 0, max(lost.step, 0)
    message = lost_child_message(lost, budget_s=budget, step_s=scenario.world.step, control_steps=cs)
    if not building:  # the call never returned: the phase is the one held from the tick before
        trace.mode[k] = trace.mode[k - cs] if k >= cs else 0
    trace.phases = list(lost.phases)
    strategy = isolation.record_from_spec(scenario.strategy, device=device, saturated_ticks=lost.saturated)
    ticks = 0 if building else k // cs + 1
    rows = np.arange(0, k, cs)
    volts = np.array([getattr(trace, f"w{i}_voltage")[rows] for i in range(1, device.n_wheels + 1)])
    at_supply = float(scenario.drive.supply) * (1.0 - 1e-9)
    saturated = int(np.any(np.abs(volts) >= at_supply, axis=0).sum()) if rows.size else 0
    if scenario.drive.mode == "current":
        saturated = 0    # the bridges' applied voltages, which current mode counts by, died with the child
    return _result(scenario, device, trace, strategy, "strategy_failed", message, k, None, None, False,
                   ticks, saturated, lost.wall_s)


def _reset(engine: Engine3D, scenario, device: Device3D) -> None:
    start = scenario.trial.start
    speeds = start.wheel_speed if isinstance(start.wheel_speed, list) else [start.wheel_speed] * device.n_wheels
    r0 = device.upright()
    if device.floor is not None:
        attitude, rate = start_attitude(scenario, device)
        engine.reset(attitude=attitude, rate_world=rate, wheel_speeds_rad_s=speeds)
    elif device.mount == "ball":
        tx, ty = start.tilt if start.tilt is not None else (0.0, 0.0)
        rx, ry = start.tilt_rate if start.tilt_rate is not None else (0.0, 0.0)
        engine.reset(attitude=matmul(rotation_about_x_y(tx, ty), r0), rate_world=(rx, ry, 0.0),
                     wheel_speeds_rad_s=speeds)
    else:
        a0 = math.atan2(r0[2][1], r0[2][2])
        engine.reset(attitude=None, hinge_angle_rad=start.angle + a0, hinge_rate_rad_s=start.rate,
                     wheel_speeds_rad_s=speeds)


def _held_attitude(scenario, device: Device3D) -> tuple[tuple[float, float, float], ...]:
    """R_wb a locked body (`body.locked`) is held at: its start attitude, as `_reset` would set it."""
    start, r0 = scenario.trial.start, device.upright()
    if device.mount == "ball":
        return matmul(rotation_about_x_y(*(start.tilt if start.tilt is not None else (0.0, 0.0))), r0)
    return rotation_about_x_y(start.angle + math.atan2(r0[2][1], r0[2][2]), 0.0)


def _push_schedule(scenario, dt: float) -> list[tuple[int, tuple[float, float, float]]]:
    """Pushes as (step, world torque N m) in reverse time order; a number is about world x."""
    torques: dict[int, np.ndarray] = {}
    for p in scenario.trial.pushes:
        k = int(round(p.at / dt))
        vec = np.array(p.impulse if isinstance(p.impulse, tuple) else (p.impulse, 0.0, 0.0)) / dt
        torques[k] = torques.get(k, np.zeros(3)) + vec
    return sorted(((k, tuple(float(x) for x in v)) for k, v in torques.items()), reverse=True)


def _loop(scenario, device, engine, suites, trace, strategy, failure, stop_early, clock, on_step,
          imu=None, schedule=None, power=None, limits=None) -> TrialResult3D:
    dt, n, cs = scenario.world.step, scenario.n_steps, scenario.control_steps
    outcome, message = ("strategy_failed", failure) if failure else (None, None)
    ball, nw = device.mount == "ball", device.n_wheels
    wheels = range(nw)
    reading = Reading()
    release = getattr(getattr(strategy, "params", None), "release_angle", math.pi)
    wants_balance = strategy is not None and strategy.goal == "balance"
    again = bool(getattr(strategy, "swings_up", False))   # a law that can get the body up again after a fall
    supply = float(scenario.drive.supply)
    limits = limits or (supply,) * nw     # each wheel's command clamp (amps in current mode)
    cap = limits[0] if max(limits) == min(limits) else None   # one clamp for every wheel (the common case)
    # each wheel's per-step call: its motor on the ideal source, or its chain on the shared bus (`power`)
    motors = power[1] if power else [MotorDrive(_WheelMotor(device, i), step_s=dt) for i in wheels]
    updates = [m.update for m in motors]
    floats = [m.float_winding for m in motors] if power else [_open_winding(m) for m in motors]
    bus_supply = power[0].supply if power else None
    reading.supply_v = supply
    pushes = _push_schedule(scenario, dt)
    next_push, push_torque = pushes.pop() if pushes else (-1, None)
    wheel_limit = [ABSURD_WHEEL_FACTOR * w.no_load_speed_rad_s + 100.0 for w in device.wheels]
    bw = [w.viscous_n_m_s for w in device.wheels]
    volts, mode, phase, name, brake_on, open_circuit = (0.0,) * nw, 0, None, None, False, False
    ramp = _brake_ramp(scenario, device, engine, dt)   # None without a brake engagement time
    catch_k = fell_k = None
    ticks = saturated = 0
    at_supply = supply * (1.0 - 1e-9)
    # the columns through memoryviews: a Python float in or out costs about half numpy's item access
    col = {a: memoryview(getattr(trace, a)) for a in trace.FLOAT_COLUMNS}
    tilt_c, tx_c, rx_c = col["tilt"], col["tilt_x"], col["rate_x"]
    ty_c, hd_c, ry_c, rz_c = (col.get(a) for a in ("tilt_y", "heading", "rate_y", "rate_z"))
    ws_c, wa_c, v_c, i_c, tq_c = ([col[f"w{i}_{q}"] for i in range(1, nw + 1)]
                                  for q in ("speed", "angle", "voltage", "current", "torque"))
    n_angles, n_rates = (2, 3) if ball else (1, 1)
    # the measured columns in the order of a tick's readings (angles, rates, wheel speeds): the reader writes them
    measured_cols = ([col["m_tilt_x"]] + ([col["m_tilt_y"]] if ball else []) + [col["m_rate_x"]]
                     + ([col["m_rate_y"], col["m_rate_z"]] if ball else []) + [col[f"m_w{i}"] for i in range(1, nw + 1)])
    zeros = memoryview(np.zeros(max(n, 1)))
    # each wheel's per-step records, checks and motor steps, written out for this many wheels
    record = wheel_records(speed_limits_rad_s=wheel_limit, angle_columns=wa_c, speed_columns=ws_c)
    record_commands = command_records(at_supply_v=at_supply, voltage_columns=v_c)
    drive = None if power else motor_steps(motors, viscous_n_m_s=bw, current_columns=i_c, torque_columns=tq_c)
    mode_c = memoryview(trace.mode)       # an int16 column: a Python int in costs less than numpy's item store
    # each sensor suite reads one angle, one rate and one wheel (sensors.py applies its noise, bias,
    # delay and quantisation per axis); suites past the axes or wheels read zeros for those
    sense_angle = [tx_c] + ([ty_c, hd_c] if ball else [])
    sense_rate = [rx_c] + ([ry_c, rz_c] if ball else [])
    read_axes = axes_reader(suites, [(sense_angle[j] if j < len(sense_angle) else zeros,
                                      sense_rate[j] if j < len(sense_rate) else zeros, wa_c[j] if j < nw else zeros,
                                      ws_c[j] if j < nw else zeros) for j in range(len(suites))],
                            used=(n_angles, n_rates, nw), record=measured_cols)
    # a free ball keeps the rows its loop does not need raw until the loop ends (`attitude_rows`)
    lazy = None
    if ball and attitude_rows.wanted(engine=engine, imu=imu, suites=suites, shared=isinstance(trace, PublishedTrace3D)):
        lazy = attitude_rows.LazyAttitude(trace, engine.attitude_map)
        io = engine.raw_io()
        done, row, work_out = lazy.done, engine.attitude_map.row, lazy.work_out
        delay = suites[0].delay_steps
        calm = (0.5 * ABSURD_RATE_RAD_S) ** 2   # |body rate|^2 below which no axis's rate can be absurd
    else:
        io = engine.io()
    read, advance = io[0], io[1]
    watch = FloorWatch(io[2], trace, device.floor, stop_early) if len(io) > 2 else None
    see = watch.stepper() if watch is not None else None
    command = strategy.command_vector if strategy is not None else None
    if imu is not None and command is not None:
        command = imu.wrap(command)     # the IMU and its estimator first, in the strategy's time window
    # ticks every cs steps from 0, each command applied on its tick's step; or, with `timing`, where
    # `schedule` (sim.physics.timing) places them, a command reaching the drives at change_k
    timed = schedule is not None
    tick_k, change_k, pending, tick_rows = (schedule.first(), -1, None, []) if timed else (0, -1, None, None)
    lim = ABSURD_RATE_RAD_S
    need_k = max(tick_k - delay, 0) if lazy is not None else -1    # the next row the sensors will read
    k = 0
    wall0 = time.perf_counter()
    while k < n and outcome is None:
        if lazy is None:
            tx, ty, hd, tilt, rate, wang, wspd = read()
            wx, wy, wz = rate
            tilt_c[k], tx_c[k], rx_c[k] = tilt, tx, wx
            if ball:
                ty_c[k], hd_c[k], ry_c[k], rz_c[k] = ty, hd, wy, wz
            elif ty_c is not None:   # a floor body on its edge: free in 3D, its whole attitude recorded
                ty_c[k], hd_c[k] = ty, hd
                if ry_c is not None:     # and with an IMU its whole rate
                    ry_c[k], rz_c[k] = wy, wz
            bad = not (-lim < wx < lim and -lim < wy < lim and -lim < wz < lim and tilt == tilt)
        else:
            (qx, qy, qz, qw), (u0, u1, u2), wang, wspd = read()
            if (k == tick_k or k == need_k
                    or not (u0 * u0 + u1 * u1 + u2 * u2 < calm and 0.5 < qx * qx + qy * qy + qz * qz + qw * qw < 2.0)):
                # a tick's row (its tilt is judged), a row the sensors will read, or a fast or odd state
                # (judged on its worked-out rates)
                tx, ty, hd, tilt, (wx, wy, wz) = row(qx, qy, qz, qw, u0, u1, u2)
                tilt_c[k], tx_c[k], ty_c[k], hd_c[k], rx_c[k], ry_c[k], rz_c[k] = tilt, tx, ty, hd, wx, wy, wz
                done[k] = 1
                bad = not (-lim < wx < lim and -lim < wy < lim and -lim < wz < lim and tilt == tilt)
            else:       # raw until the loop ends (no rate can be absurd, the quaternion is finite)
                tilt_c[k], tx_c[k], ty_c[k], hd_c[k], rx_c[k], ry_c[k], rz_c[k] = qx, qy, qz, qw, u0, u1, u2
                bad = False
        if not record(k, wang, wspd):
            bad = True
        if bad:
            if fell_k is not None and catch_k is None:   # after a fall: the fall stays the outcome, its cause found
                outcome, message = "fell", (f"after the fall the simulated motion became non-finite or absurd at "
                                            f"t = {k * dt:.4f} s (a body tumbling with its wheels spinning); "
                                            "the trace ends there")
            else:
                outcome, message = "diverged", f"the state became non-finite or absurd at t = {k * dt:.4f} s"
            break
        if see is not None and see(k, catch_k is not None) and outcome is None:
            outcome = "slipped"   # with stop_early; this step still runs, as a fall's does
        if k == change_k:
            volts, change_k = pending, -1
        if k == tick_k:
            if lazy is not None:
                j = k - delay if k > delay else 0
                if not done[j]:     # a row already passed raw (a delay past a control period)
                    work_out(j)
            t = k * dt
            angles, rates, speeds = read_axes(k)
            reading.t_s, reading.angles_rad, reading.rates_rad_s, reading.wheel_speeds_rad_s = t, angles, rates, speeds
            reading.angle_rad, reading.rate_rad_s, reading.wheel_speed_rad_s = angles[0], rates[0], speeds[0]
            if bus_supply is not None:
                reading.supply_v = bus_supply.volts
            ticks += 1
            try:
                clock.enter(k)
                held = volts
                volts = command(reading, nw)
                if cap is None:     # wheels with different limits (current mode, a wheel's own motor)
                    if not all(-c <= v <= c for v, c in zip(volts, limits)):
                        volts = tuple(v if -c <= v <= c else math.copysign(c, v) for v, c in zip(volts, limits))
                else:
                    for v in volts:     # the drive's limit, whatever the law did
                        if not -cap <= v <= cap:
                            volts = tuple(v if -cap <= v <= cap else math.copysign(cap, v) for v in volts)
                            break
                if strategy.phase != phase:
                    phase = strategy.phase
                    name = str(phase)
                if strategy.brake != brake_on:
                    brake_on = _set_brake(engine, device, strategy.brake, ramp)
                open_circuit = bool(strategy.open_circuit)
                clock.leave()
            except BaseException as exc:  # noqa: B036 - the strategy's failure is its outcome
                clock.t_in = None
                if isinstance(exc, KeyboardInterrupt) and clock.user_interrupt:
                    raise
                message = clock.after(lambda: describe(exc, t), describe_unread(exc, t))
                clock.abandon()
                outcome = "strategy_failed"
                trace.mode[k] = mode if name is None else trace.phase_code(name)
                break
            if name is not None:
                mode, name = trace.phase_code(name), None
            mode_c[k] = mode
            if record_commands(k, volts, open_circuit):   # the tick counts once if any wheel is at the supply
                saturated += 1
            if timed:
                tick_rows.append(k)
                apply_k, tick_k = schedule.after(k)
                if apply_k != k:     # computing: the drives keep the command in force until apply_k
                    pending, volts, change_k = volts, held, apply_k
            else:
                tick_k += cs
            if lazy is not None:
                need_k = tick_k - delay
            if wants_balance:   # once fallen, the body stays fallen, unless the law gets it up again (a jump)
                if tilt <= release and strategy.balancing:
                    if catch_k is None and (fell_k is None or again):
                        catch_k, fell_k = k, None
                elif catch_k is not None:
                    fell_k, catch_k = k, None
                    outcome = "fell" if stop_early and not again else None   # with stop_early this step still runs
        if open_circuit:
            for i in wheels:
                i_c[i][k], tq_c[i][k] = floats[i]()
            net = [-b * s for b, s in zip(bw, wspd)]
        elif drive is not None:
            net = drive(k, volts, wspd)
        else:
            net = []
            for update, v, s, c_col, t_col, b in zip(updates, volts, wspd, i_c, tq_c, bw):
                cur, torque = update(v, s)
                c_col[k], t_col[k] = cur, torque
                net.append(torque - b * s)
        if timed:   # the voltage in force on every step (a command reaches the drives after its tick)
            for i in wheels:
                v_c[i][k] = 0.0 if open_circuit else volts[i]
        if ramp is not None and ramp.active:
            ramp.step()
        if k == next_push:   # a push's torque on its step
            advance(push_torque, net)
            next_push, push_torque = pushes.pop() if pushes else (-1, None)
        else:
            advance(None, net)
        if on_step is not None:
            on_step(k, engine)
        k += 1
    if lazy is not None:
        lazy.finish(k + 1)      # rows 0..k (a stopped loop's last row included)
    wall = time.perf_counter() - wall0
    if watch is not None:
        outcome = watch.outcome(outcome, fell_k)
    result = _result(scenario, device, trace, strategy, outcome, message, k, catch_k, fell_k, wants_balance,
                     ticks, saturated, wall, tick_rows=tick_rows, power=power)
    if timed:
        result.loop_overruns = schedule.overruns
    if watch is not None:
        result.floor = watch.summary(engine, dt)
        result.cause, result.cause_detail = floor_cause(result) or (result.cause, result.cause_detail)
    return result

def _result(scenario, device, trace, strategy, outcome, message, k, catch_k, fell_k, wants_balance,
            ticks, saturated, wall, tick_rows=None, power=None) -> TrialResult3D:
    """Close the trace, zero the voltages after a failure's row, judge the outcome and its cause.
    `power`: (bus, chains) of a trial through the power chain: its columns go into the trace."""
    ended = close_trace(trace, outcome=outcome, k=k, n=scenario.n_steps, dt=scenario.world.step,
                        fell_k=fell_k if outcome != "slipped" else None)
    _hold_tick_values(trace, scenario.control_steps, tick_rows)
    if power:
        _power_columns(trace, power[0])
        if scenario.drive.mode == "current":   # as on one wheel: ticks whose bridge ran out of bus voltage
            saturated = saturated_ticks3d(trace, device, trace.n, scenario.control_steps, scenario)
    if outcome in ("diverged", "strategy_failed") and k < scenario.n_steps:
        for i in range(1, device.n_wheels + 1):
            getattr(trace, f"w{i}_voltage")[k] = 0.0
    outcome = outcome or final_outcome(wants_balance, strategy, catch_k, fell_k, None)
    dt = scenario.world.step
    result = TrialResult3D(
        outcome=outcome, message=message, trace=trace, device=device, scenario=scenario,
        caught_at_s=catch_k * dt if (catch_k and outcome == "balanced") else None,
        fell_at_s=fell_k * dt if fell_k is not None else None, ended_at_s=ended,
        control_ticks=ticks, saturated_ticks=saturated, wall_s=wall, strategy=strategy,
        power=shared_summary(*power) if power else None)
    from .causes3d import find_cause3d
    result.cause, result.cause_detail = find_cause3d(result)
    return result


def _power_columns(trace: Trace3D, bus) -> None:
    """The bus's columns into the trace, and each wheel's applied voltage in place of its command (a
    bridge's mean voltage over the step, as the one-wheel trace records through the power chain)."""
    n = trace.n
    cols = bus.columns
    trace.bus_volts[:n], trace.bus_amps[:n] = cols["supply_voltage_v"][:n], cols["bus_current_a"][:n]
    for i, applied in enumerate(cols["applied_v"], start=1):
        getattr(trace, f"w{i}_voltage")[:n] = applied[:n]


def _open_winding(motor: MotorDrive):
    """A strategy's `open_circuit` for a motor on the ideal source: no current, no torque."""
    def step() -> tuple[float, float]:
        motor.current = 0.0
        return 0.0, 0.0
    return step


def _hold_tick_values(trace: Trace3D, cs: int, tick_rows: list[int] | None = None) -> None:
    """Copy each control tick's held values (voltages, mode, measurements, IMU samples and estimates)
    down to the rows until the next tick. With `tick_rows` (a timed loop: ticks where the schedule put
    them) the voltages are left as written, every row (`sim.run.trial._hold_tick_values`'s rule)."""
    held = [a for a in trace.FLOAT_COLUMNS
            if a.startswith(("m_", "imu_", "estimated_")) or (tick_rows is None and a.endswith("_voltage"))]
    rows = held_rows(trace.n, cs, tick_rows)
    for col in [getattr(trace, a) for a in held] + [trace.mode]:
        col[: trace.n] = col[rows]


def _set_brake(engine: Engine3D, device: Device3D, on, ramp=None):
    """Engage or release the brakes: `on` a truth value for every wheel with a brake_torque, or a
    sequence of one flag per wheel (a wheel flagged needs its brake_torque). Returns `on` as given."""
    if isinstance(on, (tuple, list)):
        flags = [bool(f) for f in on]
        if len(flags) != device.n_wheels:
            raise StrategyError(f"the strategy's brake gave {len(flags)} flags for {device.n_wheels} wheels")
        if any(f and w.brake_torque_n_m is None for f, w in zip(flags, device.wheels)):
            raise StrategyError("the strategy engaged a wheel's brake, but that wheel has no brake_torque")
    else:
        flags = [bool(on)] * device.n_wheels
        if on and all(w.brake_torque_n_m is None for w in device.wheels):
            raise StrategyError("the strategy engaged a brake, but no wheel has a brake_torque")
    if ramp is not None:    # an engagement time: the caps of newly engaged wheels rise step by step
        ramp.set(flags)
        return on
    engine.set_dry_friction([w.coulomb_n_m + ((w.brake_torque_n_m or 0.0) if f else 0.0)
                             for f, w in zip(flags, device.wheels)])
    return on


def _brake_ramp(scenario, device: Device3D, engine: Engine3D, dt: float):
    """The brakes' engagement ramp (`sim.physics.brake`), or None when no wheel has an engagement time."""
    times = scenario.brake_engage_times()
    if all(t is None for t in times):
        return None
    return BrakeRamp(brake_n_m=[w.brake_torque_n_m for w in device.wheels], engage_s=times,
                     coulomb_n_m=[w.coulomb_n_m for w in device.wheels], step_s=dt, apply=engine.set_dry_friction)
