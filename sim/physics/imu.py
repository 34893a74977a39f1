"""The IMU on the body: a rate gyro and an accelerometer, from a rigid body's motion.

Inputs (SI, per sample): the body's attitude R (body -> world rotation, 3x3), its angular
velocity omega and angular acceleration alpha (body frame, rad/s and rad/s^2), the acceleration
of the body frame's origin a0 (world frame, m/s^2; zero for a body on a fixed pivot) and gravity
g (world frame, m/s^2; (0, 0, -9.81) here). Outputs: the gyro's three readings, rad/s, and the
accelerometer's three readings, m/s^2, in the IMU's own axes.

Kinematics (rigid body; e.g. Meriam & Kraige, Dynamics, relative acceleration in rotating
axes): a point fixed at r on the body accelerates by a0 + R (alpha x r + omega x (omega x r));
an accelerometer measures specific force, its acceleration minus gravity:
    f_body = R^T (a0 - g) + alpha x r + omega x (omega x r),
    w_body = omega.
On the hinge (omega = (theta_d, 0, 0), r = (0, 0, L)) the kinematic terms are -L theta_dd along y
(tangential) and -L theta_d^2 along z (towards the pivot): an IMU far from the pivot misreads fast
swings as tilt. The IMU's axes: reading = M v_body with M = S Rm^T, Rm the misalignment rotation
and S the signed axis mapping (`sim.model.sensing`).

Errors per axis, in order: scale (1 + scale_error), fixed bias, the gyro's drifting bias (a
random walk: each sample adds bias_instability * sqrt(time since the last sample) * N(0, 1)),
white noise noise_density * sqrt(rate) * N(0, 1) (the density over the sample's bandwidth, so
that the Allan deviation of the samples is noise_density / sqrt(tau): IEEE Std 952-1997,
Annex C), saturation at +-range, rounding to whole `resolution` steps.
"""

from __future__ import annotations

import math

import numpy as np

NOISE_CHUNK = 2048  # IMU samples of noise drawn at a time
_AXIS = {"x": 0, "y": 1, "z": 2}


def cross(a, b) -> tuple[float, float, float]:
    return (a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0])


def mat_vec(m, v) -> tuple[float, float, float]:
    return (m[0][0] * v[0] + m[0][1] * v[1] + m[0][2] * v[2],
            m[1][0] * v[0] + m[1][1] * v[1] + m[1][2] * v[2],
            m[2][0] * v[0] + m[2][1] * v[1] + m[2][2] * v[2])


def transpose(m) -> tuple:
    return tuple(tuple(m[j][i] for j in range(3)) for i in range(3))


def mat_mul(a, b) -> tuple:
    return tuple(tuple(sum(a[i][k] * b[k][j] for k in range(3)) for j in range(3)) for i in range(3))


def rotation_x(angle: float) -> tuple:
    """Rotation by `angle` rad about x (right-hand rule), as a 3x3 tuple."""
    c, s = math.cos(angle), math.sin(angle)
    return ((1.0, 0.0, 0.0), (0.0, c, -s), (0.0, s, c))


def rotation_y(angle: float) -> tuple:
    c, s = math.cos(angle), math.sin(angle)
    return ((c, 0.0, s), (0.0, 1.0, 0.0), (-s, 0.0, c))


def rotation_z(angle: float) -> tuple:
    c, s = math.cos(angle), math.sin(angle)
    return ((c, -s, 0.0), (s, c, 0.0), (0.0, 0.0, 1.0))


def specific_force_body(rotation, omega, alpha, at, a0_world, gravity_world) -> tuple[float, float, float]:
    """What an ideal accelerometer at `at` (body frame, m) reads in the body frame, m/s^2 (see the
    module docstring for the formula and the arguments)."""
    rel = (a0_world[0] - gravity_world[0], a0_world[1] - gravity_world[1], a0_world[2] - gravity_world[2])
    f = mat_vec(transpose(rotation), rel)
    t = cross(alpha, at)
    c = cross(omega, cross(omega, at))
    return (f[0] + t[0] + c[0], f[1] + t[1] + c[1], f[2] + t[2] + c[2])


def axis_mapping(axes) -> tuple:
    """S: row i is the body axis (signed unit vector) that the IMU's axis i points along."""
    rows = []
    for name in axes:
        sign = -1.0 if name.startswith("-") else 1.0
        row = [0.0, 0.0, 0.0]
        row[_AXIS[name.lstrip("-")]] = sign
        rows.append(tuple(row))
    return tuple(rows)


def imu_matrix(orientation) -> tuple:
    """M = S Rm^T: body-frame vector -> the IMU's readings (Rm = Rx(roll) Ry(pitch) Rz(yaw))."""
    rm = mat_mul(mat_mul(rotation_x(orientation.roll), rotation_y(orientation.pitch)), rotation_z(orientation.yaw))
    return mat_mul(axis_mapping(orientation.axes), transpose(rm))


