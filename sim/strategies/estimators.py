"""Estimators: how the controller makes the law's body angle and rate from an IMU.

An estimator runs on the device's controller beside the law, so it lives with the strategies
and follows their rules. The contract (numbered like the strategy's):

1. Construction. The runner builds one per trial as ``Cls(params=..., period_s=..., gravity_m_s2=...)``:
   `params` an instance of the class's `Params` (validated at scenario load, frozen, unknown keys
   refused), `period_s` the control period, s, `gravity_m_s2` the scenario's gravity.
2. The update. ``update(t_s, gyro_rad_s, accel_m_s2) -> (angle_rad, rate_rad_s)`` is called once
   per control tick, in time order, with the latest IMU sample as two 3-tuples of floats in the
   body frame (x along the pivot axis, z along the body axis; `sim.model.sensing`): the IMU's
   readings turned back through its nominal axis mapping (what firmware knows), not its unknown
   misalignment. It returns the body angle about the pivot axis (0 upright, right-hand rule
   about +x, rad) and the body rate (rad/s) for the law's reading.
3. Failure. Whatever `update` or `__init__` raises ends the trial as `strategy_failed` (the
   estimator's time counts in the strategy's budget); a non-finite output reaches the law.
4. Registration. Built-ins are named in `ESTIMATORS`; a plug-in is any subclass named as
   `{plugin: "file.py:Class", ...params}` or `"package.module:Class"`, loaded by the strategy
   registry's rules (a file must lie in the scenario's folder unless the user allows others; its
   import is tried in a forked child first). Entry points are not searched for estimators.
5. The vector form (3D devices). ``update_tilts(t_s, gyro_rad_s, accel_m_s2) -> (tilts_rad,
   rates_rad_s)`` is called instead of `update` on a 3D device, once per tick, with the readings
   turned into the upright frame: the body frame turned by the device's upright attitude, so that
   at upright (heading 0) it is the world frame (`sim.core.frames`; on a hinge device, turned about
   x only). It returns the tilts about world x and y (R = Rz(heading) Ry(tilt_y) Rx(tilt_x)
   relative to upright, rad) and the body's rates in the heading frame (the world frame turned
   about the vertical by the heading; rad/s), as many as it knows: the runner takes one tilt and
   one rate on a hinge, two tilts and three rates elsewhere. `tilt_axes` says how many tilts it
   gives: the base's `update_tilts` wraps `update` (one tilt: the angle about x, and the x rate),
   so every one-axis estimator, plug-ins included, runs on a 3D hinge unchanged; a ball or floor
   corner device needs `tilt_axes = 2` (checked at load).

Tilt from the accelerometer on the hinge: with specific force f = (f_x, f_y, f_z) in the body
frame, a body at rest at angle theta reads f_y = g sin(theta), f_z = g cos(theta), so
theta_acc = atan2(f_y, f_z) (rigid-body kinematics; `sim.physics.imu`).
"""

from __future__ import annotations

import importlib
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, ClassVar

from pydantic import BaseModel, ConfigDict, ValidationError

from ..core.units import Q


class EstimatorParams(BaseModel):
    """Base for an estimator's parameters: validated once at load, frozen, unknown keys rejected."""

    model_config = ConfigDict(extra="forbid", frozen=True, arbitrary_types_allowed=True)


class Estimator:
    """Base class of every estimator (see the module docstring for the contract)."""

    kind: ClassVar[str] = "custom"
    tilt_axes: ClassVar[int] = 1
    """Tilts `update_tilts` gives: 1 (about x: hinge devices) or 2 (about x and y: any 3D device)."""

    class Params(EstimatorParams):
        model_config = ConfigDict(extra="allow", frozen=True)

    def __init__(self, *, params: EstimatorParams, period_s: float, gravity_m_s2: float) -> None:
        self.params = params
        self.period_s = period_s
        self.gravity_m_s2 = gravity_m_s2

    def update(self, t_s: float, gyro_rad_s: tuple, accel_m_s2: tuple) -> tuple[float, float]:  # pragma: no cover
        raise NotImplementedError

    def update_tilts(self, t_s: float, gyro_rad_s: tuple, accel_m_s2: tuple) -> tuple[tuple, tuple]:
        """The vector form (contract item 5); here the one-axis `update`, about x."""
        angle, rate = self.update(t_s, gyro_rad_s, accel_m_s2)
        return (angle,), (rate,)


