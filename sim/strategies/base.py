"""The strategy contract: the one extension point for balance and swing-up laws."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, ClassVar

from pydantic import BaseModel, ConfigDict

from ..core.errors import StrategyError
from ..core.units import Q


class StrategyParams(BaseModel):
    """Base for a strategy's parameters: validated once at scenario load, frozen, unknown keys rejected."""

    model_config = ConfigDict(extra="forbid", frozen=True, arbitrary_types_allowed=True)

    release_angle: Q("angle", gt=0, le=math.pi) = math.radians(30)
    """Balancing strategies: the body counts as fallen beyond this angle from upright, rad."""


class Reading:
    """What the sensors report at one control tick (SI; conventions as in `sim.model.scenario`
    and, for 3D devices, `sim.core.frames`).

    The vector form (every device): `angles_rad` is (theta,) on a hinge and (tilt_x, tilt_y) on a
    ball mount, from upright; `rates_rad_s` is (theta_d,) on a hinge and the body's angular
    velocity in the heading frame (wx, wy, wz) on a ball (the world frame turned about the vertical
    by the heading: x and y are the tilts' rates at any heading, z the heading's); `wheel_speeds_rad_s` has one speed per
    wheel, relative to the body. The scalar fields mirror the first entries, so one-wheel laws
    read what they always did; a one-wheel hinge device fills both forms.
    One object is reused for the whole trial: copy values out if a strategy keeps them.
    """

    __slots__ = ("t_s", "angle_rad", "rate_rad_s", "wheel_speed_rad_s", "angles_rad", "rates_rad_s",
                 "wheel_speeds_rad_s", "imu_gyro_rad_s", "imu_accel_m_s2", "supply_v")

    def __init__(self) -> None:
        self.t_s = 0.0
        self.angle_rad = 0.0
        self.rate_rad_s = 0.0
        self.wheel_speed_rad_s = 0.0
        self.angles_rad: tuple[float, ...] = ()
        self.rates_rad_s: tuple[float, ...] = ()
        self.wheel_speeds_rad_s: tuple[float, ...] = ()
        # with an IMU (sensors.imu): its latest sample in its own axes, as the chip reports it
        # (the errors of sensors.imu applied), rad/s and m/s^2; empty without one
        self.imu_gyro_rad_s: tuple[float, ...] = ()
        self.imu_accel_m_s2: tuple[float, ...] = ()
        # the supply as it stands at the tick, V: the scenario's drive.supply on an ideal source, the
        # shared bus's voltage through a 3D device's power chain (a sagging pack gives less); inf when
        # the runner sets none
        self.supply_v = math.inf


