"""LQR balance designed for the loop rate and sensor delay: one wheel on [angle, body rate, wheel
speed] (`LqrBalance`), or one to three wheels on any axes, hinge or ball mount (`MultiWheelLqr`)."""

from __future__ import annotations

import math
import struct
from typing import Annotated

import numpy as np
from pydantic import Field

from ..core.errors import StrategyError
from .base import Reading, Strategy, StrategyParams
from .lqr_design import DelayPredictor, design_lqr, design_lqr_spec, state_kind


class LqrBalance(Strategy):
    """volts = -K x, with K from the discrete LQR design at the control rate (zero-order hold).

    With a sensor delay the state fed to K is the model's prediction of the present state from
    the delayed reading and the commands sent since (equivalent to LQR on the delay-augmented
    state). Parameters: `weights` (3 diagonal state weights, SI: 1/rad^2, s^2/rad^2, s^2/rad^2)
    and `effort` (input weight, 1/V^2); defaults by Bryson's rule, see `sim.strategies.lqr_design`.

    A device with `linear_spec()` (several wheels, a tilted wheel axis or a ball mount) gets
    `MultiWheelLqr` instead: the same design for one voltage per wheel,
    the three weights then applying to every angle, every body rate and every wheel speed.

    With `drive.mode: current` the law is designed on current input (the device's linear model with
    torque k_t i) and answers in amps; `effort` is then in 1/A^2.
    """

    kind = "lqr"
    goal = "balance"
    commands_current = True

    class Params(StrategyParams):
        weights: Annotated[list[Annotated[float, Field(ge=0, allow_inf_nan=False)]], Field(min_length=3, max_length=3)] | None = None
        effort: Annotated[float, Field(gt=0, allow_inf_nan=False)] | None = None

    def __new__(cls, **kw):
        if cls is LqrBalance and hasattr(kw.get("device"), "linear_spec"):
            cls = MultiWheelLqr
        return super().__new__(cls)

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.design = design_lqr(self.device, weights=self.params.weights, effort=self.params.effort)
        self.K = self.design.K_discrete
        self.predictor = DelayPredictor(self.design, delay_s=self.device.delay_s)
        self._gx, self._gu = self.folded_gains(self.design, self.predictor)
        self.phase = "balance"
        self._volts = self.device.drive_mode != "current"

    @staticmethod
    def folded_gains(design, pred) -> tuple[tuple[float, float, float], tuple[float, ...]]:
        """K times the predictor, as gains on the reading and on the held commands.

        The predictor is linear: x_now = Ad^n (Phi_f x_meas + Gam_f u0) + sum_i Ad^(n-1-i) Bd u(i+1),
        so K x_now = g_x . x_meas + g_u . u. Precomputed once, this turns each tick's small
        matrix products into three float products and a short dot product (same law, fewer steps).
        """
        K = design.K_discrete
        if not pred.active:
            return tuple(float(k) for k in K), ()
        powers = [np.eye(3)]
        for _ in range(pred.n):
            powers.append(pred.Ad @ powers[-1])
        g_x = K @ powers[pred.n] @ pred.Phi_f
        g_u = [K @ powers[pred.n] @ pred.Gam_f] + [K @ powers[pred.n - 1 - i] @ pred.Bd for i in range(pred.n)]
        return tuple(float(g) for g in g_x), tuple(float(g) for g in g_u)

    def decide(self, reading: Reading) -> float:
        gx = self._gx
        v = -(gx[0] * reading.angle_rad + gx[1] * reading.rate_rad_s + gx[2] * reading.wheel_speed_rad_s)
        if self._gu:
            held = self.predictor.u
            for g, u in zip(self._gu, held):
                v -= g * u
            # what the drive will apply, recorded as DelayPredictor.record does (inline: every tick)
            cap = self.supply_v if self._volts else self.device.command_limit
            del held[0]
            held.append(cap if v > cap else (-cap if v < -cap else v))
        return v