def accel_tilt(accel_m_s2) -> float:
    """The body angle about the pivot axis that a specific force at rest implies, rad."""
    return math.atan2(accel_m_s2[1], accel_m_s2[2])


def accel_tilts(accel_m_s2) -> tuple[float, float]:
    """(tilt_x, tilt_y) rad that a specific force at rest implies, the force in the upright frame.
    At rest f = A^T (0, 0, g) with A = Ry(tilt_y) Rx(tilt_x), i.e.
    f = g (-sin tilt_y, sin tilt_x cos tilt_y, cos tilt_x cos tilt_y) (rigid-body kinematics)."""
    fx, fy, fz = accel_m_s2[0], accel_m_s2[1], accel_m_s2[2]
    return math.atan2(fy, fz), math.atan2(-fx, math.hypot(fy, fz))


def heading_rates(tilt_x: float, tilt_y: float, w) -> tuple[float, float, float]:
    """Rates in the upright frame (the body's, turned by its upright attitude) turned to the heading
    frame: A w with A = Ry(tilt_y) Rx(tilt_x), rad/s."""
    cx, sx, cy, sy = math.cos(tilt_x), math.sin(tilt_x), math.cos(tilt_y), math.sin(tilt_y)
    v1, v2 = cx * w[1] - sx * w[2], sx * w[1] + cx * w[2]
    return cy * w[0] + sy * v2, v1, -sy * w[0] + cy * v2


TWO_PI = 2.0 * math.pi


def _wrap(x: float) -> float:
    return math.remainder(x, TWO_PI)


class Complementary(Estimator):
    """theta <- a (theta + w dt) + (1 - a) theta_acc with a = tau / (tau + dt): the gyro's integral
    above the crossover frequency 1/(2 pi tau), the accelerometer's tilt below it (common practice,
    no source; references.md, Sensing). The blend is taken on the wrapped difference, so a body
    passing +-pi is followed. The rate is the gyro's x reading.

    The vector form (3D) runs the same blend on each tilt axis: the gyro, turned to the heading
    frame by the present estimate (`heading_rates`), integrated as the tilts' own rates
    (d tilt_x/dt = w_x / cos tilt_y, d tilt_y/dt = w_y: R = Rz Ry Rx's angle rates), and the
    accelerometer's tilts (`accel_tilts`) below the crossover. Its rates are the gyro's in the
    heading frame at the new estimate. No heading is estimated (an IMU has no reference for it)."""

    kind = "complementary"
    tilt_axes = 2

    class Params(EstimatorParams):
        time_constant: Q("time", gt=0, le=1e4)
        """tau, s: the crossover between gyro and accelerometer is at 1/(2 pi tau)."""

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        tau = self.params.time_constant
        self.a = tau / (tau + self.period_s)
        self.angle: float | None = None
        self.tilts: tuple[float, float] | None = None     # the vector form's state

    def update(self, t_s, gyro_rad_s, accel_m_s2):
        w = gyro_rad_s[0]
        tilt = accel_tilt(accel_m_s2)
        if self.angle is None:
            self.angle = tilt
        else:
            predicted = self.angle + w * self.period_s
            self.angle = _wrap(predicted + (1.0 - self.a) * _wrap(tilt - predicted))
        return self.angle, w

    def update_tilts(self, t_s, gyro_rad_s, accel_m_s2):
        ax, ay = accel_tilts(accel_m_s2)
        if self.tilts is None:
            tx, ty = ax, ay
        else:
            tx, ty = self.tilts
            w = heading_rates(tx, ty, gyro_rad_s)
            dt, b = self.period_s, 1.0 - self.a
            px = tx + w[0] / math.cos(ty) * dt
            py = ty + w[1] * dt
            tx, ty = _wrap(px + b * _wrap(ax - px)), py + b * (ay - py)
        self.tilts = (tx, ty)
        return self.tilts, heading_rates(tx, ty, gyro_rad_s)


