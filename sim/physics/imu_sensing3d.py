"""An IMU on a 3D body (hinge, ball or floor mount) and the estimator that turns it into the law's tilts.

`ImuSensing3D` is built by the 3D runner only when `sensors.imu` is set. Its `wrap(command)` gives
the runner a command function that, at each control tick and inside the strategy's time window:
1. takes the IMU sample the controller sees (the latest at the IMU's own rate, from the true state
   `sensors.delay` earlier) from the trace's rows of true state, and records its raw readings
   (columns `imu_gyro_x_rad_s` ... `imu_accel_z_m_s2`, in the IMU's own axes, as on one wheel);
2. with an estimator, turns the readings back through the IMU's nominal axis mapping and into the
   upright frame (contract item 5 of `sim.strategies.estimators`), runs `update_tilts`, puts its
   tilts and rates in the reading (and in the measured columns and `estimated_*` columns);
3. calls the law.

The body's motion for the IMU (`body_vectors`), from a row of the 3D trace: the attitude relative to
upright R = Rz(heading) Ry(tilt_y) Rx(tilt_x) (`sim.core.frames`), so R_wb = R U with U the upright
attitude (the device's `upright()`; on a hinge joint, the turn about x by the upright angle, which
is what the hinge engine measures tilt_x from); the trace's rates are in the heading frame, so the
body rate is w_b = U^T A^T w_h with A = Ry(tilt_y) Rx(tilt_x) (the heading cancels). The angular
acceleration is the backward difference of w_b over the last physics step, as on one wheel
(`sim.physics.imu_sensing`); the body origin's acceleration is zero on a fixed pivot and, on the
floor, the second backward difference of the balancing contact's recorded position.
Randomness: the IMU draws from its own generator (`imu_sensing.IMU_STREAM`), as on one wheel.
"""

from __future__ import annotations

import math

from ..core.errors import StrategyError
from ..core.exception_text import describe_exception
from ..core.frames import matmul, transpose
from .imu import ImuModel, axis_mapping, cross, mat_vec, rotation_x
from .imu_sensing import IMU_COLUMNS, IMU_STREAM, stream


def sensing_columns3d(scenario, *, two_tilts: bool) -> tuple[str, ...]:
    """The trace columns a 3D scenario's IMU adds (none without one): the raw readings, and with an
    estimator its tilts (x, and y with `two_tilts`) and rates (x, and y, z with `two_tilts`)."""
    s = scenario.sensors
    if s.imu is None:
        return ()
    if s.estimator is None:
        return IMU_COLUMNS
    axes = ("x", "y") if two_tilts else ("x",)
    rates = ("x", "y", "z") if two_tilts else ("x",)
    return IMU_COLUMNS + tuple(f"estimated_tilt_{a}_rad" for a in axes) + tuple(f"estimated_rate_{a}_rad_s" for a in rates)


def upright_turn(device) -> tuple:
    """U: the body frame's attitude at upright, heading 0 (rows). A hinge joint measures its tilt from
    the upright angle about x, so there it is that turn about x; elsewhere the device's `upright()`."""
    r0 = device.upright()
    if device.mount == "hinge" and device.floor is None:
        return rotation_x(math.atan2(r0[2][1], r0[2][2]))
    return r0