class _Channel:
    """One sensor's error chain over three axes (see the module docstring). Written out per axis:
    it runs on every IMU sample of a trial."""

    def __init__(self, spec, *, rate_hz: float, walk: float = 0.0):
        self.gain = 1.0 + spec.scale_error
        self.bias = tuple(float(b) for b in spec.bias)
        self.sigma = spec.noise_density * math.sqrt(rate_hz)
        self.limit = spec.range
        self.limited = math.isfinite(spec.range)
        self.lsb = spec.resolution
        self.walk = walk
        self.drift = [0.0, 0.0, 0.0]

    def read(self, x: float, y: float, z: float, n: list, first: int, dt_s: float) -> tuple[float, float, float]:
        """The readings of true values (x, y, z): white draws n[first:first+3], bias-walk draws the
        three after them (gyro only), `dt_s` since the previous sample."""
        g, b, s = self.gain, self.bias, self.sigma
        d = self.drift
        if self.walk:
            step = self.walk * math.sqrt(dt_s)
            d[0] += step * n[first + 3]
            d[1] += step * n[first + 4]
            d[2] += step * n[first + 5]
        x = x * g + b[0] + d[0] + s * n[first]
        y = y * g + b[1] + d[1] + s * n[first + 1]
        z = z * g + b[2] + d[2] + s * n[first + 2]
        if self.limited:
            lim = self.limit
            if not -lim <= x <= lim:
                x = math.copysign(lim, x)
            if not -lim <= y <= lim:
                y = math.copysign(lim, y)
            if not -lim <= z <= lim:
                z = math.copysign(lim, z)
        if self.lsb:
            q = self.lsb
            x, y, z = round(x / q) * q, round(y / q) * q, round(z / q) * q
        return x, y, z


class ImuModel:
    """A gyro and an accelerometer at `spec.at` on the body, with the errors of `spec`
    (`sim.model.sensing.ImuSpec`), sampled at `rate_hz`, drawing from its own generator `rng`."""

    def __init__(self, spec, *, rate_hz: float, gravity_m_s2: float, rng: np.random.Generator):
        self.at = tuple(float(v) for v in spec.at)
        self.matrix = imu_matrix(spec.orientation)
        self.aligned = self.matrix == ((1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 0.0, 1.0))   # M = I: skip it
        self.gravity = (0.0, 0.0, -gravity_m_s2)
        self.gyro = _Channel(spec.gyro, rate_hz=rate_hz, walk=spec.gyro.bias_instability)
        self.accel = _Channel(spec.accel, rate_hz=rate_hz)
        self.rng = rng
        self._chunk: list = []
        self._i = 0
        self.last_t_s: float | None = None

    def _draws(self) -> list:
        """Nine standard normals: gyro white (3), gyro bias steps (3), accel white (3)."""
        if self._i >= len(self._chunk):
            self._chunk, self._i = self.rng.standard_normal((NOISE_CHUNK, 9)).tolist(), 0
        row = self._chunk[self._i]
        self._i += 1
        return row

    def true_body(self, rotation, omega, alpha, a0_world=(0.0, 0.0, 0.0)):
        """The ideal (gyro, accel) in the body frame."""
        return tuple(omega), specific_force_body(rotation, omega, alpha, self.at, a0_world, self.gravity)

    def sample(self, t_s: float, rotation, omega, alpha, a0_world=(0.0, 0.0, 0.0)):
        """One sample at time `t_s`, s: (gyro rad/s, accel m/s^2) in the IMU's axes, errors included.
        The bias drift advances by the time since the previous sample."""
        w_body, f_body = self.true_body(rotation, omega, alpha, a0_world)
        return self._read(t_s, w_body, f_body)

    def sample_hinge(self, t_s: float, angle_rad: float, rate_rad_s: float, accel_rad_s2: float):
        """`sample` for a body turning about x on a fixed pivot (the one-wheel hinge), with the
        general formula written out for omega = (w, 0, 0), alpha = (a, 0, 0), R = Rx(angle):
        f = (0, g sin - a r_z - w^2 r_y, g cos + a r_y - w^2 r_z); the same numbers, fewer steps."""
        g, (_, ry, rz) = -self.gravity[2], self.at
        w, a = rate_rad_s, accel_rad_s2
        w2 = w * w
        f_body = (0.0, g * math.sin(angle_rad) - a * rz - w2 * ry, g * math.cos(angle_rad) + a * ry - w2 * rz)
        return self._read(t_s, (w, 0.0, 0.0), f_body)

    def sample_body(self, t_s: float, w_body, f_body):
        """`sample` from the body-frame rate (rad/s) and specific force (m/s^2) at the IMU's point,
        for a caller that has them already (the 3D runner, `sim.physics.imu_sensing3d`)."""
        return self._read(t_s, w_body, f_body)

    def _read(self, t_s: float, w_body, f_body):
        if self._i < len(self._chunk):     # _draws() inline: this runs on every sample
            n = self._chunk[self._i]
            self._i += 1
        else:
            n = self._draws()
        dt = 0.0 if self.last_t_s is None else t_s - self.last_t_s
        self.last_t_s = t_s
        w, f = (w_body, f_body) if self.aligned else (mat_vec(self.matrix, w_body), mat_vec(self.matrix, f_body))
        return self.gyro.read(w[0], w[1], w[2], n, 0, dt), self.accel.read(f[0], f[1], f[2], n, 6, 0.0)


def hinge_motion(angle_rad: float, rate_rad_s: float, accel_rad_s2: float):
    """(R, omega, alpha) of a body turning about the x axis (the one-wheel hinge)."""
    return rotation_x(angle_rad), (rate_rad_s, 0.0, 0.0), (accel_rad_s2, 0.0, 0.0)