class MultiWheelLqr(LqrBalance):
    """volts = -K x, one voltage per wheel, K from the discrete multi-input LQR design at the loop rate.

    State x (`sim.model.linear3d`): hinge [angle, body_rate, wheel speeds...]; ball [tilt_x,
    tilt_y, rate_x, rate_y, (rate_z when a wheel acts about the vertical), wheel speeds...], read
    from the reading's vector form (`angles_rad`, `rates_rad_s`, `wheel_speeds_rad_s`). With a
    sensor delay the gains act on the present state predicted from the delayed reading and the
    commands applied since (each clamped to its wheel's supply, and to the bus the reading reports
    when a pack has sagged below it, as the bridges do), folded into
    gains on the reading and on the held commands once at construction.
    `decide` returns a list of volts in wheel order. With a current-mode drive (`spec.drive_mode`
    "current") the design's inputs are one current per wheel (`sim.model.linear3d`: torque k_t i) and
    `decide` returns amps, the held commands clamped to each wheel's current limit (as on one wheel).
    """

    def __init__(self, *, device, params, rng) -> None:
        Strategy.__init__(self, device=device, params=params, rng=rng)
        self.spec = device.linear_spec()
        if not hasattr(self.spec, "linear_model"):
            raise StrategyError(f"the device's linear_spec() gave {type(self.spec).__name__}, not a LinearSpec; "
                                "return sim.model.linear3d.as_linear_spec(...) of its fields")
        self.design = design_lqr_spec(self.spec, weights=params.weights, effort=params.effort)
        self.K = self.design.K_discrete
        self.predictor = DelayPredictor(self.design, delay_s=self.spec.delay_s)
        G_x, G_u = self.predictor.folded_gains(self.K)
        kinds = [state_kind(name) for name in self.design.state_names]
        self._n_angles, self._n_rates, self._n_wheels = kinds.count(0), kinds.count(1), kinds.count(2)
        self.supplies_v = np.array([w.supply_v for w in self.spec.wheels], dtype=float)
        current = getattr(self.spec, "drive_mode", "voltage") == "current"
        # the held commands' clamps: each wheel's supply, V, or its current limit, A (no bus to follow)
        self._supplies = ([w.command_limit("current") for w in self.spec.wheels] if current
                          else self.supplies_v.tolist())
        self._lowest_supply_v = -math.inf if current else min(self._supplies)
        self._min_cap = min(self._supplies)
        # one matrix on one buffer [measured state, held commands oldest first], so that a tick is a
        # few numpy calls whatever the delay (the same law as K times the predicted state)
        self._G = np.hstack([G_x, *G_u])
        self._minus_G = -self._G    # u = -G z as one product: negation is exact, so the same floats
        self._z = np.zeros(self._G.shape[1])
        # each tick's [measured state, held commands] written into z's memory in one C call (the same
        # doubles numpy's slice assignment stores, in half its instructions)
        self._fill_z = struct.Struct(f"{self._G.shape[1]}d").pack_into
        self._z_bytes = memoryview(self._z).cast("B")
        self._n_x, self._n_u = G_x.shape[1], len(self.supplies_v)
        self._held = [0.0] * (self._G.shape[1] - self._n_x)   # V, oldest tick first, plain floats
        self.phase = "balance"

    def held_commands(self) -> np.ndarray:
        """The commands the delay predictor holds, oldest first, as applied (clamped), V or A (rows: ticks)."""
        return np.array(self._held, dtype=float).reshape(-1, self._n_u)

    def _measured(self, reading: Reading) -> list:
        """The measured state in the design's order, a list of floats (checked against the design's sizes)."""
        na, nr, nw = self._n_angles, self._n_rates, self._n_wheels
        angles, rates, wheels = reading.angles_rad, reading.rates_rad_s, reading.wheel_speeds_rad_s
        if len(angles) < na or len(rates) < nr or len(wheels) != nw:
            raise StrategyError(f"the reading has {len(angles)} angles, {len(rates)} rates and {len(wheels)} wheel "
                                f"speeds; this device's law needs {na}, {nr} and {nw}")
        return [*angles[:na], *rates[:nr], *wheels]

    def state_from(self, reading: Reading) -> np.ndarray:
        """The measured state vector in the design's order (a view of a buffer reused every tick)."""
        x = self._z[:self._n_x]
        x[:] = self._measured(reading)
        return x

    def decide(self, reading: Reading) -> list[float]:
        held = self._held
        angles, rates, wheels = reading.angles_rad, reading.rates_rad_s, reading.wheel_speeds_rad_s
        if len(angles) == self._n_angles and len(rates) == self._n_rates and len(wheels) == self._n_wheels:
            self._fill_z(self._z_bytes, 0, *angles, *rates, *wheels, *held)   # [measured state, held commands]
        else:       # a reading with more axes than the design's states (or a wrong one: `_measured` says so)
            self._fill_z(self._z_bytes, 0, *self._measured(reading), *held)
        v = self._minus_G.dot(self._z).tolist()
        if held:            # a delay: drop the oldest held commands, append this tick's as the drive applies them
            del held[:self._n_u]
            caps, bus, lo = self._supplies, reading.supply_v, self._min_cap
            if bus < self._lowest_supply_v:     # a sagging pack: the bridges give at most the bus
                caps = [c if c < bus else bus for c in caps]
            else:
                for x in v:
                    if not -lo <= x <= lo:
                        break
                else:       # every command within every clamp (the usual tick): held as it is
                    held += v
                    return v
            held += [s if x > s else (-s if x < -s else x) for x, s in zip(v, caps)]
        return v