def body_vectors(tilt_x: float, tilt_y: float, heading: float, rate_heading, upright, world=None):
    """From a 3D trace row (tilts and heading rad, the rate in the heading frame rad/s) and the
    upright attitude U (see the module docstring): (the world's up in the body frame, R_wb^T e_z; the
    body rate in the body frame, rad/s; R_wb^T `world` for a world-frame vector, or None without one).
    Written out: it runs twice per IMU sample."""
    ca, sa, cb, sb = math.cos(tilt_x), math.sin(tilt_x), math.cos(tilt_y), math.sin(tilt_y)
    (u00, u01, u02), (u10, u11, u12), (u20, u21, u22) = upright
    # A = Ry(tilt_y) Rx(tilt_x), rows a0, a1, a2; v = A^T w_h; w_b = U^T v
    a0, a1, a2 = (cb, sb * sa, sb * ca), (0.0, ca, -sa), (-sb, cb * sa, cb * ca)
    w0, w1, w2 = rate_heading
    v = (a0[0] * w0 + a2[0] * w2, a0[1] * w0 + a1[1] * w1 + a2[1] * w2, a0[2] * w0 + a1[2] * w1 + a2[2] * w2)
    w_body = (u00 * v[0] + u10 * v[1] + u20 * v[2], u01 * v[0] + u11 * v[1] + u21 * v[2],
              u02 * v[0] + u12 * v[1] + u22 * v[2])
    # R_wb = Rz(heading) A U has A U's last row (Rz keeps z): R_wb^T e_z = U^T a2
    up = (u00 * a2[0] + u10 * a2[1] + u20 * a2[2], u01 * a2[0] + u11 * a2[1] + u21 * a2[2],
          u02 * a2[0] + u12 * a2[1] + u22 * a2[2])
    if world is None:
        return up, w_body, None
    ch, sh = math.cos(heading), math.sin(heading)
    h = (ch * world[0] + sh * world[1], ch * world[1] - sh * world[0], world[2])     # Rz^T world
    return up, w_body, body_vectors(tilt_x, tilt_y, 0.0, h, upright)[1]


