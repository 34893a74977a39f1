"""Brake-to-jump up onto a corner: a floor device balancing on its corner (`balance_on: corner`).

`kind: jump` on a floor device whose balance contact is a corner (`BrakeJump` hands its construction
here). Stages, each with its own law:
1. face to edge (only when the body lies on a face): `sim.strategies.jump3d.JumpUp3D` on a copy of the
   device that designs as a hinge at the balance edge (body x through the corner), fed the tilt and rate
   about that edge; it jumps, retries, and its multi-wheel LQR then holds the body on the edge;
2. on the edge, once held still for EDGE_SETTLE_S, the edge-to-corner jump
   (`sim.strategies.jump_figures.edge_to_corner`): the body turns about the horizontal axis n through
   the corner at right angles to the edge (n = c x u / |c x u|, c the centre of mass, u the vertical at
   the start); the far end of the edge lifts and the centre of mass rises from d (its distance from the
   edge) to |c| over the corner. The wheels with an axis component along n ("corner wheels") spin up to
   their share of the needed momentum times the speed factor, their reaction pressing the far end of
   the edge onto the floor (gently: at most half of m g c_x, gravity's moment about the far end for a
   body as long on either side of its centre, shared among them, and half their stall torque), while the
   other wheels with a component along the edge keep the edge LQR's volts; then the corner wheels' brakes
   lock them to the body (every winding floats) and their momentum about n turns the body up;
3. within CATCH_ANGLE of balance on the corner the brakes are released and the multi-wheel LQR designed
   for a ball at the corner takes over (`balancing` from here on: the runner's `balanced`);
4. a miss: a short jump (the corner wheels locked and the body turning back about n before the catch
   region) is judged by the rise its centre of mass reached, (h_peak - d) / (|c| - d), h = u_b . c
   (u_b the vertical in the body frame); one that got up and was lost by the LQR within HELD_S by the
   energy at the handover, (m g (h - d) + 1/2 Theta_0 (omega . n)^2) / (m g (|c| - d)). The next
   corner attempt's speed factor is scaled by sqrt(E_needed / E_reached), as the face-to-edge law does
   (same clamp). Once the body is back on its edge (its x axis horizontal, within CATCH_ANGLE of edge
   balance) or at rest on a face next to it, stage 1 starts again with a fresh law; at rest with the
   edge off the floor (the body rolled away over the corner), it gives up.

The reading on a corner device is the ball's: tilts (x, y) from balance on the corner and the body's
rate in the heading frame. With R = Ry(tilt_y) Rx(tilt_x) R0 (R0 the corner's upright attitude;
`sim.core.frames`), the vertical in the body frame is u_b = R^T z and the body rate omega_b = R^T
omega_heading (the heading cancels). The tilt about the edge from edge balance is
atan2(u_b,y, u_b,z) - atan2(c_y, c_z), its rate omega_b,x: what the floor edge device's own reading gives.

`extra_metrics`: the edge-to-corner jump's `needed_wheel_speed_rad_s` (lossless), `reached_wheel_speed_rad_s`
(the largest corner wheel's measured speed at its last brake), `jump_attempts`, `jump_margin`,
`jump_target_wheel_speed_rad_s`, `jump_energy_ratios`, `braked_at_s`; the face-to-edge stage's as
`face_needed_wheel_speed_rad_s`, `face_reached_wheel_speed_rad_s`, `face_jump_attempts` (over every
stage-1 law of the trial), `face_jump_margin` (None and 0 when the body started on its edge).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ..core.errors import StrategyError
from ..core.frames import rotation_about_x_y
from .base import Reading
from .jump3d import (CATCH_ANGLE, HELD_S, LOCKED, RATIO_CLAMP, SETTLE_S, SPEED_CAP, JumpLaw, JumpUp3D, RestWatch,
                     speed_loop_volts)
from .jump_figures import edge_to_corner, jump_margin

EDGE_SETTLE_S = 0.5        # held on the edge this long, still, before the corner jump (our choice)
EDGE_STILL_RAD = math.radians(2.0)   # ... within this tilt about the edge (our choice)
EDGE_STILL_RAD_S = 0.2               # ... and this rate about it (our choice)
EDGE_LEVEL = math.sin(math.radians(3.0))   # |u_b,x| below this: the edge (body x) lies level (our choice)
FACE_KEYS = ("needed_wheel_speed_rad_s", "reached_wheel_speed_rad_s", "jump_margin")


class JumpToCorner(JumpLaw):
    """Face to edge (when on a face), edge to corner, then the corner LQR (see the module docstring).
    Built by `sim.strategies.jump.BrakeJump` for a floor device balancing on a corner."""

    def __init__(self, *, device, params, rng) -> None:
        self._set_up(device, params, rng)
        self.edge_device = dataclasses.replace(device, mount="hinge")   # designs as a hinge at the edge
        self.fig = fig = edge_to_corner(device)
        self.n_axis = np.array(fig.axis)
        need = np.array(fig.wheel_speeds_rad_s)
        # a wheel at right angles to n in exact arithmetic can read a rounding-sized share: not a corner wheel
        self.used = np.abs(need) > 1e-9 * fig.needed_wheel_speed_rad_s
        need = np.where(self.used, need, 0.0)
        along_edge = np.array([abs(w.axis[0]) > 1e-9 for w in self.units])
        self.hold = along_edge & ~self.used
        if not self.hold.any():
            raise StrategyError("the edge-to-corner jump needs a wheel along the edge that takes no part in the "
                                "corner jump, to hold the edge while the others spin up")
        for i in np.flatnonzero(self.used):
            if self.units[i].brake_torque_n_m is None:
                raise StrategyError(f"wheel {i + 1} takes part in the edge-to-corner jump but has no brake_torque")
        self.need = need
        c = self.com = np.asarray(device.com_m, dtype=float)
        mg = device.mass_kg * device.gravity_m_s2
        share = float(np.sum(np.abs(need[self.used] / fig.needed_wheel_speed_rad_s)))
        hold = 0.5 * mg * abs(c[0]) / share
        ramp = params.ramp_torque if params.ramp_torque is not None else hold
        self.ramp = np.where(self.used, np.minimum(ramp, 0.5 * self.stall), 0.0)
        self.d, self.norm_c, self.mg = math.hypot(c[1], c[2]), float(np.linalg.norm(c)), mg
        self.edge_zero = math.atan2(c[1], c[2])
        self.r0 = np.array(device.upright())
        self.period = 1.0 / device.control_rate_hz
        self.max_attempts = params.max_attempts if params.max_attempts is not None else 5
        self.factor = float(params.margin)
        self.edge_reading = Reading()
        self._metrics = {"needed_wheel_speed_rad_s": fig.needed_wheel_speed_rad_s,
                         "reached_wheel_speed_rad_s": None, "jump_attempts": 0,
                         "jump_margin": jump_margin(need, self.reach), "jump_target_wheel_speed_rad_s": None,
                         "jump_energy_ratios": [], "braked_at_s": None}
        self._face = {"face_needed_wheel_speed_rad_s": None, "face_reached_wheel_speed_rad_s": None,
                      "face_jump_attempts": 0, "face_jump_margin": None}
        self.edge_law = None
        self.lqr = None
        self.balancing = False
        self._still_since = self._handover_s = self._ratio_at_handover = None
        self.rest = RestWatch(self.period)
        self.phase, self._first = "edge", True

    # -- what the reading says about the edge and the corner -------------------------------------------
    def _body_frame(self, reading: Reading):
        """(u_b, omega_b): the vertical and the body rate in the body frame (module docstring)."""
        tx, ty = reading.angles_rad[0], reading.angles_rad[1]
        r = np.array(rotation_about_x_y(tx, ty)) @ self.r0
        return r[2], r.T @ np.asarray(reading.rates_rad_s, dtype=float)

    def _edge_reading(self, reading: Reading, up, omega) -> Reading:
        tilt = math.atan2(up[1], up[2]) - self.edge_zero
        tilt = (tilt + math.pi) % (2.0 * math.pi) - math.pi
        e = self.edge_reading
        e.t_s, e.angles_rad, e.rates_rad_s = reading.t_s, (tilt,), (float(omega[0]),)
        e.wheel_speeds_rad_s = reading.wheel_speeds_rad_s
        e.angle_rad, e.rate_rad_s, e.wheel_speed_rad_s = tilt, float(omega[0]), reading.wheel_speed_rad_s
        return e

    def _corner_tilt(self, up) -> float:
        """The angle of the corner-to-centre-of-mass line from the vertical, rad."""
        return math.acos(max(-1.0, min(1.0, float(up @ self.com) / self.norm_c)))

    def _energy_ratio(self, h: float, rate_n: float) -> float:
        needed = self.mg * (self.norm_c - self.d)
        reached = self.mg * (h - self.d) + 0.5 * self.fig.inertia_kg_m2 * rate_n * rate_n
        return min(max(reached / needed, RATIO_CLAMP[0]), RATIO_CLAMP[1])

    # -- the law ----------------------------------------------------------------------------------------
    def decide(self, reading: Reading):
        up, omega = self._body_frame(reading)
        w = np.asarray(reading.wheel_speeds_rad_s, dtype=float)
        if self._first:      # already on the corner (its tilt about the edge reads 0 there too): balance
            self._first = False
            if self._corner_tilt(up) <= CATCH_ANGLE:
                return self._hand_over(reading, ratio=None)
        if self.phase.startswith("corner balance"):
            return self._balance(reading, up, omega, w)
        if self.phase == "edge" or self.phase.startswith("face"):
            return self._on_edge(reading, up, omega, w)
        if self.phase == "corner: spin up":
            return self._spin(reading, up, omega, w)
        if self.phase == "corner: brake":
            return self._watch_rise(reading, up, omega, w)
        if self.phase.startswith("corner: missed"):
            return self._wait_for_edge(reading, up, omega)
        return [0.0] * len(self.units)     # gave up

    def _on_edge(self, reading, up, omega, w):
        """Stage 1: the face-to-edge law (its jumps, then its edge LQR); the corner jump once still."""
        edge = self._edge_reading(reading, up, omega)
        if self.edge_law is None:
            self.edge_law = JumpUp3D(device=self.edge_device, params=self.params, rng=self.rng)
        law = self.edge_law
        volts = law.decide(edge)
        self.brake, self.open_circuit = law.brake, law.open_circuit
        self.phase = "edge" if law.phase == "balance" else f"face: {law.phase}"
        if law.phase == "gave up" or law.phase.startswith("gave up"):
            self._close_edge_law()
            self.edge_law, self.phase = None, "gave up on the face"
            return [0.0] * len(self.units)
        still = law.phase == "balance" and abs(edge.angle_rad) < EDGE_STILL_RAD and abs(edge.rate_rad_s) < EDGE_STILL_RAD_S
        if not still:
            self._still_since = None
        elif self._still_since is None:
            self._still_since = reading.t_s
        elif reading.t_s - self._still_since >= EDGE_SETTLE_S and self._metrics["jump_attempts"] < self.max_attempts:
            self._plan(w, reading.t_s)
            return self._spin(reading, up, omega, w)
        return volts

    def _close_edge_law(self) -> None:
        """Keep the face-to-edge stage's figures from the stage-1 law before it is dropped."""
        self._face = self._face_metrics()

    def _face_metrics(self) -> dict:
        """The face-to-edge stage's figures over every stage-1 law so far: the first need and margin, the
        last speed reached, the attempts summed."""
        out = dict(self._face)
        if self.edge_law is not None:
            own = self.edge_law.extra_metrics
            out["face_jump_attempts"] += own["jump_attempts"]
            for key in FACE_KEYS:
                if own[key] is not None and (out["face_" + key] is None or key == "reached_wheel_speed_rad_s"):
                    out["face_" + key] = own[key]
        return out

    @property
    def extra_metrics(self) -> dict:
        return {**self._metrics, **self._face_metrics()}

    def _plan(self, w: np.ndarray, t_s: float) -> None:
        """The corner attempt's targets: factor x need, capped by what each wheel reaches."""
        cap = SPEED_CAP * self.reach
        self.target = np.where(self.used, np.clip(self.factor * self.need, -cap, cap), 0.0)
        self._metrics["jump_target_wheel_speed_rad_s"] = float(np.max(np.abs(self.target)))
        self.w_ref = np.where(self.used, np.minimum(np.maximum(w * np.sign(self.target), 0.0), np.abs(self.target)), 0.0)
        self.ref_done_s = None
        self.peak_h = self.d
        self.phase = "corner: spin up"

    def _spin(self, reading, up, omega, w):
        """Corner wheels along their speed references; the other wheels keep the edge LQR's volts."""
        edge_volts = self.edge_law.decide(self._edge_reading(reading, up, omega))
        goal = np.abs(self.target)
        self.w_ref = np.minimum(self.w_ref + self.ramp / self.inertia * self.period, goal)
        if self.ref_done_s is None and np.all(self.w_ref >= goal):
            self.ref_done_s = reading.t_s
        reached = np.all(~self.used | (np.abs(w) >= 0.99 * goal) & (w * np.sign(self.target) > 0))
        if self.ref_done_s is not None and (reached or reading.t_s - self.ref_done_s > SETTLE_S):
            return self._engage(w, reading.t_s)
        spin = speed_loop_volts(self.units, self.inertia, self.ramp, self.target, self.w_ref, w)
        return [s if u else e for s, e, u in zip(spin, edge_volts, self.used)]

    def _engage(self, w: np.ndarray, t_s: float):
        self.brake, self.open_circuit, self.phase = tuple(bool(u) for u in self.used), True, "corner: brake"
        m = self._metrics
        m["jump_attempts"] += 1
        m["reached_wheel_speed_rad_s"] = self.reached = float(np.max(np.abs(w[self.used])))
        m["braked_at_s"] = float(t_s)
        return [0.0] * len(self.units)

    def _watch_rise(self, reading, up, omega, w):
        h = float(up @ self.com)
        rate_n = float(omega @ self.n_axis)
        if self._corner_tilt(up) <= CATCH_ANGLE:
            return self._hand_over(reading, ratio=self._energy_ratio(h, rate_n))
        self.peak_h = max(self.peak_h, h)
        locked = np.all(np.abs(w[self.used]) <= LOCKED * self.reached)
        if locked and rate_n <= 0.0:      # turned back (or never rose) short of the catch region
            self._judge(self._energy_ratio(self.peak_h, 0.0))
            self._missed("corner: missed short")
        return [0.0] * len(self.units)

    def _hand_over(self, reading, *, ratio):
        self.brake, self.open_circuit, self.balancing, self.phase = False, False, True, "corner balance"
        self._ratio_at_handover, self._handover_s = ratio, reading.t_s
        self.lqr = self._lqr_cls(device=self.device, params=self._lqr_params, rng=self.rng)
        return self.lqr.decide(reading)

    def _balance(self, reading, up, omega, w):
        if self._corner_tilt(up) <= self.params.release_angle:
            if self._ratio_at_handover is not None and reading.t_s - self._handover_s > HELD_S:
                self._ratio_at_handover = None
            return self.lqr.decide(reading)
        if self._ratio_at_handover is not None:     # it got up but the LQR lost it soon: a miss
            self._judge(self._ratio_at_handover)
        self.balancing, self.lqr = False, None
        self._missed("corner: missed, fallen")
        return [0.0] * len(self.units)

    def _judge(self, ratio: float) -> None:
        self._metrics["jump_energy_ratios"].append(ratio)
        self.factor *= math.sqrt(1.0 / ratio)
        self._ratio_at_handover = None

    def _missed(self, phase: str) -> None:
        self.brake, self.open_circuit, self.phase = False, True, phase
        self._close_edge_law()
        self.edge_law, self._still_since = None, None
        self.rest.reset()

    def _wait_for_edge(self, reading, up, omega):
        """After a miss: back to stage 1 once on the edge or at rest next to it; give up if the edge is off the floor."""
        level = abs(up[0]) < EDGE_LEVEL
        tilt = self._edge_reading(reading, up, omega).angle_rad
        if level and abs(tilt) <= CATCH_ANGLE:
            self.open_circuit, self.phase = False, "edge"
            return self._on_edge(reading, up, omega, np.asarray(reading.wheel_speeds_rad_s, dtype=float))
        # the body rate judged for rest as the face-to-edge law judges it (`jump3d.RestWatch`)
        if self.rest.rested(reading.t_s, omega):
            if not level or abs(tilt) >= 0.5 * math.pi:
                self.phase = "gave up: the balance edge is off the floor"
            elif self._metrics["jump_attempts"] >= self.max_attempts:
                self.phase = "gave up"
            else:
                self.open_circuit, self.phase = False, "face"
                return self._on_edge(reading, up, omega, np.asarray(reading.wheel_speeds_rad_s, dtype=float))
        return [0.0] * len(self.units)
