"""Swing-up laws: energy control and bang-bang pumping.

Both bring the body from hanging towards upright; neither holds it there. Run alone they are
bench-style strategies (outcome `completed`); under `swing_and_catch` a balance law takes over
near the top.

Energy of the body (references.md, "Swing-up"): E = 1/2 J theta_d^2 + mbar g (cos(theta) - 1),
0 upright at rest and -2 mbar g hanging at rest. With the motor torque tau on the wheel (its
reaction -tau on the body), dE/dt = -tau theta_d (friction aside), which both laws use.
"""

from __future__ import annotations

import math
from typing import Annotated, Literal

from pydantic import Field

from .base import Reading, Strategy, StrategyParams

PosFloat = Annotated[float, Field(gt=0, allow_inf_nan=False)]
NonNegFloat = Annotated[float, Field(ge=0, allow_inf_nan=False)]
KICK_BAND = 0.02   # "hanging at rest": energy within 2% of the 2 mbar g well depth (our choice)


def volts_for_torque(device, torque_n_m: float, wheel_speed_rad_s: float) -> float:
    """Voltage that makes the motor give `torque_n_m` at this relative wheel speed, V.

    Steady-state motor line (inductance neglected): tau = k_t (V - k_e w) / R.
    """
    return device.resistance_ohm * torque_n_m / device.k_t_n_m_a + device.k_e_v_s_rad * wheel_speed_rad_s


def clip_to_available(device, torque_n_m: float, wheel_speed_rad_s: float) -> tuple[float, bool]:
    """`torque_n_m` limited to what the drive can give at this wheel speed; (torque, was_limited)."""
    direction = 1.0 if torque_n_m >= 0 else -1.0
    cap = device.available_torque_n_m(wheel_speed_rad_s, direction)
    if abs(torque_n_m) > cap:
        return direction * cap, True
    return torque_n_m, False


class _SwingUpBase(Strategy):
    """Shared parts: energy bookkeeping and the kick that starts a body hanging at rest."""

    goal = None
    swings_up = True

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        d = self.device
        self.mgl = d.gravity_torque_coeff_n_m
        if not self.mgl > 0:
            raise ValueError("a swing-up needs gravity and a body whose centre of mass is off the pivot (mbar g > 0)")
        self.phase = "swing up"
        self.energy_j = -2.0 * self.mgl
        self.limited = False       # True on ticks where the wanted torque exceeded the drive's
        self.kicked_out = False    # the kick ends for good once the body has left the bottom band

    def body_energy(self, reading: Reading) -> float:
        self.energy_j = self.device.body_energy_j(reading.angle_rad, reading.rate_rad_s)
        return self.energy_j

    def needs_kick(self, energy_j: float) -> bool:
        """Still near the bottom of the well since the start: no swing yet for the law to work on.

        Latched off once the body has left the band, so a kick never fights a swing later.
        """
        if not self.kicked_out and energy_j >= -2.0 * self.mgl * (1.0 - KICK_BAND):
            self.kicked_out = True
        return not self.kicked_out


class EnergySwingUp(_SwingUpBase):
    """Energy control (Astrom & Furuta 2000) adapted to the reaction wheel.

    Torque on the wheel, N m: tau = sat( k (E - E_ref) theta_d - c_w * w ), where `sat` is the
    drive's available torque at the present wheel speed (`Device.available_torque_n_m`). With
    c_w = 0 and no saturation, dE/dt = -k (E - E_ref) theta_d^2 <= 0 for E > E_ref and >= 0 below:
    the energy error shrinks monotonically. The wheel-speed damping term c_w w keeps the wheel,
    which stores the swing's reaction momentum, away from its no-load speed. A body hanging at
    rest gets a kick (full available torque in `kick_direction`) until it moves.

    Parameters (SI): `gain` k, s/rad (N m per J per rad/s); `energy_target` E_ref, J;
    `wheel_damping` c_w, N m s/rad; `kick_direction` +1 or -1 (sign of the wheel torque).
    Defaults: k = stall torque / (mbar g * sqrt(mbar g / J)), so a whole well's error at the
    natural rate asks for full torque; E_ref = 0; c_w = 10% of stall torque at half no-load speed.
    """

    kind = "energy"

    class Params(StrategyParams):
        gain: PosFloat | None = None
        energy_target: Annotated[float, Field(allow_inf_nan=False)] = 0.0
        wheel_damping: NonNegFloat | None = None
        kick_direction: Literal[-1, 1] = 1

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        d, p = self.device, self.params
        rate = math.sqrt(self.mgl / d.J_kg_m2)
        self.gain = p.gain if p.gain is not None else d.stall_torque_n_m / (self.mgl * rate)
        self.wheel_damping = (p.wheel_damping if p.wheel_damping is not None
                              else 0.1 * d.stall_torque_n_m / (0.5 * d.no_load_speed_rad_s))
        self.kick = float(p.kick_direction)

    def decide(self, reading: Reading) -> float:
        e = self.body_energy(reading)
        w = reading.wheel_speed_rad_s
        if self.needs_kick(e):
            self.phase = "kick"
            tau = self.kick * self.device.available_torque_n_m(w, self.kick)
            self.limited = True
        else:
            self.phase = "swing up"
            wanted = self.gain * (e - self.params.energy_target) * reading.rate_rad_s - self.wheel_damping * w
            tau, self.limited = clip_to_available(self.device, wanted, w)
        return volts_for_torque(self.device, tau, w)


class PumpSwingUp(_SwingUpBase):
    """Bang-bang pumping: a fixed voltage against the body's swing, until the energy suffices.

    volts = -level * sign(theta_d) while E < E_ref (this makes dE/dt = -tau theta_d >= 0 while the
    torque follows the voltage's sign), winding open once E >= E_ref. A body hanging at rest gets
    +level until it moves. The simple hobby-style swing-up: no model of the motor's torque line,
    no wheel-speed care. Parameters: `level` V (default: half the supply), `energy_target` J.
    """

    kind = "pump"

    class Params(StrategyParams):
        level: PosFloat | None = None
        energy_target: Annotated[float, Field(allow_inf_nan=False)] = 0.0

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.level = self.params.level if self.params.level is not None else 0.5 * self.supply_v

    def decide(self, reading: Reading) -> float:
        e = self.body_energy(reading)
        # enough energy: float the winding, since 0 V across a spinning motor would brake the wheel
        # and its reaction would stir the body's energy
        self.open_circuit = e >= self.params.energy_target
        if self.open_circuit:
            self.phase = "coast"
            return 0.0
        if self.needs_kick(e):
            self.phase = "kick"
            return self.level
        self.phase = "swing up"
        return -self.level if reading.rate_rad_s > 0 else self.level
