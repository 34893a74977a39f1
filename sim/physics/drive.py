"""The power chain as built: supply (battery or bench) -> bridge (PWM, reversal delay, trips) ->
motor, composed into one object with MotorDrive's per-step call.

`PowerChain.update(command, wheel_speed_rad_s) -> (current A, torque N m)`, once per physics step:
    command: volts across the winding (drive.mode voltage) or amps in the winding (drive.mode current),
    sign as in `sim.model.scenario` (positive accelerates the wheel the positive way).
After the call `bus_v` (V, the bus at the step's start), `bus_current_a` (A, mean over the step,
negative when regenerating) and `applied_v` (V, the mean voltage across the winding) describe the step.

Order within a step: protections (a tripped, cut-off or over-volted driver applies nothing: the
bridge is off and the winding open, its current dropped at once) -> reversal delay (a command whose
sign differs from the bridge's direction is held at zero for `reversal_delay`, then the bridge turns
round) -> voltage mode: duty = command / V_bus, clamped to +-1, through the PWM model
(`sim.physics.pwm`), then today's exact motor step (`sim.physics.motor.MotorDrive`) at that mean
voltage; current mode: the command (clamped to the current limit) filtered by a first-order current
loop of bandwidth f_bw (time constant 1/(2 pi f_bw), references.md; the loop hides the winding's own
L/R, which must be faster), the voltage it needs R i + k_e w capped by the bus (less the dead-time
loss), where back-EMF caps the current -> the bus current d i (average H-bridge model,
references.md: ripple neglected) -> the supply's step (`sim.physics.battery`) -> the over-current
trip and the winding's temperature (when coupled).

Protections (our model of what drivers commonly do; no source): the over-current trip fires when
|i| stays above `trip.current` for `trip.time` and switches the bridge off for `trip.recovery` (or for
the rest of the trial without one); the low-voltage cut-off fires when the bus falls below the
pack's cut-off and stays off for the rest of the trial; the bus over-voltage protection fires when
the bus rises above `drive.max_bus_voltage` and stays off for the rest of the trial. `events` lists
them as (time s, code) with code in `battery_cutoff`, `driver_tripped`, `bus_over_voltage`.

With `motor.curve` the voltage-mode motor follows the datasheet's torque-speed curve instead
(`sim.physics.curve`: quasi-static, the winding's lag and the step-mean solution left out).

Coupled thermal: the winding's temperature follows C dT/dt = i^2 R - (T - T_amb)/R_th and its
resistance R = R_20 (1 + alpha (T - 20 degC)), alpha = 0.00393 /K for copper [pub: CRC Handbook of
Chemistry and Physics, resistivity of copper; from memory]; the motor's step coefficients are
re-solved whenever R has moved 0.5 % since they were last solved.

Several wheels on one pack (a 3D device): one `SharedBus` (the supply, its capacitance, the
low-voltage cut-off and the over-voltage protection) and one `PowerChain` per wheel (its bridge and
motor) on it, each with the same per-step call. Every bridge works from the bus as it stood at the
step's start; the bus takes the sum of the bridges' bus currents once the last of them has stepped
(Kirchhoff's current law at the bus node: the bus current is the sum of the branch currents). A
cut-off or an over-voltage switches every bridge off; a trip only its own. One wheel owns its bus
alone (`PowerChain(..., bus=None)`), which is today's chain step for step.
"""

from __future__ import annotations

import math

from ..model.device import Device
from .battery import Battery, BenchSupply
from .motor import MotorDrive

COPPER_ALPHA_PER_K = 0.00393
RESOLVE_SHARE = 0.005   # re-solve the motor step when R has moved this share


def _with_resistance(figures, r: float):
    """The motor's figures with the winding resistance `r` (ohm): a frozen dataclass replaced, other
    figure objects (a 3D wheel's) copied."""
    import copy
    from dataclasses import is_dataclass, replace
    if is_dataclass(figures):
        return replace(figures, resistance_ohm=r)
    out = copy.copy(figures)
    out.resistance_ohm = r
    return out


