"""Estimator plug-ins for tests: a plain one, one that fails, and a class that is not an estimator."""

import math

from sim.strategies.estimators import Estimator, EstimatorParams


class TrueTiltOnly(Estimator):
    """The accelerometer's tilt alone (times `gain`) and the gyro's rate: no filtering at all."""

    class Params(EstimatorParams):
        gain: float = 1.0

    def update(self, t_s, gyro_rad_s, accel_m_s2):
        return self.params.gain * math.atan2(accel_m_s2[1], accel_m_s2[2]), gyro_rad_s[0]


class BreaksAfter(Estimator):
    class Params(EstimatorParams):
        after_s: float = 0.1

    def update(self, t_s, gyro_rad_s, accel_m_s2):
        if t_s >= self.params.after_s:
            raise RuntimeError("IMU bus lost (deliberate test failure)")
        return math.atan2(accel_m_s2[1], accel_m_s2[2]), gyro_rad_s[0]


class NotAnEstimator:
    pass
