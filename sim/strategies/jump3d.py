"""Brake-to-jump on a 3D device: from lying on a face up to the balance edge, then the multi-wheel LQR.

`kind: jump` on a device that is not the planar one (`BrakeJump` hands its construction here). The
device balances on an edge: a hinge at the edge (the floor's equivalent while the body is off its
face and the edge does not slip) or a floor device balancing on its edge, whose linear model is the
hinge's (`device.linear_spec().mount == "hinge"`). The reading's first angle is the tilt about the
edge (0 balanced; lying on a face is a tilt of a few tens of degrees), its first rate that tilt's rate.

The law, per attempt:
1. spin up: every wheel with an axis component along the edge is run up to its share of the needed
   momentum times the speed factor (`sim.strategies.jump_figures.face_to_edge`, the first attempt's
   factor is `margin`), its reaction torque pressing the body onto the face it lies on (gently: at
   most half the gravity torque holding it there, and half the stall torque); the other wheels are
   held still;
2. brake: the winding floats and the brake locks the wheels to the body: their momentum turns the body
   about the edge;
3. balance: within `CATCH_ANGLE` of balance the brake is released and the multi-wheel LQR
   (`sim.strategies.lqr.MultiWheelLqr`, default weights) takes over;
4. a miss: the body stops short and falls back, or gets up and falls over, and comes to rest again.
   The energy it reached is compared with the energy the rise needs (`E_reached / E_needed`: for a
   short jump the centre of mass's rise at the turning point over the rise to balance; for a jump
   that got up, the potential plus kinetic energy at the handover over the rise) and the next
   attempt's speed factor is scaled by sqrt(E_needed / E_reached): kinetic energy goes with the
   square of the wheel speed (the correction used in the jump-up work of Gajamohan, Merz, Thommen &
   D'Andrea, IROS 2012 [from memory]). A short jump is judged once the brake has locked the wheels
   (a slipping brake still lifts the body); the ratio is taken within [0.25, 4], so one correction
   changes the speed by at most a factor 2. At most `max_attempts` attempts (default 5 here); a body
   that rolled onto a face away from its balance edge (tilt beyond 90 deg) is not tried again.

`extra_metrics`: `needed_wheel_speed_rad_s` (lossless, from the first attempt's rest tilt),
`reached_wheel_speed_rad_s` (the largest participating wheel's measured speed at the last brake),
`jump_attempts`, `jump_margin` (`jump_figures.jump_margin`: how far over the needed speed the motors
can go at this supply), `jump_target_wheel_speed_rad_s` (the last attempt's aim), `jump_energy_ratios`
(E_reached / E_needed per attempt that was judged), `braked_at_s` (the last brake).
The edge-to-corner jump of floor devices balancing on a corner is `sim.strategies.jump_corner`.
"""

from __future__ import annotations

import math

import numpy as np

from ..core.errors import StrategyError
from .base import Reading, Strategy
from .jump_figures import face_to_edge, jump_margin, wheel_reach

CATCH_ANGLE = math.radians(20)   # hand over to the LQR inside this tilt from balance (our choice: at 10 deg
                                 # the test cube at 1.1x its need came in too fast for the LQR to hold)
SPEED_CAP = 0.95                 # never aim above 95% of the reachable speed: the approach is exponential
SPEED_LOOP_S = 0.05              # time constant of the wheel-speed correction, s (our choice)
SETTLE_S = 0.3                   # brake anyway this long after the references reached their targets
REST_RATE = 0.05                 # rad/s: the body is at rest below this tilt rate ...
REST_S = 0.3                     # ... held this long (our choices)
REST_FILTER_S = 0.05             # s: the tilt rate judged for rest through a first-order low-pass of this time
                                 # constant: a MEMS gyro's noise at 1 kHz (0.03 rad/s) crosses REST_RATE
                                 # every few ticks, so the raw rate never stayed under it for REST_S (our choice)
