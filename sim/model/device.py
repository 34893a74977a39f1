"""The device's lumped parameters in SI, derived once from a validated scenario.

The engine model, the motor model, the strategies' designs and the static checks all read this.
Symbols follow the reaction-wheel pendulum literature (see ../shared/references.md):
J excludes the wheel's own spin inertia I_w but includes the wheel's and stator's mass at the
wheel axis; mbar = sum(m_i * l_i) is the body's first moment of mass about the pivot.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from .massprops import RigidProps, body_props, wheel_props


@dataclass(frozen=True)
class Device:
    body: RigidProps                  # body parts + stator, about its COM (engine link 1)
    wheel: RigidProps                 # wheel parts + rotor, about the wheel axis (engine link 2)
    wheel_at_m: float
    gravity_m_s2: float
    J_kg_m2: float                    # body inertia about the pivot incl. wheel mass, excl. I_w
    I_w_kg_m2: float                  # wheel spin inertia incl. rotor
    mbar_kg_m: float                  # first moment of mass about the pivot (body + wheel)
    k_e_v_s_rad: float
    k_t_n_m_a: float
    resistance_ohm: float
    inductance_h: float
    current_limit_a: float            # inf when the scenario sets none
    supply_v: float
    brake_torque_n_m: float | None
    pivot_coulomb_n_m: float
    pivot_viscous_n_m_s: float
    wheel_coulomb_n_m: float
    wheel_viscous_n_m_s: float
    control_rate_hz: float
    delay_s: float                    # sample to command acting: sensors.delay (+ timing.compute_time), s
    locked: bool
    angle_counts_per_rev: int = 0     # the angle encoder's counts per rev, 0 when the scenario sets none
    wheel_counts_per_rev: int = 0     # the wheel encoder's counts per rev, 0 when the scenario sets none
    pwm_max: int = 0                  # full-scale duty (2^drive.pwm.resolution_bits - 1), 0 without drive.pwm
    imu_gyro_lsb_rad_s: float = 0.0   # one LSB of the IMU's raw gyro word (sim.model.sensing.raw_lsb), 0 without an IMU
    imu_accel_lsb_m_s2: float = 0.0   # one LSB of its raw accelerometer word, 0 without an IMU
    drive_mode: str = "voltage"       # "current": a torque-mode driver, laws command amps (drive.mode)

    @classmethod
    def from_scenario(cls, sc) -> "Device":
        if not sc.is_planar:
            from ..core.errors import ScenarioError
            raise ScenarioError(f"{sc.source}: a 3D device (wheels:, a ball mount or parts placed in 3D) runs with "
                                "`wheelbench run` only in this release")
        w = sc.wheel
        wheel = _corrected(wheel_props(w.parts, rotor_inertia=sc.motor.rotor_inertia), w.inertia_correction)
        body = body_props(sc.body.parts, extra_point_masses=[(sc.motor.mass, w.at)] if sc.motor.mass else [])
        # a correction about the pivot is the same about the centre of mass (parallel axes)
        body = _corrected(body, sc.body.inertia_correction)
        mass_all = body.mass_kg + wheel.mass_kg
        mbar = body.mass_kg * body.com_m + wheel.mass_kg * w.at
        J = body.about_pivot_x() + wheel.mass_kg * w.at**2
        return cls(
            body=body, wheel=wheel, wheel_at_m=w.at, gravity_m_s2=sc.world.gravity,
            J_kg_m2=J, I_w_kg_m2=wheel.inertia_com[0], mbar_kg_m=mbar if mass_all else 0.0,
            k_e_v_s_rad=sc.motor.k_e, k_t_n_m_a=sc.motor.k_t, resistance_ohm=sc.motor.resistance,
            inductance_h=sc.motor.inductance,
            current_limit_a=sc.motor.current_limit if sc.motor.current_limit is not None else math.inf,
            supply_v=sc.drive.supply, brake_torque_n_m=sc.drive.brake_torque,
            pivot_coulomb_n_m=sc.body.pivot_friction.coulomb, pivot_viscous_n_m_s=sc.body.pivot_friction.viscous,
            wheel_coulomb_n_m=w.bearing_friction.coulomb, wheel_viscous_n_m_s=w.bearing_friction.viscous,
            control_rate_hz=sc.sensors.rate, delay_s=loop_delay_s(sc), locked=sc.body.locked,
            angle_counts_per_rev=(sc.sensors.angle.counts_per_rev if sc.sensors.angle is not None else None) or 0,
            wheel_counts_per_rev=sc.sensors.wheel.counts_per_rev or 0,
            pwm_max=drive_pwm_max(sc.drive),
            **imu_lsb_fields(sc.sensors.imu),
            drive_mode=sc.drive.mode,
        )

    # -- derived figures used across the tool -------------------------------------------------
    @property
    def mass_kg(self) -> float:
        return self.body.mass_kg + self.wheel.mass_kg

    @property
    def no_load_speed_rad_s(self) -> float:
        """Wheel speed where back-EMF equals the supply: V / k_e, rad/s."""
        return self.supply_v / self.k_e_v_s_rad

    @property
    def stall_torque_n_m(self) -> float:
        """Torque at zero speed with full supply, limited by the current limit, N m."""
        return self.k_t_n_m_a * min(self.supply_v / self.resistance_ohm, self.current_limit_a)

    def available_torque_n_m(self, wheel_speed_rad_s: float, direction: float = 1.0) -> float:
        """Largest torque magnitude the drive can give in `direction` at a relative wheel speed, N m."""
        back_emf = self.k_e_v_s_rad * wheel_speed_rad_s * math.copysign(1.0, direction)
        i = (self.supply_v - back_emf) / self.resistance_ohm
        return max(0.0, self.k_t_n_m_a * min(i, self.current_limit_a))

    @property
    def command_limit(self) -> float:
        """The largest command the drive takes: the supply, V (voltage mode), or the current limit, A
        (current mode; the stall current at the supply when there is no limit)."""
        if self.drive_mode == "current":
            return min(self.current_limit_a, self.supply_v / self.resistance_ohm)
        return self.supply_v

    @property
    def gravity_torque_coeff_n_m(self) -> float:
        """mbar * g: the gravity torque at 90 degrees from upright, N m."""
        return self.mbar_kg_m * self.gravity_m_s2

    @property
    def open_loop_pole_rad_s(self) -> float:
        """sqrt(mbar g / J): the upright equilibrium's unstable pole with torque input, rad/s."""
        return math.sqrt(max(self.gravity_torque_coeff_n_m, 0.0) / self.J_kg_m2)

    @property
    def holdable_angle_rad(self) -> float:
        """The largest lean the motor's stall torque can hold against gravity, asin(stall / mbar g), rad
        (static torque balance, common practice, no source); pi when gravity needs no torque."""
        mgd = self.gravity_torque_coeff_n_m
        return math.asin(min(1.0, self.stall_torque_n_m / mgd)) if mgd > 0 else math.pi

    def body_energy_j(self, angle_rad: float, rate_rad_s: float) -> float:
        """E = 1/2 J theta_d^2 + mbar g (cos(theta) - 1): 0 upright at rest, -2 mbar g hanging."""
        return 0.5 * self.J_kg_m2 * rate_rad_s**2 + self.gravity_torque_coeff_n_m * (math.cos(angle_rad) - 1.0)

    def linear_model(self) -> tuple[np.ndarray, np.ndarray]:
        """Upright linearisation, x = [theta, theta_d, phi_d] (rad, rad/s, rad/s), input volts.

        Follows the model in ../shared/references.md (inductance neglected), with the pivot's and
        bearing's viscous friction added: J theta_dd = mbar g theta - tau - b_p theta_d,
        I_w (theta_dd + phi_dd) = tau - b_w phi_d, tau = k_t (V - k_e phi_d) / R.
        With `drive_mode` "current" the input is amps and tau = k_t i (the current loop taken as
        ideal at the control rate; back-EMF is the loop's to overcome, so it leaves the model).
        """
        J, Iw = self.J_kg_m2, self.I_w_kg_m2
        a = self.gravity_torque_coeff_n_m / J
        if self.drive_mode == "current":
            c, d = self.k_t_n_m_a, self.wheel_viscous_n_m_s
        else:
            c = self.k_t_n_m_a / self.resistance_ohm
            d = c * self.k_e_v_s_rad + self.wheel_viscous_n_m_s      # total damping on phi_d, N m s
        bp = self.pivot_viscous_n_m_s
        A = np.array([
            [0.0, 1.0, 0.0],
            [a, -bp / J, d / J],
            [-a, bp / J, -d * (1.0 / Iw + 1.0 / J)],
        ])
        B = c * np.array([[0.0], [-1.0 / J], [1.0 / Iw + 1.0 / J]])
        return A, B