class SharedBus:
    """The supply side of one or several bridges: the pack or bench supply with its bus capacitance,
    the bus's extremes and its protections (low-voltage cut-off, over-voltage). Inputs per physics
    step: each bridge's mean bus current, A (`take`, once per bridge per step); out: `supply.volts`, the bus, V, for the next
    step; `dead` once a protection has switched every bridge off for the rest of the trial.

    With `n_bridges` above one (or `shared`) the bus steps when the last bridge has taken its share: it draws the
    sum of their bus currents (the bus node's current balance) and, with `record(n)` called, writes
    the bus voltage at each step's start, the total bus current and each bridge's applied voltage
    into arrays of n rows (`columns`)."""

    def __init__(self, scenario, *, step_s: float, n_bridges: int = 1, shared: bool = False):
        drive, bat = scenario.drive, scenario.battery
        if bat is not None:
            r = bat.internal_resistance if bat.internal_resistance is not None else bat.cell_resistance * bat.cells
            self.supply = Battery(chemistry=bat.chemistry, cells=bat.cells, capacity_c=bat.capacity,
                                  resistance_ohm=r, soc=bat.state_of_charge, capacitance_f=drive.bus_capacitance)
            self.cutoff_v = bat.cells * bat.cutoff_per_cell
        else:
            self.supply = BenchSupply(volts=drive.supply, capacitance_f=drive.bus_capacitance)
            self.cutoff_v = -math.inf
        self.max_bus_v = drive.max_bus_voltage if drive.max_bus_voltage is not None else math.inf
        self.dt = step_s
        self.bridges: list[PowerChain] = []
        self.dead = False
        self.events: list[tuple[float, str]] = []
        self.min_bus_v = self.peak_bus_v = self.supply.volts
        self.steps = 0
        self.bus_current_a = 0.0
        self._n, self._sum, self._taken = n_bridges, 0.0, 0
        self._cols = None
        self.take = self._take_many if shared or n_bridges > 1 else self._take_one

    def record(self, n: int) -> None:
        """Keep the bus voltage, the bus current and each bridge's applied voltage for `n` steps."""
        import numpy as np
        self.columns = {"supply_voltage_v": np.zeros(n), "bus_current_a": np.zeros(n),
                        "applied_v": [np.zeros(n) for _ in range(self._n)]}
        self._cols = (memoryview(self.columns["supply_voltage_v"]), memoryview(self.columns["bus_current_a"]),
                      [memoryview(c) for c in self.columns["applied_v"]])

    def _take_one(self, bus_current_a: float, settle: bool = False) -> None:
        """The bus's step with one bridge on it: draw, then check a new extreme against the limits
        (`settle`: check whatever the voltage, as after a step with the bridge off)."""
        supply = self.supply
        supply.draw(bus_current_a, self.dt)
        self.steps += 1
        if settle:
            self.track()
            return
        v = supply.volts
        if v < self.min_bus_v:       # a new extreme: maybe past a limit
            self.min_bus_v = v
            if v < self.cutoff_v:
                self.track()
        elif v > self.peak_bus_v:
            self.peak_bus_v = v
            if v > self.max_bus_v:
                self.track()

    def _take_many(self, bus_current_a: float, settle: bool = False) -> None:
        self._sum += bus_current_a
        self._taken += 1
        if self._taken < self._n:
            return
        total, self._sum, self._taken = self._sum, 0.0, 0
        supply = self.supply
        if self._cols is not None:
            k = self.steps
            v_col, i_col, applied = self._cols
            v_col[k], i_col[k] = supply.volts, total
            for col, bridge in zip(applied, self.bridges):
                col[k] = bridge.applied_v
        self.bus_current_a = total
        supply.draw(total, self.dt)
        self.steps += 1
        self.track()

    def track(self) -> None:
        """The bus's extremes, and its protections: below the cut-off or above the over-voltage limit
        every bridge switches off for good (nothing new is recorded once every bridge is off for good)."""
        v = self.supply.volts
        if v < self.min_bus_v:
            self.min_bus_v = v
        if v > self.peak_bus_v:
            self.peak_bus_v = v
        if self.dead or not (v < self.cutoff_v or v > self.max_bus_v):
            return
        if all(b.off_until == math.inf for b in self.bridges):
            return
        self.events.append((self.steps * self.dt, "battery_cutoff" if v < self.cutoff_v else "bus_over_voltage"))
        self.dead = True

    def summary(self) -> dict:
        """The bus's figures (SI; keys carry units), as `PowerChain.summary` starts."""
        s = self.supply
        return {
            "min_supply_voltage_v": self.min_bus_v,
            "peak_supply_voltage_v": self.peak_bus_v,
            "charge_used_mah": s.charge_used_c / 3.6,
            "battery_state_of_charge_end": s.soc if isinstance(s, Battery) else None,
        }