class KalmanNoise(EstimatorParams):
    """The Kalman filter's `process_noise`: what it assumes of the gyro."""

    rate: Q("rate_noise_density", ge=0, le=10.0) = 0.005
    """White rate noise density, rad/s/sqrt(Hz)."""
    bias: Q("rate_random_walk", ge=0, le=10.0) = 0.0
    """Bias random walk, rad/s/sqrt(s)."""


class Kalman(Estimator):
    """A tilt-and-gyro-bias Kalman filter. State [theta, b]: theta(k+1) = theta(k) + dt (w_m(k) - b(k)),
    b(k+1) = b(k); the accelerometer's tilt measures theta. Process noise from the gyro's white
    rate noise density q_w and its bias random walk q_b (continuous-time), discretised exactly:
    Q = [[q_w^2 dt + q_b^2 dt^3/3, -q_b^2 dt^2/2], [-q_b^2 dt^2/2, q_b^2 dt]] (Van Loan's integral for
    this model); measurement noise R = measurement_noise^2. The covariance is propagated every tick,
    so the gain converges to the steady gain of the discrete Riccati equation (Simon, Optimal
    State Estimation, 2006). The rate is w_m - b.

    The vector form (3D) is two such filters, one per tilt axis, each fed that tilt's own rate from
    the gyro turned to the heading frame by the present estimate (as `Complementary`'s) and the
    accelerometer's tilt about it (`accel_tilts`). Near upright the upright and heading frames
    nearly agree, so each filter's bias is the gyro's bias about that axis; the z rate is the
    gyro's, uncorrected (no reference for its bias)."""

    kind = "kalman"
    tilt_axes = 2

    class Params(EstimatorParams):
        process_noise: KalmanNoise = KalmanNoise()
        measurement_noise: Q("angle", gt=0, le=math.pi) = math.radians(1.0)
        """Standard deviation of the accelerometer's tilt, rad (vibration and swing included)."""
        initial_bias: Q("angular_speed", ge=0, le=100.0) = 0.05
        """Standard deviation of the gyro bias before the first tick, rad/s."""
        initial_angle: Q("angle", gt=0, le=math.pi) | None = None
        """Standard deviation of the angle after the first tick, rad; default: `measurement_noise`
        (the first accelerometer tilt's). A smaller figure keeps the first ticks' gain small: an IMU
        far from the pivot reads the body's own kick as tilt, and a gain near 1/2 passes it on."""

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        dt, p = self.period_s, self.params
        qw, qb = p.process_noise.rate ** 2, p.process_noise.bias ** 2
        self.q11, self.q12, self.q22 = qw * dt + qb * dt**3 / 3.0, -qb * dt**2 / 2.0, qb * dt
        self.r = p.measurement_noise ** 2
        self.angle: float | None = None
        self.bias = 0.0
        self.p11 = self.r if p.initial_angle is None else p.initial_angle ** 2
        self.p12, self.p22 = 0.0, p.initial_bias ** 2
        self.gain = (0.0, 0.0)
        self.axes: tuple | None = None                  # the vector form's per-axis filters
        self.tilts: tuple[float, float] | None = None

    def update(self, t_s, gyro_rad_s, accel_m_s2):
        w, dt = gyro_rad_s[0], self.period_s
        tilt = math.atan2(accel_m_s2[1], accel_m_s2[2])    # accel_tilt(), inline: it runs every tick
        if self.angle is None:
            self.angle = tilt
            return self.angle, w - self.bias
        # predict: x = A x + B w, P = A P A' + Q with A = [[1, -dt], [0, 1]]
        angle = self.angle + dt * (w - self.bias)
        p11 = self.p11 - dt * (2.0 * self.p12 - dt * self.p22) + self.q11
        p12 = self.p12 - dt * self.p22 + self.q12
        p22 = self.p22 + self.q22
        # update with the tilt: C = [1, 0]
        s = p11 + self.r
        k1, k2 = p11 / s, p12 / s
        innovation = math.remainder(tilt - angle, TWO_PI)
        self.angle = math.remainder(angle + k1 * innovation, TWO_PI)
        self.bias += k2 * innovation
        self.p11, self.p12, self.p22 = (1.0 - k1) * p11, (1.0 - k1) * p12, p22 - k2 * p12
        self.gain = (k1, k2)
        return self.angle, w - self.bias

    def update_tilts(self, t_s, gyro_rad_s, accel_m_s2):
        ax, ay = accel_tilts(accel_m_s2)
        if self.axes is None:     # one filter per tilt axis, with this one's parameters
            self.axes = tuple(type(self)(params=self.params, period_s=self.period_s, gravity_m_s2=self.gravity_m_s2)
                              for _ in range(2))
            self.tilts = (ax, ay)
        tx, ty = self.tilts
        w = heading_rates(tx, ty, gyro_rad_s)
        # each axis's filter reads its tilt as the accelerometer's atan2 of (sin, cos)
        tx, rx = self.axes[0].update(t_s, (w[0] / math.cos(ty), 0.0, 0.0), (0.0, math.sin(ax), math.cos(ax)))
        ty, ry = self.axes[1].update(t_s, (w[1], 0.0, 0.0), (0.0, math.sin(ay), math.cos(ay)))
        self.tilts = (tx, ty)
        return self.tilts, (rx * math.cos(ty), ry, heading_rates(tx, ty, gyro_rad_s)[2])