def loop_delay_s(sc) -> float:
    """From a sample to its command acting, s: the sensors' delay plus, with a `timing` section, the
    controller's compute time as the runner applies it, in whole physics steps (what a law's delay
    predictor has to bridge)."""
    if sc.timing is None:
        return sc.sensors.delay
    return sc.sensors.delay + sc.timing.compute_steps(sc.world.step) * sc.world.step


def drive_pwm_max(drive) -> int:
    """The full-scale PWM duty a firmware writes (2^drive.pwm.resolution_bits - 1), 0 without drive.pwm.
    One drive section serves every wheel's bridge, so a 3D device's wheels share it."""
    return 2**drive.pwm.resolution_bits - 1 if drive.pwm is not None else 0


def imu_lsb_fields(imu) -> dict:
    """The IMU's raw LSBs as Device fields (none without an IMU)."""
    if imu is None:
        return {}
    from .sensing import DEFAULT_ACCEL_FULL_SCALE_M_S2, DEFAULT_GYRO_FULL_SCALE_RAD_S, raw_lsb
    return {"imu_gyro_lsb_rad_s": raw_lsb(imu.gyro, DEFAULT_GYRO_FULL_SCALE_RAD_S),
            "imu_accel_lsb_m_s2": raw_lsb(imu.accel, DEFAULT_ACCEL_FULL_SCALE_M_S2)}


def _corrected(props: RigidProps, correction_kg_m2: float) -> RigidProps:
    """`props` with `correction_kg_m2` added to the inertia about the x (pivot/spin) axis."""
    if not correction_kg_m2:
        return props
    ix, iy, iz = props.inertia_com
    return replace(props, inertia_com=(ix + correction_kg_m2, iy, iz))
