"""The scenario's sensing-and-timing sections: an IMU on the body, its estimator, encoder limits
and the controller's timing. All optional: a scenario without them runs exactly as before.

Frames. The body frame has x along the pivot axis, z along the body axis (from the pivot
through the body's centre of mass side, up when the angle is 0) and y = z x x; a positive body
angle turns the body about +x by the right-hand rule. An IMU's own axes are the body's axes
turned by its small `misalignment` (roll about body x, then pitch about y, then yaw about z)
and then relabelled by `axes`: `axes: [y, -x, z]` says that the IMU's x axis points along the
body's +y, its y axis along the body's -x. Bounds are ours, generous by orders of magnitude.
"""

from __future__ import annotations

import math
from typing import Annotated, Any, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, ValidationInfo, model_validator

from ..core.units import Q

MAX_RATE_HZ = 100_000


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, arbitrary_types_allowed=True)


def _three(kind: str, lo: float, hi: float):
    """A 3-vector of quantities of `kind` (a list of three), each within [lo, hi] in SI."""
    return Annotated[list[Q(kind, ge=lo, le=hi)], Field(min_length=3, max_length=3)]


class GyroSpec(_Strict):
    """Rate gyro errors, per IMU axis, SI. A reading is
    true * (1 + scale_error) + bias + drift + white noise, then clipped to +-range and rounded to
    whole `resolution` steps."""

    noise_density: Q("rate_noise_density", ge=0, le=10.0) = 0.0
    """White rate noise, rad/s/sqrt(Hz) (the angle random walk N of IEEE Std 952)."""
    bias: _three("angular_speed", -100.0, 100.0) = [0.0, 0.0, 0.0]
    """Fixed bias per IMU axis, rad/s."""
    bias_instability: Q("rate_random_walk", ge=0, le=10.0) = 0.0
    """The bias's random walk, rad/s per sqrt(s): the drift after t seconds has a standard
    deviation of this times sqrt(t) (IEEE Std 952's rate random walk K; its Allan deviation rises
    as K sqrt(tau/3)). A datasheet's flat bias-instability floor is not modelled."""
    scale_error: Q("fraction", ge=-0.5, le=0.5) = 0.0
    range: Q("angular_speed", gt=0, le=1e5) = math.inf
    """Saturation, rad/s (readings beyond +-range read +-range)."""
    resolution: Q("angular_speed", ge=0, le=100.0) = 0.0
    """One LSB, rad/s (0: no quantisation)."""


class AccelSpec(_Strict):
    """Accelerometer errors, per IMU axis, SI (the same reading chain as the gyro's, no drift)."""

    noise_density: Q("accel_noise_density", ge=0, le=100.0) = 0.0
    """White acceleration noise, m/s^2/sqrt(Hz)."""
    bias: _three("acceleration", -1000.0, 1000.0) = [0.0, 0.0, 0.0]
    """Fixed bias per IMU axis, m/s^2."""
    scale_error: Q("fraction", ge=-0.5, le=0.5) = 0.0
    range: Q("acceleration", gt=0, le=1e5) = math.inf
    """Saturation, m/s^2."""
    resolution: Q("acceleration", ge=0, le=100.0) = 0.0
    """One LSB, m/s^2 (0: no quantisation)."""


# Full scales a raw reading is taken against when the scenario gives neither a resolution nor a
# range: +-2000 deg/s and +-16 g over a signed 16-bit word (common MEMS settings; common practice,
# no source).
DEFAULT_GYRO_FULL_SCALE_RAD_S = math.radians(2000.0)
DEFAULT_ACCEL_FULL_SCALE_M_S2 = 16 * 9.80665


def raw_lsb(spec, default_full_scale: float) -> float:
    """One LSB of the sensor's signed 16-bit raw word, SI: its `resolution` when set, else its
    `range` over 32768, else `default_full_scale` over 32768."""
    if spec.resolution > 0:
        return float(spec.resolution)
    full = spec.range if math.isfinite(spec.range) else default_full_scale
    return float(full) / 32768.0


class ImuOrientation(_Strict):
    axes: Annotated[list[Literal["x", "y", "z", "-x", "-y", "-z"]], Field(min_length=3, max_length=3)] = ["x", "y", "z"]
    """The body axis each IMU axis points along (a swapped or inverted axis is a different list)."""
    roll: Q("angle", ge=-math.pi, le=math.pi) = 0.0
    """Misalignment about the body's x (pivot) axis, rad: on the hinge this is a tilt offset."""
    pitch: Q("angle", ge=-math.pi, le=math.pi) = 0.0
    yaw: Q("angle", ge=-math.pi, le=math.pi) = 0.0

    @model_validator(mode="after")
    def _a_frame(self):
        if len({a.lstrip("-") for a in self.axes}) != 3:
            raise ValueError(f"@axes: each of x, y and z once (with an optional '-'), found {self.axes}")
        return self


