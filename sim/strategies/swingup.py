"""Swing-up laws: energy control and bang-bang pumping.

Both bring the body from hanging towards upright; neither holds it there. Run alone they are
bench-style strategies (outcome `completed`); under `swing_and_catch` a balance law takes over
near the top.

Energy of the body (references.md, "Swing-up"): E = 1/2 J theta_d^2 + mbar g (cos(theta) - 1),
0 upright at rest and -2 mbar g hanging at rest. With the motor torque tau on the wheel (its
reaction -tau on the body), dE/dt = -tau theta_d (friction aside), which both laws use.

Both laws share one way of working a swing (`_SwingUpBase.swing_cycle`), made for motors far
weaker than gravity (stall torque down to a tenth of mbar g) as well as strong ones:
- Resonance. The torque's sign follows the swing (tau against theta_d), so every half cycle adds
  energy, however small the torque; a weak motor pumps a large swing over many cycles.
- Start. A body hanging at rest has no swing to follow: it gets a push in `kick_direction` only
  while its swing is too small to follow (peak rate below a few percent of the natural rate).
  The push never latches: once the body moves, the torque follows the swing and reverses with it.
- Wheel speed. Pumping stores the swing's reaction in the wheel. Near the turning points, where
  |theta_d| is small and torque does little work, the law bleeds the wheel back toward zero
  speed instead of pumping, so the wheel never parks at its no-load speed, where it has no
  torque left in one direction. The bleed acts only on the side of a turning point where its
  torque also pumps (so the energy error never grows), and only while the swing is below
  BLEED_ENERGY_FRACTION of the target: the last swings get every bit of torque.
"""

from __future__ import annotations

import math
from typing import Annotated, Literal

from pydantic import Field

from .base import Reading, Strategy, StrategyParams

PosFloat = Annotated[float, Field(gt=0, allow_inf_nan=False)]
NonNegFloat = Annotated[float, Field(ge=0, allow_inf_nan=False)]
# share of the no-load speed at the supply beyond which the swing-up does not speed the wheel up
# further (1: the wheel's whole range; lower keeps margin for the catch)
WheelLimit = Annotated[float, Field(gt=0, le=1, allow_inf_nan=False)]