RATIO_CLAMP = (0.25, 4.0)        # a measured energy ratio outside this is taken at the bound: one
                                 # correction changes the speed by at most a factor 2 (our choice)
LOCKED = 0.02                    # a wheel below 2% of its speed at the brake counts as locked to the body
HELD_S = 1.0                     # held this long by the LQR, a jump was a success: a later fall
                                 # (a push) does not correct the next jump's speed (our choice)
DEFAULT_ATTEMPTS = 5


def speed_loop_volts(units, inertia, ramp, target, w_ref, w) -> list[float]:
    """Volts that spin each wheel along its speed reference: `w_ref` (>= 0) in the sense of `target` (rad/s,
    signed, relative to the body), fed forward at `ramp` N m while the reference still rises, corrected
    with the time constant SPEED_LOOP_S, the torque kept within 2 `ramp`; volts from the motor's line
    (R tau / k_t + k_e w). Arrays over the wheels; a wheel with target 0 is held still."""
    sign = np.sign(target)
    feed = np.where(w_ref < np.abs(target), ramp, 0.0)
    tau = sign * feed + inertia * (sign * w_ref - w) / SPEED_LOOP_S
    tau = np.clip(tau, -2.0 * ramp, 2.0 * ramp)
    return [u.resistance_ohm * t / u.k_t_n_m_a + u.k_e_v_s_rad * s for u, t, s in zip(units, tau, w)]


class RestWatch:
    """Whether a body has lain still for REST_S: its rate (rad/s, a number or a vector) low-passed with the
    time constant REST_FILTER_S and under REST_RATE (a vector is filtered, not its norm, which noise
    biases upwards). `reset()` when a wait for rest begins."""

    def __init__(self, period_s: float):
        self.period = period_s
        self.reset()

    def reset(self) -> None:
        self.rate_f = self.since = None

    def rested(self, t_s: float, rate, *, allowed: bool = True) -> bool:
        """Update with this tick's rate; True once still (and `allowed`) since REST_S ago."""
        held = self.rate_f
        self.rate_f = rate if held is None else held + (rate - held) * self.period / (REST_FILTER_S + self.period)
        size = abs(self.rate_f) if isinstance(self.rate_f, float) else float(np.linalg.norm(self.rate_f))
        if allowed and size < REST_RATE:
            self.since = t_s if self.since is None else self.since
            return t_s - self.since >= REST_S
        self.since = None
        return False


class JumpLaw(Strategy):
    """What the 3D jump laws share: their kind, goal and the figures of their wheels."""

    kind = "jump"
    goal = "balance"
    swings_up = True

    def _set_up(self, device, params, rng) -> None:
        """The base's set-up, the balance law to hand over to, the brake check, and per wheel: its reachable
        speed (rad/s), spin inertia (kg m^2) and stall torque (N m)."""
        Strategy.__init__(self, device=device, params=params, rng=rng)
        from .lqr import LqrBalance, MultiWheelLqr     # the balance law's module imports this one's registry
        self._lqr_cls, self._lqr_params = MultiWheelLqr, LqrBalance.Params()
        if all(w.brake_torque_n_m is None for w in device.wheels):
            raise StrategyError("jump needs a wheel brake: set drive.brake_torque (or a wheel's brake_torque)")
        self.units = device.wheels
        self.reach = np.array([wheel_reach(w) for w in self.units])
        self.inertia = np.array([w.spin_inertia_kg_m2 for w in self.units])
        self.stall = np.array([w.k_t_n_m_a * min(w.supply_v / w.resistance_ohm, w.current_limit_a) for w in self.units])