ESTIMATORS: dict[str, str] = {
    "complementary": "sim.strategies.estimators:Complementary",
    "kalman": "sim.strategies.estimators:Kalman",
}


@dataclass(frozen=True)
class EstimatorSpec:
    """A validated `sensors.estimator`: its name, class and parameters."""

    kind: str
    cls: type
    params: EstimatorParams

    def build(self, *, period_s: float, gravity_m_s2: float) -> Estimator:
        return self.cls(params=self.params, period_s=period_s, gravity_m_s2=gravity_m_s2)

    @property
    def is_plugin(self) -> bool:
        return self.kind not in ESTIMATORS


def resolve_estimator(raw: Any, *, base_dir: Path, anywhere: bool = False) -> EstimatorSpec | None:
    """Validate a `sensors.estimator` mapping. Raises ValueError("@key: ...") for the scenario loader."""
    from . import _class_for_plugin, kind_or_plugin
    if raw is None or isinstance(raw, EstimatorSpec):
        return raw
    raw, kind, plugin = kind_or_plugin(raw, ", ".join(sorted(ESTIMATORS)))
    if kind is not None:
        if kind not in ESTIMATORS:
            raise ValueError(f"@kind: unknown estimator {kind!r}; known: {', '.join(sorted(ESTIMATORS))}, or a plugin")
        module, _, name = ESTIMATORS[kind].partition(":")
        cls = getattr(importlib.import_module(module), name)
    else:
        cls, kind = _class_for_plugin(plugin, base_dir, anywhere, base=Estimator), str(plugin)
    try:
        params = cls.Params.model_validate(raw)
    except ValidationError as exc:
        from ..core.validation_messages import describe_problems
        raise ValueError("; ".join("@" + piece for piece in describe_problems(exc, cls.Params))) from None
    except ValueError:
        raise
    except BaseException as exc:  # noqa: B036 - a plug-in's Params validators are plug-in code
        from ..core.exception_text import describe_exception
        raise ValueError(f"@plugin: validating the parameters of {kind!r} failed ({describe_exception(exc)})") from None
    return EstimatorSpec(kind=kind, cls=cls, params=params)