class ImuSpec(_Strict):
    at: _three("length", -100.0, 100.0) = [0.0, 0.0, 0.0]
    """Mount point in the body frame, m (from the pivot; [0, 0, 0.2] is 20 cm up the body axis)."""
    orientation: ImuOrientation = ImuOrientation()
    rate: Q("frequency", gt=0, le=MAX_RATE_HZ) | None = None
    """Output data rate, Hz (a whole number of physics steps per sample); default: the control rate."""
    gyro: GyroSpec = GyroSpec()
    accel: AccelSpec = AccelSpec()


def _estimator_from_raw(raw: Any, info: ValidationInfo):
    from ..strategies.estimators import resolve_estimator
    context = info.context or {}
    from pathlib import Path
    return resolve_estimator(raw, base_dir=context.get("base_dir", Path.cwd()), anywhere=context.get("in_memory", False))


EstimatorField = Annotated[Any, BeforeValidator(_estimator_from_raw)]
"""`sensors.estimator`: {kind: complementary, ...}, {kind: kalman, ...} or {plugin: ...}."""


class EncoderLimits(_Strict):
    """Limits of an encoder read over a bus (mixed into the angle and wheel sensor sections)."""

    max_speed: Q("angular_speed", gt=0, le=1e5) | None = None
    """Fastest rotation the sensor tracks, rad/s. Beyond it the sensor loses track: its position
    output stays at the last tracked value (so a speed from its counts reads zero) until the
    speed falls below the limit again, then it reads the true position."""
    update_rate: Q("frequency", gt=0, le=MAX_RATE_HZ) | None = None
    """How often a new value is read over the bus, Hz (a whole number of physics steps); between
    reads the controller sees the last value."""
    latency: Q("time", ge=0, le=1.0) = 0.0
    """Age of a value when it is read, s, on top of `sensors.delay` (whole physics steps)."""


class Timing(_Strict):
    """The controller's timing on the physics step grid (see `sim.physics.timing`)."""

    compute_time: Q("time", ge=0, le=1.0) = 0.0
    """From a tick's sample to its command reaching the drive, s (on top of `sensors.delay`)."""
    jitter: Q("time", ge=0, le=1.0) = 0.0
    """Each tick starts late by a uniform random amount in [0, jitter), s (seeded by the trial)."""
    overrun: Literal["skip", "hold"] = "skip"
    """When a tick's command is not ready by the next tick's start: `skip` lets it finish and
    skips the ticks that fall due meanwhile; `hold` drops the late command (the drive keeps the
    previous one) and starts the next tick on time. Either way each event counts in
    `loop_overruns`."""

    def compute_steps(self, step_s: float) -> int:
        """The compute time in whole physics steps: how late a command reaches the drive (rounded to
        the nearest step, `sim.physics.timing`)."""
        return int(round(self.compute_time / step_s))


def check_sensing(sensors, world_step_s: float, control_rate_hz: float, timing) -> None:
    """Cross-field rules of the sensing sections; raises ValueError("@sensors...: ...")."""
    if sensors.angle is None and sensors.imu is None:
        raise ValueError("@sensors.angle: a device needs an angle sensor, or an IMU (sensors.imu) with an estimator")
    if sensors.imu is not None and sensors.angle is None and sensors.estimator is None:
        raise ValueError("@sensors.estimator: an IMU-only device (sensors.angle: null) needs an estimator to make "
                         "its angle and rate, e.g. {kind: complementary, time_constant: 0.5 s} or "
                         "{kind: kalman, measurement_noise: 1 deg}")
    if sensors.estimator is not None and sensors.imu is None:
        raise ValueError("@sensors.estimator: an estimator needs an IMU (sensors.imu) to read")
    rates = [("sensors.imu.rate", sensors.imu.rate if sensors.imu is not None else None)]
    for name in ("angle", "wheel"):
        section = getattr(sensors, name)
        if section is not None:
            rates.append((f"sensors.{name}.update_rate", section.update_rate))
    for key, rate in rates:
        if rate is None:
            continue
        ratio = 1.0 / (rate * world_step_s)
        if ratio < 0.999 or abs(ratio - round(ratio)) > 1e-6 * ratio:
            raise ValueError(f"@{key}: 1/{rate:g} Hz must be a whole number of physics steps ({world_step_s:g} s)")
    if timing is not None and timing.jitter >= 1.0 / control_rate_hz:
        raise ValueError(f"@timing.jitter: {timing.jitter:g} s must be shorter than the control period "
                         f"({1.0 / control_rate_hz:g} s), so that ticks keep their order")