class JumpUp3D(JumpLaw):
    """Face-to-edge brake-to-jump with retries, then the multi-wheel LQR (see the module docstring).
    Built by `sim.strategies.jump.BrakeJump` for a 3D device, with `BrakeJump.Params`."""

    def __init__(self, *, device, params, rng) -> None:
        spec = device.linear_spec()
        # a floor device balancing on an edge designs as a hinge (its `design_mount`, or its spec's mount)
        if (getattr(device, "design_mount", None) or spec.mount) != "hinge":
            raise StrategyError("jump on a 3D device goes from a face up to an edge: it needs a hinge at the edge "
                                "or a floor device balancing on an edge (on a corner: `jump_corner.JumpToCorner`)")
        self._set_up(device, params, rng)
        com = np.asarray(device.com_m, dtype=float)
        self.mgd = device.mass_kg * device.gravity_m_s2 * math.hypot(com[1], com[2])
        self.max_attempts = params.max_attempts if params.max_attempts is not None else DEFAULT_ATTEMPTS
        self.factor = float(params.margin)          # the aim as a multiple of the lossless need
        self.period = 1.0 / device.control_rate_hz
        self.rest = RestWatch(self.period)
        self.balancing = False
        self.lqr = None
        self.fig = None
        self.extra_metrics = {"needed_wheel_speed_rad_s": None, "reached_wheel_speed_rad_s": None,
                              "jump_attempts": 0, "jump_margin": None, "jump_target_wheel_speed_rad_s": None,
                              "jump_energy_ratios": [], "braked_at_s": None}
        self.phase = "spin up"
        self._new_attempt_pending = True

    # -- the attempt's set-up -----------------------------------------------------------------------
    def _plan(self, tilt: float, w: np.ndarray) -> None:
        """Figures for a jump from this rest tilt; targets = factor x need, capped by what each wheel reaches."""
        self.fig = fig = face_to_edge(self.device, rest_tilt_rad=tilt)
        self.theta0, self.sense = abs(tilt), (-1.0 if tilt > 0 else 1.0)
        need = np.array(fig.wheel_speeds_rad_s)
        self.used = need != 0.0
        cap = SPEED_CAP * self.reach
        self.target = np.clip(self.factor * need, -cap, cap)
        m = self.extra_metrics
        if m["needed_wheel_speed_rad_s"] is None:
            m["needed_wheel_speed_rad_s"] = fig.needed_wheel_speed_rad_s
            m["jump_margin"] = jump_margin(need, self.reach)
        m["jump_target_wheel_speed_rad_s"] = float(np.max(np.abs(self.target)))
        hold = 0.5 * self.mgd * math.sin(self.theta0)
        ramp = self.params.ramp_torque if self.params.ramp_torque is not None else hold
        self.ramp = np.minimum(ramp, 0.5 * self.stall)
        # the speed references start where the wheels are (in the target's sense): a wheel already
        # spinning is not slowed down first
        self.w_ref = np.minimum(np.maximum(w * np.sign(self.target), 0.0), np.abs(self.target))
        self.ref_done_s = None
        self.peak = self.theta0
        self.phase = "spin up"

    def _energy_ratio(self, tilt: float, rate: float) -> float:
        """(potential gained since rest + kinetic now) / (potential to balance), the wheels locked."""
        needed = self.mgd * (1.0 - math.cos(self.theta0))
        reached = self.mgd * (math.cos(tilt) - math.cos(self.theta0)) + 0.5 * self.fig.inertia_kg_m2 * rate * rate
        return min(max(reached / needed, RATIO_CLAMP[0]), RATIO_CLAMP[1]) if needed > 0 else 1.0

    # -- the law --------------------------------------------------------------------------------------
    def decide(self, reading: Reading):
        tilt, rate = reading.angles_rad[0], reading.rates_rad_s[0]
        w = np.asarray(reading.wheel_speeds_rad_s, dtype=float)
        if self._new_attempt_pending:
            self._new_attempt_pending = False
            if abs(tilt) <= CATCH_ANGLE:
                return self._hand_over(reading, ratio=None)
            self._plan(tilt, w)
        if self.phase == "balance":
            if abs(tilt) > self.params.release_angle:     # it got up but the LQR lost it: a miss
                self.balancing, self.lqr, self.phase = False, None, "fallen"
                self.rest.reset()
            else:
                if reading.t_s - self._handover_s > HELD_S:
                    self._ratio_at_handover = None
                return self.lqr.decide(reading)
        if self.phase == "spin up":
            return self._spin(w, reading.t_s)
        if self.phase == "brake":
            return self._watch_rise(reading, tilt, rate, w)
        if self.phase in ("fallen", "fell back"):
            return self._wait_for_rest(reading.t_s, tilt, rate, w)
        return [0.0] * len(self.units)      # gave up

    def _spin(self, w: np.ndarray, t_s: float):
        step = self.ramp / self.inertia * self.period
        goal = np.abs(self.target)
        self.w_ref = np.minimum(self.w_ref + step, goal)
        if self.ref_done_s is None and np.all(self.w_ref >= goal):
            self.ref_done_s = t_s
        sign = np.sign(self.target)
        reached = np.all(~self.used | (np.abs(w) >= 0.99 * goal) & (w * sign > 0))
        if self.ref_done_s is not None and (reached or t_s - self.ref_done_s > SETTLE_S):
            return self._engage(w, t_s)
        return speed_loop_volts(self.units, self.inertia, self.ramp, self.target, self.w_ref, w)

    def _engage(self, w: np.ndarray, t_s: float):
        self.brake, self.open_circuit, self.phase = True, True, "brake"
        m = self.extra_metrics
        m["jump_attempts"] += 1
        m["reached_wheel_speed_rad_s"] = float(np.max(np.abs(w[self.used])))
        m["braked_at_s"] = float(t_s)
        return [0.0] * len(self.units)

    def _watch_rise(self, reading: Reading, tilt: float, rate: float, w: np.ndarray):
        if abs(tilt) <= CATCH_ANGLE:
            return self._hand_over(reading, ratio=self._energy_ratio(tilt, rate))
        self.peak = min(self.peak, abs(tilt))
        # judged only with the wheels locked: a brake still slipping is still lifting the body. A body
        # that never left its face is judged too (its ratio is then the lower bound: the speed doubles)
        locked = np.all(np.abs(w[self.used]) <= LOCKED * self.extra_metrics["reached_wheel_speed_rad_s"])
        if locked and rate * self.sense <= 0.0:   # turned back (or never rose) short of the catch region
            self._judge(self._energy_ratio(self.peak, 0.0))
            self.phase = "fell back"
            self.rest.reset()
        return [0.0] * len(self.units)

    def _hand_over(self, reading: Reading, *, ratio):
        self.brake, self.open_circuit, self.balancing, self.phase = False, False, True, "balance"
        self._ratio_at_handover, self._handover_s = ratio, reading.t_s
        self.lqr = self._lqr_cls(device=self.device, params=self._lqr_params, rng=self.rng)
        return self.lqr.decide(reading)

    def _judge(self, ratio: float) -> None:
        """Record a miss's energy ratio and scale the next attempt's speed factor by sqrt(1 / ratio)."""
        self.extra_metrics["jump_energy_ratios"].append(ratio)
        self.factor *= math.sqrt(1.0 / ratio)

    def _wait_for_rest(self, t_s: float, tilt: float, rate: float, w: np.ndarray):
        if self.phase == "fallen" and getattr(self, "_ratio_at_handover", None) is not None:
            self._judge(self._ratio_at_handover)     # it got up: the handover's energy says by how much
            self._ratio_at_handover = None
        if self.rest.rested(t_s, rate, allowed=abs(tilt) > CATCH_ANGLE):
            if self.extra_metrics["jump_attempts"] >= self.max_attempts:
                self.phase = "gave up"
            elif abs(tilt) >= 0.5 * math.pi:     # rolled onto a face away from the balance edge
                self.phase = "gave up: the balance edge is off the floor"
            else:
                self.brake, self.open_circuit = False, False
                self._plan(tilt, w)
                return self._spin(w, t_s)
        return [0.0] * len(self.units)
