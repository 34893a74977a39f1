"""The sensors of a device with an IMU: today's `SensorSuite` plus the IMU's samples and the estimator.

`ImuSensing.read` has the suite's signature and returns its encoder readings; it also takes the
IMU sample the controller sees at this tick (the latest one at the IMU's own rate, from the true
state `sensors.delay` earlier) and writes the raw readings into the trace. With an estimator,
`wrap(command)` gives the runner a command function that first runs the estimator on that
sample (inside the strategy's time window: its time counts in the budget and whatever it raises
ends the trial as `strategy_failed`), puts its angle and rate in the reading, records them, and
then calls the law. Either way the reading carries the sample itself (`imu_gyro_rad_s`,
`imu_accel_m_s2`, in the IMU's own axes), for laws and firmware that read the chip.

The body's angular acceleration for the accelerometer is the backward difference of the engine's
body rate over the last physics step, (w[j] - w[j-1]) / dt: exactly the engine's acceleration
over that step (its semi-implicit Euler step sets w[j] = w[j-1] + a dt), half a step older than
the sample instant. The angle is the trace's (the trapezoid of the rates, at the rate's instant).

Randomness: the IMU draws from its own generator seeded by (trial seed, IMU_STREAM), so the
trial's generator, and with it the encoder noise and the strategy's draws, is untouched.
"""

from __future__ import annotations

import numpy as np

from ..core.errors import StrategyError
from ..core.exception_text import describe_exception
from .imu import ImuModel, axis_mapping, mat_vec, transpose
from .sensors import SensorSuite

IMU_STREAM = (18, 1)        # SeedSequence spawn key of the IMU's generator (ours)
TIMING_STREAM = (18, 2)     # and of the loop timing's jitter
IMU_COLUMNS = ("imu_gyro_x_rad_s", "imu_gyro_y_rad_s", "imu_gyro_z_rad_s",
               "imu_accel_x_m_s2", "imu_accel_y_m_s2", "imu_accel_z_m_s2")
ESTIMATOR_COLUMNS = ("estimated_angle_rad", "estimated_rate_rad_s")


def sensing_columns(scenario) -> tuple[str, ...]:
    """The trace columns this scenario's sensors add (none without an IMU)."""
    s = scenario.sensors
    if s.imu is None:
        return ()
    return IMU_COLUMNS + (ESTIMATOR_COLUMNS if s.estimator is not None else ())


def stream(seed: int, key: tuple) -> np.random.Generator:
    """An independent generator for one part of a trial (the trial's own generator is not drawn from)."""
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=key))


def make_sensors(scenario, *, step_s: float, n_ticks: int, rng, seed: int, trace):
    """Today's `SensorSuite` for a scenario without an IMU; an `ImuSensing` otherwise."""
    if scenario.sensors.imu is None:
        return SensorSuite(scenario.sensors, step_s=step_s, n_ticks=n_ticks, rng=rng)
    return ImuSensing(scenario, step_s=step_s, n_ticks=n_ticks, rng=rng, seed=seed, trace=trace)


class ImuSensing:
    def __init__(self, scenario, *, step_s: float, n_ticks: int, rng, seed: int, trace):
        s = scenario.sensors
        if s.angle is None:      # no encoder: the suite still draws its noise (the estimate replaces it)
            from ..model.scenario import AngleSensor
            s = s.model_copy(update={"angle": AngleSensor()})
        self.suite = SensorSuite(s, step_s=step_s, n_ticks=n_ticks, rng=rng)
        self._suite_read = self.suite.read
        imu = s.imu
        rate = imu.rate if imu.rate is not None else s.rate
        self.imu_steps = int(round(1.0 / (rate * step_s)))
        self.imu = ImuModel(imu, rate_hz=rate, gravity_m_s2=scenario.world.gravity, rng=stream(seed, IMU_STREAM))
        self._sample = self.imu.sample_hinge
        self.to_body = transpose(axis_mapping(imu.orientation.axes))   # what firmware knows: S^T
        self.dt = step_s
        self.delay_steps = self.suite.delay_steps
        self.spec = s.estimator
        self.period_s = 1.0 / s.rate
        self.gravity = scenario.world.gravity
        self.estimator = None
        self.cols = tuple(memoryview(trace.extra[name]) for name in IMU_COLUMNS)
        self.est_cols = [memoryview(trace.extra[name]) for name in ESTIMATOR_COLUMNS] if self.spec else None
        self.meas_cols = (memoryview(trace.meas_angle), memoryview(trace.meas_rate))
        self._sample_row = -1
        self.k = 0
        self.gyro = self.accel = (0.0, 0.0, 0.0)

    def read(self, k, angle, rate, wheel_angle, wheel_speed):
        meas = self._suite_read(k, angle, rate, wheel_angle, wheel_speed)
        j = k - self.delay_steps
        if j < 0:
            j = 0
        j -= j % self.imu_steps        # the latest sample at the IMU's own rate
        if j != self._sample_row:
            self._sample_row = j
            w = float(rate[j])
            alpha = (w - rate[j - 1]) / self.dt if j > 0 else 0.0
            self.gyro, self.accel = self._sample(j * self.dt, float(angle[j]), w, alpha)
        c0, c1, c2, c3, c4, c5 = self.cols
        c0[k], c1[k], c2[k] = self.gyro
        c3[k], c4[k], c5[k] = self.accel
        self.k = k
        return meas

    def wrap(self, command):
        """The runner's command function: the estimator, then the law (see the module docstring)."""
        if self.spec is None:
            def sample_then_decide(reading):
                reading.imu_gyro_rad_s, reading.imu_accel_m_s2 = self.gyro, self.accel
                return command(reading)

            return sample_then_decide
        est_angle, est_rate = self.est_cols
        meas_angle, meas_rate = self.meas_cols
        to_body = self.to_body
        plain = to_body == ((1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 0.0, 1.0))     # axes as the body's

        def estimate_then_decide(reading):
            reading.imu_gyro_rad_s, reading.imu_accel_m_s2 = self.gyro, self.accel
            try:
                if self.estimator is None:
                    self.estimator = self.spec.build(period_s=self.period_s, gravity_m_s2=self.gravity)
                gyro, accel = (self.gyro, self.accel) if plain else (mat_vec(to_body, self.gyro), mat_vec(to_body, self.accel))
                angle, w = self.estimator.update(reading.t_s, gyro, accel)
                angle, w = float(angle), float(w)
            except Exception as exc:  # plug-in code: its failure is the trial's outcome
                raise StrategyError(f"the estimator failed: {describe_exception(exc)}") from None
            k = self.k
            est_angle[k], est_rate[k] = meas_angle[k], meas_rate[k] = angle, w
            reading.angle_rad, reading.rate_rad_s = angle, w
            return command(reading)

        return estimate_then_decide