class ImuSensing3D:
    """The IMU and the estimator of one 3D trial (see the module docstring)."""

    def __init__(self, scenario, device, trace, *, step_s: float, seed: int, n_tilts: int, n_rates: int,
                 tilt_bias_rad: tuple[float, ...] | None = None):
        s = scenario.sensors
        imu = s.imu
        rate = imu.rate if imu.rate is not None else s.rate
        self.imu_steps = int(round(1.0 / (rate * step_s)))
        self.imu = ImuModel(imu, rate_hz=rate, gravity_m_s2=scenario.world.gravity, rng=stream(seed, IMU_STREAM))
        self.upright = upright_turn(device)
        # what firmware knows: the nominal axis mapping S (not the misalignment), turned to upright: U S^T
        self.to_upright = matmul(self.upright, transpose(axis_mapping(imu.orientation.axes)))
        self.dt, self.inv_dt = step_s, 1.0 / step_s
        self.delay_steps = int(round(s.delay / step_s))
        self.spec, self.period_s, self.gravity = s.estimator, 1.0 / s.rate, scenario.world.gravity
        self.n_tilts, self.n_rates = n_tilts, n_rates
        self.tilt_bias = tuple(tilt_bias_rad or ()) + (0.0,) * (2 - len(tilt_bias_rad or ()))
        self.estimator = None
        col = lambda name: getattr(trace, name, None)    # noqa: E731 - absent columns are None
        # the true state's columns through memoryviews: Python floats out, cheaper than numpy's items
        view = lambda name: None if col(name) is None else memoryview(col(name))    # noqa: E731
        self.state = tuple(view(a) for a in ("tilt_x", "tilt_y", "heading", "rate_x", "rate_y", "rate_z"))
        self.contact = tuple(view(a) for a in ("contact_x", "contact_y", "contact_z")) if device.floor is not None else None
        self.raw = tuple(memoryview(col(name)) for name in IMU_COLUMNS)
        self.est_tilt = [memoryview(col(f"estimated_tilt_{a}_rad")) for a in "xy"[:n_tilts]] if self.spec else []
        self.est_rate = [memoryview(col(f"estimated_rate_{a}_rad_s")) for a in "xyz"[:n_rates]] if self.spec else []
        self.meas_tilt = [memoryview(col(f"m_tilt_{a}")) for a in "xy"[:n_tilts]]
        self.meas_rate = [memoryview(col(f"m_rate_{a}")) for a in "xyz"[:n_rates]]
        self._sample_row = -1
        self.gyro = self.accel = (0.0, 0.0, 0.0)

    def _row(self, j: int, world=None):
        """`body_vectors` of trace row j."""
        tx, ty, hd, rx, ry, rz = self.state
        return body_vectors(tx[j], ty[j] if ty is not None else 0.0, hd[j] if hd is not None else 0.0,
                            (rx[j], ry[j] if ry is not None else 0.0, rz[j] if rz is not None else 0.0),
                            self.upright, world)

    def _origin_accel(self, j: int) -> tuple[float, float, float] | None:
        """The body origin's acceleration, world frame, m/s^2 (None on a fixed pivot)."""
        if self.contact is None:
            return None
        if j < 2:
            return (0.0, 0.0, 0.0)
        s = self.inv_dt * self.inv_dt
        return tuple((c[j] - 2.0 * c[j - 1] + c[j - 2]) * s for c in self.contact)

    def sample(self, k: int):
        """The IMU sample the tick at step k sees, (gyro rad/s, accel m/s^2) in the IMU's axes; raw
        columns written at row k. Specific force: g R^T e_z + R^T a0 + alpha x r + w x (w x r)."""
        j = max(k - self.delay_steps, 0)
        j -= j % self.imu_steps
        if j != self._sample_row:
            self._sample_row = j
            up, w, a0 = self._row(j, self._origin_accel(j))
            if j > 0:
                w0 = self._row(j - 1)[1]
                alpha = ((w[0] - w0[0]) * self.inv_dt, (w[1] - w0[1]) * self.inv_dt, (w[2] - w0[2]) * self.inv_dt)
            else:
                alpha = (0.0, 0.0, 0.0)
            r, g = self.imu.at, self.gravity
            t, c = cross(alpha, r), cross(w, cross(w, r))
            f = (g * up[0] + t[0] + c[0], g * up[1] + t[1] + c[1], g * up[2] + t[2] + c[2])
            if a0 is not None:
                f = (f[0] + a0[0], f[1] + a0[1], f[2] + a0[2])
            self.gyro, self.accel = self.imu.sample_body(j * self.dt, w, f)
        c = self.raw
        c[0][k], c[1][k], c[2][k] = self.gyro
        c[3][k], c[4][k], c[5][k] = self.accel
        return self.gyro, self.accel

    def wrap(self, command):
        """The runner's command function (reading, n_wheels) -> volts: the IMU, the estimator, the law."""
        inv_dt, spec = self.inv_dt, self.spec
        nt, nr, bias = self.n_tilts, self.n_rates, self.tilt_bias

        def sense_then_decide(reading, n_wheels):
            k = int(round(reading.t_s * inv_dt))
            gyro, accel = self.sample(k)
            reading.imu_gyro_rad_s, reading.imu_accel_m_s2 = gyro, accel
            if spec is not None:
                tilts, rates = self._estimate(reading.t_s, gyro, accel)
                tilts = tuple(float(tilts[i]) + bias[i] for i in range(nt))
                rates = tuple(float(rates[i]) for i in range(nr))
                for cols, values in ((self.est_tilt, tilts), (self.meas_tilt, tilts),
                                     (self.est_rate, rates), (self.meas_rate, rates)):
                    for c, v in zip(cols, values):
                        c[k] = v
                reading.angles_rad, reading.rates_rad_s = tilts, rates
                reading.angle_rad, reading.rate_rad_s = tilts[0], rates[0]
            return command(reading, n_wheels)

        return sense_then_decide

    def _estimate(self, t_s: float, gyro, accel):
        """The estimator's (tilts, rates) from a sample; its failures end the trial as strategy_failed."""
        try:
            if self.estimator is None:
                self.estimator = self.spec.build(period_s=self.period_s, gravity_m_s2=self.gravity)
            u = self.to_upright
            tilts, rates = self.estimator.update_tilts(t_s, mat_vec(u, gyro), mat_vec(u, accel))
            if len(tilts) < self.n_tilts or len(rates) < self.n_rates:
                raise ValueError(f"it gave {len(tilts)} tilt(s) and {len(rates)} rate(s); this device needs "
                                 f"{self.n_tilts} and {self.n_rates}")
            return tilts, rates
        except Exception as exc:  # plug-in code: its failure is the trial's outcome
            raise StrategyError(f"the estimator failed: {describe_exception(exc)}") from None
