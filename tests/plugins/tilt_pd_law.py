"""A plain tilt PD in the vector form of the strategy contract, for the 3D runner's tests (the
demos use the multi-input `lqr`). Not a design method: its gains were picked by trying a small
grid; it ignores the coupling between axes and the wheels' limits that an LQR design weighs."""

from __future__ import annotations

import numpy as np

from sim.strategies import Strategy, StrategyParams


class TiltPD(Strategy):
    """A PD on the tilts and rates, mapped to the wheels through their axes, with wheel-speed feedback.

    Near upright the tilts (about world x and y) and the world rates form a small rotation vector;
    the wanted reaction torque on the body is -(kp angle + kd rate). A wheel driven with +V pushes the
    body the negative way about its axis, which points along R0 a_i in the world near upright (R0 the
    upright attitude), so each wheel gets V = (R0 a_i) . (kp angle + kd rate) + kw * wheel speed
    (SI gains: V/rad, V s/rad, V s/rad)."""

    kind = "tilt_pd"

    class Params(StrategyParams):
        kp: float = 60.0
        kd: float = 4.0
        kw: float = 0.01

    def __init__(self, **kw):
        super().__init__(**kw)
        if hasattr(self.device, "upright"):     # a 3D device (sim.model.device3d.Device3D)
            r0 = np.array(self.device.upright())
            # plain floats from here on: a few numbers a tick cost less in Python than through numpy
            self.axes = [tuple(float(v) for v in r0 @ np.array(w.axis)) for w in self.device.wheels]
        else:                                   # the one-wheel hinge device: its wheel on the hinge axis
            self.axes = [(1.0, 0.0, 0.0)]
        self.gains = (float(self.params.kp), float(self.params.kd), float(self.params.kw))

    def decide(self, reading):
        kp, kd, kw = self.gains
        angles, rates = reading.angles_rad, reading.rates_rad_s
        if len(rates) == 3:     # ball mount: tilts about x and y, rates about x, y, z
            wx, wy, wz = kp * angles[0] + kd * rates[0], kp * angles[1] + kd * rates[1], kd * rates[2]
        else:                   # hinge: the angle and rate about x
            wx, wy, wz = kp * angles[0] + kd * rates[0], 0.0, 0.0
        return [ax * wx + ay * wy + az * wz + kw * s for (ax, ay, az), s in zip(self.axes, reading.wheel_speeds_rad_s)]
