"""Test-local laws for 3D devices (vector form of the strategy contract), not the LQR."""

from __future__ import annotations

import numpy as np

from sim.strategies import Strategy, StrategyParams


class TiltPD(Strategy):
    """A PD on the tilts and rates, mapped to the wheels through their axes, with wheel-speed damping.

    The wanted reaction torque on the body (world frame, about x and y, and z's rate) is
    -(kp angle + kd rate); a wheel driven with +V pushes the body the negative way about its axis,
    so each wheel gets V = a_i . (kp angle + kd rate) + kw * wheel speed (SI gains: V/rad, V s/rad)."""

    kind = "tilt_pd"

    class Params(StrategyParams):
        kp: float = 60.0
        kd: float = 4.0
        kw: float = 0.01

    def __init__(self, **kw):
        super().__init__(**kw)
        self.axes = np.array([w.axis for w in self.device.wheels])

    def decide(self, reading):
        angle = np.zeros(3)
        angle[: len(reading.angles_rad)] = reading.angles_rad
        rate = np.zeros(3)
        rate[: len(reading.rates_rad_s)] = reading.rates_rad_s
        want = self.params.kp * angle + self.params.kd * rate
        return self.axes @ want + self.params.kw * np.array(reading.wheel_speeds_rad_s)


class TwoVolts(Strategy):
    """Returns two voltages whatever the device: the runner must refuse it on a three-wheel device."""

    kind = "two_volts"

    class Params(StrategyParams):
        pass

    def decide(self, reading):
        return (0.0, 0.0)