class PowerChain:
    """The supply, the bridge and the motor of one wheel (see the module docstring)."""

    def __init__(self, scenario, device: Device, *, step_s: float, motor=None, bus: "SharedBus | None" = None):
        """`device`: the motor's figures (a `Device`, or one wheel's figures with the same names);
        `motor`: that wheel's `motor` section (default the scenario's); `bus`: a bus shared with other
        wheels' chains (default: a bus of its own, the one-wheel chain)."""
        drive = scenario.drive
        motor = scenario.motor if motor is None else motor
        # None: a voltage command is turned into a duty by the bus as it is (a law that knows its
        # bus); a voltage, V: by this fixed voltage instead (a law that writes a PWM duty, stated as
        # volts at the nominal supply: duty = command / duty_base_v, whatever the bus does)
        self.duty_base_v: float | None = None
        self.device = device
        self.dt = step_s
        self.motor = MotorDrive(device, step_s=step_s)
        self.current_mode = drive.mode == "current"
        self.owns_bus = bus is None
        self.bus = bus = SharedBus(scenario, step_s=step_s) if bus is None else bus
        bus.bridges.append(self)
        self.supply = bus.supply
        self.pwm = None
        self.dead_loss = 0.0
        if drive.pwm is not None and drive.pwm.frequency is not None:
            from .pwm import Pwm
            p = drive.pwm
            self.pwm = Pwm(resolution_bits=p.resolution_bits, frequency_hz=p.frequency, dead_time_s=p.dead_time,
                           min_duty=p.min_duty)
            self.dead_loss = self.pwm.loss_fraction
        # the loop's first-order step, exact: end = cmd + (i0 - cmd) a; step mean = cmd + (i0 - cmd) f
        x = 2.0 * math.pi * drive.current_bandwidth * step_s if self.current_mode else math.inf
        self.loop_decay = math.exp(-x)
        self.loop_mean = -math.expm1(-x) / x
        self.curve = None
        if motor.curve is not None:
            from .curve import TorqueCurve
            self.curve = TorqueCurve(voltage=motor.curve.voltage, k_t=device.k_t_n_m_a,
                                     points=[(p.speed, p.torque) for p in motor.curve.points])
        self.reversal_s = drive.reversal_delay or 0.0
        self.direction = 0.0
        self.turn_at = None          # time the bridge may turn round, s (None: no reversal pending)
        self.reversals = 0           # turns completed
        self.reversal_held_steps = 0  # steps a command was held at zero waiting for a turn
        trip = drive.trip
        self.trip_a = trip.current if trip is not None else math.inf
        self.trip_s = trip.time if trip is not None else 0.0
        self.recovery_s = trip.recovery if trip is not None else None
        self.over_since = None
        self.off_until = -1.0        # bridge off until this time, s (inf: for good)
        self.trips = 0
        th = motor.thermal
        self.coupled = th.coupled
        self.r20 = device.resistance_ohm
        self.r_solved = device.resistance_ohm
        self.temp_c = th.ambient
        self.ambient_c, self.r_th, self.c_th = th.ambient, th.thermal_resistance, th.thermal_capacity
        self.peak_temp_c = th.ambient
        self.i_loop = 0.0            # the current loop's state, A
        self.bus_v = self.supply.volts
        self.bus_current_a = 0.0
        self.applied_v = 0.0
        self.steps = 0
        self.k_t = device.k_t_n_m_a
        self.bridge_events: list[tuple[float, str]] = []
        if self.owns_bus:
            bus.track()               # a pack already below its cut-off at the start: off from t = 0

    @property
    def command_limit(self) -> float:
        """The largest command magnitude the drive takes: the current limit (or the stall current at
        the starting bus) in current mode, the starting supply in voltage mode."""
        d = self.device
        if self.current_mode:
            return d.current_limit_a if math.isfinite(d.current_limit_a) else d.supply_v / d.resistance_ohm
        return d.supply_v

    def update(self, command: float, wheel_speed_rad_s: float) -> tuple[float, float]:
        """Advance one step (see the module docstring); returns (mean current A, torque N m)."""
        dt = self.dt
        t = self.steps * dt          # by multiplication: no drift of a sum over millions of steps
        self.steps += 1
        shared = self.bus
        bus = self.bus_v = self.supply.volts
        if shared.dead or t < self.off_until - 1e-9 * dt:
            return self._off(dt)
        if self.reversal_s and command != 0.0 and self.direction != (1.0 if command > 0.0 else -1.0):
            command = self._reversal(command, t)    # a turn to make (or under way)
        elif self.turn_at is not None:
            self.turn_at = None                     # back to the old direction: nothing to wait for
        if self.current_mode:
            i, v = self._current_step(command, wheel_speed_rad_s, bus)
        else:
            i, v = self._voltage_step(command, wheel_speed_rad_s, bus)
        self.applied_v = v
        i_bus = v * i / bus if bus > 0.0 else 0.0     # d i, d = v / V_bus
        self.bus_current_a = i_bus
        if -self.trip_a <= i <= self.trip_a:
            self.over_since = None
        else:
            self._over(t)
        shared.take(i_bus)
        if self.coupled:
            self._heat(i, dt)
        return i, self.k_t * i

    # -- the bridge --------------------------------------------------------------------------
    def _voltage_step(self, volts: float, w: float, bus: float) -> tuple[float, float]:
        base = self.duty_base_v or bus
        duty = volts / base if base > 0.0 else 0.0
        duty = 1.0 if duty > 1.0 else (-1.0 if duty < -1.0 else duty)
        if self.pwm is not None:
            c = self.motor.current
            v = self.pwm.applied(duty, bus, 1.0 if c > 0.0 else (-1.0 if c < 0.0 else 0.0))
        else:
            v = duty * bus
        if self.curve is not None:      # the datasheet's curve, quasi-static, within the current limit
            lim = self.motor.i_max
            i = self.curve.current(v, w)
            i = lim if i > lim else (-lim if i < -lim else i)
            self.motor.current = i
            return i, v
        i, _ = self.motor.update(v, w)
        return i, v

    def _current_step(self, amps: float, w: float, bus: float) -> tuple[float, float]:
        m = self.motor
        lim = m.i_max
        cmd = lim if amps > lim else (-lim if amps < -lim else amps)
        if self.pwm is not None and -self.pwm.min_duty * bus < m.r * cmd + m.k_e * w < self.pwm.min_duty * bus \
                and cmd != 0.0:
            self.pwm.dead_band_hits += 1
            cmd = 0.0
        # exact first-order step: end value and the step's mean
        gap = self.i_loop - cmd
        end = cmd + gap * self.loop_decay
        mean = cmd + gap * self.loop_mean
        ceiling = bus * (1.0 - self.dead_loss)
        emf = m.k_e * w
        hi, lo = (ceiling - emf) / m.r, (-ceiling - emf) / m.r    # what the bus can drive at this speed
        if mean > hi or mean < lo:
            mean = hi if mean > hi else lo
            end = mean                    # the loop's integrator held at the ceiling (no wind-up)
        self.i_loop = end
        m.current = end
        return mean, m.r * mean + emf

    def _reversal(self, command: float, t: float) -> float:
        """`command` (non-zero, against the bridge's direction) held at zero until the turn is done."""
        s = 1.0 if command > 0.0 else -1.0
        if self.direction == 0.0:
            self.direction = s
            return command
        if self.turn_at is None:
            self.turn_at = t + self.reversal_s
        if t < self.turn_at - 1e-9 * self.dt:
            self.reversal_held_steps += 1
            return 0.0
        self.direction, self.turn_at = s, None
        self.reversals += 1
        return command

    def float_winding(self) -> tuple[float, float]:
        """One step with the winding open (a strategy's `open_circuit`): no current, the supply at rest."""
        self.bus_v = self.supply.volts
        self.steps += 1
        return self._off(self.dt)

    # -- protections and heat ----------------------------------------------------------------
    def _off(self, dt: float) -> tuple[float, float]:
        self.motor.current = self.i_loop = 0.0
        self.applied_v = self.bus_current_a = 0.0
        self.bus.take(0.0, settle=True)
        if self.coupled:
            self._heat(0.0, dt)
        return 0.0, 0.0

    def _over(self, t: float) -> None:
        """|i| above the trip current over the step from `t` (s): trip once it has lasted `trip.time`."""
        now = (self.steps) * self.dt
        if self.over_since is None:
            self.over_since = t
        if now - self.over_since >= self.trip_s - 1e-9 * self.dt:
            self.trips += 1
            self.bridge_events.append((now, "driver_tripped"))
            self.off_until = now + self.recovery_s if self.recovery_s is not None else math.inf
            self.over_since = None

    def _heat(self, i: float, dt: float) -> None:
        m = self.motor
        p = i * i * m.r
        tau = self.r_th * self.c_th
        rise = p * self.r_th
        self.temp_c = self.ambient_c + rise + (self.temp_c - self.ambient_c - rise) * math.exp(-dt / tau)
        if self.temp_c > self.peak_temp_c:
            self.peak_temp_c = self.temp_c
        r = self.r20 * (1.0 + COPPER_ALPHA_PER_K * (self.temp_c - 20.0))
        m.r = r
        if abs(r - self.r_solved) > RESOLVE_SHARE * self.r_solved:
            self._resolve(r)

    def _resolve(self, r: float) -> None:
        current = self.motor.current
        self.motor = MotorDrive(_with_resistance(self.device, r), step_s=self.dt)
        self.motor.current = current
        self.r_solved = r

    @property
    def events(self) -> list[tuple[float, str]]:
        """The protections that fired, (time s, code), in time order: this bridge's trips and its bus's
        cut-off or over-voltage (on a tie, the trip first: it is checked first within a step)."""
        return sorted(self.bridge_events + self.bus.events, key=lambda e: e[0])

    def summary(self) -> dict:
        """What the chain saw, for metrics and causes (SI; keys carry units)."""
        out = {
            **self.bus.summary(),
            "driver_trips": self.trips,
            "pwm_dead_band_fraction": (self.pwm.dead_band_hits / self.steps if self.pwm is not None and self.steps
                                       else (0.0 if self.pwm is not None else None)),
            "power_events": [{"at_s": t, "cause": code} for t, code in self.events],
            # with a reversal delay: turns made, and the share of steps a command waited for one
            # (a balance law that reverses often loses that much of its authority: a limit cycle)
            "reversals": self.reversals if self.reversal_s else None,
            "reversal_held_fraction": (self.reversal_held_steps / self.steps if self.steps else 0.0)
            if self.reversal_s else None,
        }
        if self.coupled:
            out["peak_winding_temperature_c"] = self.peak_temp_c
        return out