START_RATE_FRACTION = 0.05
"""A swing whose peak rate (at the bottom, from its energy) is below this fraction of the natural
rate sqrt(mbar g / J) is too small to follow: the law pushes one way (our choice). For a motor
weaker than 0.1 mbar g the fraction is half its stall torque over mbar g, since a push from rest
deflects the body only by about stall / (mbar g) rad and reaches a peak rate of about that
fraction of the natural rate (small-angle pendulum under a constant torque)."""
TURN_RATE_FRACTION = 0.2
"""|theta_d| below this fraction of the swing's peak rate counts as near a turning point: the law
bleeds the wheel there. For a harmonic swing that is 13% of the time (2 asin(0.2) / pi) but only
2% of the work a full-time pump would do (1 - sqrt(1 - 0.2^2)); our choice (0.3 bled more but
caught the desk demo with the wheel faster, and it then settled slower)."""
BLEED_ENERGY_FRACTION = 0.75
"""Turning points count only while the swing's energy (from hanging at rest) is below this fraction
of what the target needs: on the last swings the turning points lie near the top, and the torque
there is what carries the body over (our choice; a sweep of invented devices lost catches at 1.0)."""
GAIN_FACTOR = 30.0
"""Default energy gain, in units of stall torque / (mbar g * natural rate): high, so the drive is
saturated (bang-bang, the fastest pumping) until the energy error is about a percent of the well (our choice)."""
BLEED_SPEED_FRACTION = 0.25
"""Default bleed: full stall torque against a wheel at this fraction of its no-load speed (our choice)."""


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
    """Shared parts: energy bookkeeping, the start push, turning points and the wheel bleed.

    `extra_metrics` (for a swing-up that falls short): `swing_energy_peak_j`, the largest swing
    energy reached, J, counted from hanging at rest (E + 2 mbar g); `swing_energy_needed_j`, what
    the target needs on the same scale, J; `swing_energy_peak_fraction`, their ratio (1 = enough;
    None for a target at or below hanging at rest).
    """

    planar_only = True   # one wheel on a hinge: refused for 3D devices at load

    goal = None
    swings_up = True

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        d = self.device
        self.mgl = d.gravity_torque_coeff_n_m
        if not self.mgl > 0:
            raise ValueError("a swing-up needs gravity and a body whose centre of mass is off the pivot (mbar g > 0)")
        self.natural_rate = math.sqrt(self.mgl / d.J_kg_m2)
        self.start_rate = min(START_RATE_FRACTION, 0.5 * d.stall_torque_n_m / self.mgl) * self.natural_rate
        self.phase = "swing up"
        self.energy_j = -2.0 * self.mgl
        self.limited = False       # True on ticks where the wanted torque exceeded the drive's
        self.direction = float(self.params.kick_direction)   # wheel torque sign, held while pushing
        self.needed_j = 2.0 * self.mgl + self.params.energy_target
        self.peak_j = 0.0
        self.extra_metrics = {"swing_energy_peak_j": 0.0, "swing_energy_needed_j": self.needed_j,
                              "swing_energy_peak_fraction": 0.0 if self.needed_j > 0 else None}

    def body_energy(self, reading: Reading) -> float:
        e = self.energy_j = self.device.body_energy_j(reading.angle_rad, reading.rate_rad_s)
        if e + 2.0 * self.mgl > self.peak_j:
            self.peak_j = e + 2.0 * self.mgl
            self.extra_metrics["swing_energy_peak_j"] = self.peak_j
            self.extra_metrics["swing_energy_peak_fraction"] = (self.peak_j / self.needed_j if self.needed_j > 0
                                                                else None)
        return e

    def swing_cycle(self, reading: Reading, energy_j: float) -> str:
        """Where the body is in its swing: "push", "turn" or "pump"; updates `self.direction`.

        "push": the swing is too small to follow (peak rate from the energy below `start_rate`);
        torque in the held direction. "turn": near a turning point (|theta_d| below
        TURN_RATE_FRACTION of the peak rate); the caller bleeds the wheel. "pump": the held
        direction becomes the one that adds energy, -sign(theta_d).
        """
        peak_rate = math.sqrt(max(0.0, 2.0 * (energy_j + 2.0 * self.mgl) / self.device.J_kg_m2))
        rate = reading.rate_rad_s
        if peak_rate < self.start_rate and abs(rate) < self.start_rate:
            return "push"
        low_swing = energy_j + 2.0 * self.mgl < BLEED_ENERGY_FRACTION * self.needed_j
        if low_swing and abs(rate) < TURN_RATE_FRACTION * peak_rate:
            return "turn"
        self.direction = -1.0 if rate > 0 else 1.0
        return "pump"

    def bleed_torque(self, reading: Reading, energy_error_j: float, gain_n_m_s: float) -> float:
        """Wheel torque near a turning point, N m: -gain * w (clipped to the drive) when its work on
        the body, -tau theta_d, shrinks the energy error `energy_error_j` (E - E_ref), else 0.

        The bleed is allowed on one side of each turning point only: before the body turns it
        would take energy from a swing still rising (just short of the top, a lost catch), after
        it turns the same torque pumps. So the bleed never lets the energy error grow.
        """
        w = reading.wheel_speed_rad_s
        tau, self.limited = clip_to_available(self.device, -gain_n_m_s * w, w)
        if energy_error_j * tau * reading.rate_rad_s < 0.0:
            self.limited = False
            return 0.0
        return tau

    def within_wheel_limit(self, torque_n_m: float, wheel_speed_rad_s: float) -> bool:
        """False when the torque would speed up a wheel already at `wheel_limit` of its no-load
        speed (the swing then waits for the next half swing rather than use up the wheel's range)."""
        cap = self.params.wheel_limit * self.device.no_load_speed_rad_s
        return not (abs(wheel_speed_rad_s) >= cap and torque_n_m * wheel_speed_rad_s > 0.0)

    def default_bleed(self) -> float:
        """Full stall torque against a wheel at BLEED_SPEED_FRACTION of its no-load speed, N m s/rad."""
        d = self.device
        return d.stall_torque_n_m / (BLEED_SPEED_FRACTION * d.no_load_speed_rad_s)