class Strategy:
    """Base class of every strategy. The contract:

    1. Construction. The runner builds one instance per trial as
       ``Cls(device=..., params=..., rng=...)``: `device` is the strategy's own copy of the
       `sim.model.device.Device` (lumped SI parameters, including `supply_v`, `control_rate_hz` and
       `delay_s`; changing it changes nothing the runner simulates); `params` is an
       instance of the class's `Params` (a `StrategyParams` subclass), already validated when
       the scenario loaded; `rng` is the trial's seeded numpy Generator, the only randomness
       a strategy may use. Designs (gains, predictors) are computed in `__init__`.
    2. The law. A subclass implements ``decide(reading) -> float``: the voltage it wants across
       the motor winding, in volts, positive accelerating the wheel in the positive sense. On a
       3D device (`sim.model.device3d.Device3D`, `device.n_wheels` wheels) it returns a sequence
       of volts, one per wheel in the scenario's order (a number will do for one wheel). It is
       called once per control tick, in time order; the runner holds the result until the
       next tick (zero-order hold). It sees only the `Reading` (measured angle, body rate,
       wheel speed and time), never the true state or the engine.
    3. Limits. The runner's drive clamps the voltage to +-supply, the supply the scenario
       states (`drive.supply`): `self.supply_v` is a copy for the law to read, and changing it,
       the device or `command` itself never gets more than the supply applied. Through the power
       chain a bridge applies at most the bus as it stands, which `reading.supply_v` reports each
       tick (a sagging pack gives less than `self.supply_v`). A tick whose
       voltage reaches the supply counts in `voltage_saturated_fraction`. A non-finite voltage
       ends the trial with outcome `strategy_failed`, as does anything `decide` or `__init__`
       raises: any exception, `sys.exit`, KeyboardInterrupt or another BaseException (a real
       Ctrl-C still stops the command), and an exception whose message cannot be read.
    4. Phase. `self.phase` names what the law is doing now, in a few words ("balance",
       "swing up", ...); the trace's `mode` column reports it. A trace keeps the first 256
       distinct names (`sim.run.trace.MAX_PHASES`), each cut to 200 characters; every later new
       name is recorded as "(other phases)". Recording phases is the runner's work and is not
       charged to the strategy's time budget.
    5. Goal. `goal = "balance"` for strategies that aim to hold the body upright (the runner
       then judges balanced / fell / not caught), None for bench strategies (outcome
       `completed`). `self.balancing` is True while the balance law is in charge; a balance-only
       strategy is balancing from the start. `swings_up = True` marks strategies that can bring
       the body up from hanging (the `check` battery then tries a swing-up).
    6. Brake and open circuit. A strategy for a device with `drive.brake_torque` may set
       `self.brake = True` to clamp the wheel to the body with the brake, and False to release
       it. `self.open_circuit = True` floats the winding: no current flows whatever the voltage
       (a driver switched off, as opposed to one holding 0 V, which brakes by back-EMF).
       On a 3D device `brake = True` engages every wheel's brake; a tuple of one flag per wheel
       engages only the wheels flagged (each needs its brake_torque).
    6a. Current mode. With `drive.mode: current` (a torque-mode driver) the runner reads the
       command as amps in the winding, not volts, and clamps it to the current limit (or the stall
       current at the starting supply). Only a class with `commands_current = True` may run there;
       it reads `self.device.drive_mode` ("voltage" or "current") and answers in the unit that
       says. `needs_current_mode = True` marks a law that commands amps only (`fixed_current`).
       On a 3D device the same holds per wheel: one current per wheel, each clamped to its own
       wheel's limit.
    7. Registration. Built-ins are named in `sim.strategies.BUILTIN`; a plug-in is any subclass
       named in a scenario by "file.py:Class" or "package.module:Class", or registered under the
       entry-point group "wheelbench.strategies". A plug-in file must lie in the scenario file's
       folder unless the user allows others (`sim.strategies.ALLOW_OUTSIDE_ENV`). Anything the
       plug-in's module, class lookup or `Params` validators raise at load, `sys.exit` included,
       is a scenario error naming `strategy.plugin`; so is an import that ends or crashes its
       process or hangs (it is tried in a forked child first).
    8. Own figures. `self.extra_metrics`, if set, is a dict of JSON values (numbers, text, and
       lists or dicts of those) that the run adds to its metrics; whatever else it holds is left
       out when the trial ends, and `extra_metrics_dropped` says what.
    """

    kind: ClassVar[str] = "custom"
    goal: ClassVar[str | None] = "balance"
    swings_up: ClassVar[bool] = False   # True when the strategy can bring the body up from hanging
    planar_only: ClassVar[bool] = False
    """True for laws that are one-axis by nature: a scenario pairing one with a multi-wheel or
    ball-mounted device (not `Scenario.is_planar`) is refused at load."""
    commands_current: ClassVar[bool] = False   # True: answers in amps when device.drive_mode is "current"
    needs_current_mode: ClassVar[bool] = False  # True: answers in amps only

    class Params(StrategyParams):
        model_config = ConfigDict(extra="allow", frozen=True)

    def __init__(self, *, device, params: StrategyParams, rng) -> None:
        self.device = device
        self.params = params
        self.rng = rng
        self.phase = "balance" if self.goal == "balance" else "bench"
        self.balancing = self.goal == "balance"
        self.brake = False
        self.open_circuit = False
        self.supply_v = device.supply_v

    def decide(self, reading: Reading) -> float:  # pragma: no cover - the contract
        raise NotImplementedError

    def command(self, reading: Reading) -> float:
        """The base's part of each tick: call `decide` and check its answer. Returns volts (the
        runner's drive clamps them to the supply)."""
        v = self.decide(reading)
        try:
            v = float(v)
        except (TypeError, ValueError):
            v = _only_voltage(v)    # a law written in the vector form: one voltage for the one wheel
        if not math.isfinite(v):
            raise StrategyError(f"decide() returned a non-finite voltage ({v})")
        return v

    def command_vector(self, reading: Reading, n_wheels: int) -> tuple[float, ...]:
        """The base's part of each tick on a 3D device: `decide` returns a sequence of volts, one per
        wheel (a single number is accepted for a one-wheel device). Returns a tuple of finite floats."""
        v = self.decide(reading)
        kind = type(v)
        if kind is not list and kind is not tuple:     # the common answers skip these checks
            if isinstance(v, (int, float)) or getattr(v, "ndim", 1) == 0:
                if n_wheels != 1:
                    raise StrategyError(f"decide() returned one voltage for a device with {n_wheels} wheels; "
                                        "return a sequence with one voltage per wheel")
                v = (v,)
        try:
            out = tuple(map(float, v))
        except (TypeError, ValueError):
            raise StrategyError(f"decide() returned {type(v).__name__}, not a sequence of voltages") from None
        if len(out) != n_wheels:
            raise StrategyError(f"decide() returned {len(out)} voltages for a device with {n_wheels} wheels")
        for x in out:
            if x - x != 0.0:                            # inf - inf and NaN - NaN are NaN
                raise StrategyError(f"decide() returned a non-finite voltage ({x})")
        return out

def _only_voltage(v) -> float:
    """The voltage of a one-element sequence of volts; a StrategyError for anything else."""
    try:
        if len(v) == 1:
            return float(v[0])
    except (TypeError, ValueError, KeyError, IndexError):
        pass
    raise StrategyError(f"decide() returned {type(v).__name__}, not a voltage") from None


@dataclass(frozen=True)
class StrategySpec:
    """A resolved strategy: its name, its class and its validated parameters."""

    kind: str
    cls: Any
    params: Any

    def build(self, device, *, rng) -> Strategy:
        """A fresh strategy instance for one trial."""
        return self.cls(device=device, params=self.params, rng=rng)