def shared_chains(scenario, figures, *, step_s: float, record_steps: int = 0,
                  motors=None) -> tuple[SharedBus, list[PowerChain]]:
    """One bus for a device's wheels and one chain per wheel on it (wheel i with `figures[i]`, its
    motor's figures, and `motors[i]`, its motor section; default `scenario.wheel_motor(i)`). With
    `record_steps` the bus keeps its columns (`SharedBus.record`) for that many steps."""
    bus = SharedBus(scenario, step_s=step_s, n_bridges=len(figures), shared=True)
    motors = motors or [scenario.wheel_motor(i) for i in range(len(figures))]
    chains = [PowerChain(scenario, f, step_s=step_s, motor=m, bus=bus) for f, m in zip(figures, motors)]
    if record_steps:
        bus.record(record_steps)
    bus.track()       # a pack already below its cut-off at the start: every bridge off from t = 0
    return bus, chains


def shared_summary(bus: SharedBus, chains: list[PowerChain]) -> dict:
    """What the bus and its chains saw: `PowerChain.summary`'s keys over the whole device (trips and
    reversals summed, the largest dead-band and held fractions), each event naming its wheel (from 1;
    None for the bus's own cut-off or over-voltage), and `wheels`: each chain's own figures."""
    per = [c.summary() for c in chains]
    out = bus.summary()
    out["driver_trips"] = sum(p["driver_trips"] for p in per)
    dead = [p["pwm_dead_band_fraction"] for p in per if p["pwm_dead_band_fraction"] is not None]
    out["pwm_dead_band_fraction"] = max(dead) if dead else None
    events = [(t, code, i) for i, c in enumerate(chains, start=1) for t, code in c.bridge_events]
    events += [(t, code, None) for t, code in bus.events]
    events.sort(key=lambda e: e[0])    # stable: on a tie the trips first, in wheel order
    out["power_events"] = [{"at_s": t, "cause": code, "wheel": i} for t, code, i in events]
    turns = [p["reversals"] for p in per if p["reversals"] is not None]
    out["reversals"] = sum(turns) if turns else None
    held = [p["reversal_held_fraction"] for p in per if p["reversal_held_fraction"] is not None]
    out["reversal_held_fraction"] = max(held) if held else None
    keys = ("driver_trips", "pwm_dead_band_fraction", "reversals", "reversal_held_fraction", "peak_winding_temperature_c")
    out["wheels"] = [{k: p[k] for k in keys if k in p} for p in per]
    return out