class EnergySwingUp(_SwingUpBase):
    """Energy control (Astrom & Furuta 2000) adapted to the reaction wheel.

    Torque on the wheel, N m, while the body swings: tau = sat( k (E - E_ref) theta_d ), where
    `sat` is the drive's available torque at the present wheel speed
    (`Device.available_torque_n_m`). Unsaturated, dE/dt = -k (E - E_ref) theta_d^2 <= 0 for
    E > E_ref and >= 0 below: the energy error shrinks monotonically; saturated, the torque still
    has the sign that shrinks it. Near the swing's turning points (see the module docstring) the
    law bleeds the wheel instead: tau = sat(-c_w w). A body hanging at rest gets a push (full
    available torque in `kick_direction`) until it swings.

    Parameters (SI): `gain` k, s/rad (N m per J per rad/s); `energy_target` E_ref, J;
    `wheel_damping` c_w, N m s/rad (0: no bleed); `kick_direction` +1 or -1 (sign of the wheel
    torque); `wheel_limit`, a share of the no-load speed beyond which the law does not speed the
    wheel up further (default 1: its whole range; 0.8 keeps a fifth for the catch, at the cost of
    a slower swing-up on strong motors). Defaults: k = 30 stall torque / (mbar g * sqrt(mbar g / J)), so the drive is
    saturated (bang-bang, the fastest pumping) until the error is about a percent of the well;
    E_ref = 0; c_w = stall torque at a quarter of the no-load speed.
    """

    kind = "energy"

    class Params(StrategyParams):
        gain: PosFloat | None = None
        energy_target: Annotated[float, Field(allow_inf_nan=False)] = 0.0
        wheel_damping: NonNegFloat | None = None
        kick_direction: Literal[-1, 1] = 1
        wheel_limit: WheelLimit = 1.0

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        d, p = self.device, self.params
        self.gain = p.gain if p.gain is not None else GAIN_FACTOR * d.stall_torque_n_m / (self.mgl * self.natural_rate)
        self.wheel_damping = p.wheel_damping if p.wheel_damping is not None else self.default_bleed()

    def decide(self, reading: Reading) -> float:
        e = self.body_energy(reading)
        w = reading.wheel_speed_rad_s
        where = self.swing_cycle(reading, e)
        if where == "push":
            self.phase = "kick"
            tau = self.direction * self.device.available_torque_n_m(w, self.direction)
            self.limited = True
        else:
            self.phase = "swing up"
            if where == "turn":
                tau = self.bleed_torque(reading, e - self.params.energy_target, self.wheel_damping)
            else:
                wanted = self.gain * (e - self.params.energy_target) * reading.rate_rad_s
                tau, self.limited = clip_to_available(self.device, wanted, w)
        if not self.within_wheel_limit(tau, w):
            tau = 0.0
        return volts_for_torque(self.device, tau, w)


class PumpSwingUp(_SwingUpBase):
    """Bang-bang pumping: a fixed voltage against the body's swing, until the energy suffices.

    volts = -level * sign(theta_d) while E < E_ref (this makes dE/dt = -tau theta_d >= 0 while the
    torque follows the voltage's sign), winding open once E >= E_ref. Near the swing's turning
    points the voltage bleeds the wheel instead (volts = -level * sign(w), only when the wheel
    turns faster than a tenth of its no-load speed); a body hanging at rest gets +level
    (`kick_direction`) until it swings. The winding floats where its back-EMF would turn the
    pumping voltage into a brake. The simple hobby-style swing-up: no model of the motor's
    torque line beyond that. Parameters: `level` V (default: half the supply), `energy_target` J,
    `kick_direction` +1 or -1, `wheel_limit` (as for `energy`).
    """

    kind = "pump"

    class Params(StrategyParams):
        level: PosFloat | None = None
        energy_target: Annotated[float, Field(allow_inf_nan=False)] = 0.0
        kick_direction: Literal[-1, 1] = 1
        wheel_limit: WheelLimit = 1.0

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.level = self.params.level if self.params.level is not None else 0.5 * self.supply_v
        self.bleed_above = 0.1 * self.device.no_load_speed_rad_s

    def decide(self, reading: Reading) -> float:
        e = self.body_energy(reading)
        # enough energy: float the winding, since 0 V across a spinning motor would brake the wheel
        # and its reaction would stir the body's energy
        self.open_circuit = e >= self.params.energy_target
        if self.open_circuit:
            self.phase = "coast"
            return 0.0
        where = self.swing_cycle(reading, e)
        if where == "push":
            self.phase = "kick"
            return self.direction * self.level
        self.phase = "swing up"
        if where == "turn":
            # bleed a fast wheel only where it also pumps (voltage against the wheel's speed and
            # with the body's rate), else float the winding until the body has turned
            w = reading.wheel_speed_rad_s
            if abs(w) < self.bleed_above or w * reading.rate_rad_s < 0.0:
                self.open_circuit = True
                return 0.0
            return -self.level if w > 0 else self.level
        v = self.direction * self.level
        # a wheel spinning in the pumping direction faster than `level` can drive it: the winding
        # would brake it (back-EMF above the voltage) and the reaction would take energy from the
        # body; float it instead until the swing turns
        if ((v - self.device.k_e_v_s_rad * reading.wheel_speed_rad_s) * v <= 0.0
                or not self.within_wheel_limit(v, reading.wheel_speed_rad_s)):
            self.open_circuit = True
            return 0.0
        return v
