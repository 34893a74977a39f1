"""The 3D device's lumped parameters in SI: one to three wheels on any axes, a hinge or ball mount.

Derived once from a validated scenario that is not planar (`Scenario.is_planar` false); the planar
one-wheel device keeps `sim.model.device.Device` and its code path. Frames and attitude follow
`sim.core.frames`: body frame x = hinge axis, z = body axis, y completing a right-handed frame,
origin at the pivot. The body includes the motor stators and excludes the wheels; each wheel is a
rigid rotor on its own axis (spin inertia includes the motor's rotor).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np

from ..core.frames import smallest_rotation_to_z
from .floor import FloorSpec, floor_spec
from .device import drive_pwm_max, imu_lsb_fields, loop_delay_s
from .linear3d import LinearSpec, WheelUnit  # the linearisation's fields; one wheel with its motor, drive and bearing
from .massprops3d import body_mass_properties, wheel_axis, wheel_centre, wheel_inertias, wheel_tensor


@dataclass(frozen=True)
class Device3D(LinearSpec):
    """The linearisation's fields (`sim.model.linear3d.LinearSpec`: mount, gravity, the body's mass
    properties, the wheels, pivot friction, loop rate and delay), plus what the runner needs besides."""

    supply_v: float
    locked: bool = False
    """`body.locked`: the body clamped at its start attitude (a bench); the wheels then turn their own inertia."""
    floor: FloorSpec | None = None
    """A body on the floor (`body.mount: floor`): its contact figures; `mount` is then the mount the law
    designs for, a hinge at the balance edge or a ball at the balance corner (`sim.model.floor`)."""
    angle_counts_per_rev: int = 0      # the attitude encoders' counts per rev (sensors.angle), 0 when none is set
    wheel_counts_per_rev: int = 0      # each wheel encoder's counts per rev (sensors.wheel), 0 when none is set
    pwm_max: int = 0                   # full-scale duty of every wheel's bridge (2^drive.pwm.resolution_bits - 1), 0 without drive.pwm
    imu_gyro_lsb_rad_s: float = 0.0    # one LSB of the IMU's raw gyro word (firmware's gyro_raw), 0 without an IMU
    imu_accel_lsb_m_s2: float = 0.0

    @classmethod
    def from_scenario(cls, sc) -> "Device3D":
        body = body_mass_properties(sc)
        units = []
        for i, w in enumerate(sc.wheel_list):
            motor = sc.wheel_motor(i)
            mass, spin, transverse = wheel_inertias(w, rotor_inertia=motor.rotor_inertia)
            brake = getattr(w, "brake_torque", None)
            units.append(WheelUnit(
                at_m=wheel_centre(w), axis=wheel_axis(w), mass_kg=mass, spin_inertia_kg_m2=spin,
                transverse_inertia_kg_m2=transverse, k_e_v_s_rad=motor.k_e, k_t_n_m_a=motor.k_t,
                resistance_ohm=motor.resistance, inductance_h=motor.inductance,
                current_limit_a=motor.current_limit if motor.current_limit is not None else math.inf,
                supply_v=sc.drive.supply, brake_torque_n_m=brake if brake is not None else sc.drive.brake_torque,
                coulomb_n_m=w.bearing_friction.coulomb, viscous_n_m_s=w.bearing_friction.viscous))
        return cls(mount=sc.design_mount, floor=floor_spec(sc) if sc.body.mount == "floor" else None,
                   gravity_m_s2=sc.world.gravity, body_mass_kg=body.mass_kg,
                   body_com_m=body.com_m, body_inertia_com_kg_m2=body.inertia_com_kg_m2, wheels=tuple(units),
                   pivot_coulomb_n_m=sc.body.pivot_friction.coulomb, pivot_viscous_n_m_s=sc.body.pivot_friction.viscous,
                   control_rate_hz=sc.sensors.rate, delay_s=loop_delay_s(sc), supply_v=sc.drive.supply,
                   locked=sc.body.locked,
                   drive_mode=sc.drive.mode,
                   angle_counts_per_rev=(sc.sensors.angle.counts_per_rev if sc.sensors.angle is not None else None) or 0,
                   wheel_counts_per_rev=sc.sensors.wheel.counts_per_rev or 0, pwm_max=drive_pwm_max(sc.drive),
                   **imu_lsb_fields(sc.sensors.imu))

    def linear_spec(self) -> LinearSpec:
        """The multi-input linearisation's input: the device itself (a `LinearSpec`)."""
        return self

    # -- derived figures ------------------------------------------------------------------------
    @property
    def n_wheels(self) -> int:
        return len(self.wheels)

    @property
    def mass_kg(self) -> float:
        return self.body_mass_kg + sum(w.mass_kg for w in self.wheels)

    @property
    def com_m(self) -> np.ndarray:
        """The whole device's centre of mass in the body frame, m."""
        first = self.body_mass_kg * np.array(self.body_com_m)
        for w in self.wheels:
            first = first + w.mass_kg * np.array(w.at_m)
        return first / self.mass_kg

    @property
    def gravity_torque_coeff_n_m(self) -> float:
        """m g d: the gravity torque with the centre of mass horizontal, N m (d = pivot to centre of mass)."""
        return self.mass_kg * self.gravity_m_s2 * float(np.linalg.norm(self.com_m))

    def upright(self) -> tuple[tuple[float, float, float], ...]:
        """R0: the body attitude with the centre of mass straight above the pivot (see `sim.core.frames`).
        A hinge can only turn about x, so its R0 is the turn about x that brings the centre of mass's
        y-z projection to +z."""
        c = self.com_m
        if self.mount == "hinge":
            c = np.array([0.0, c[1], c[2]])
        return smallest_rotation_to_z(tuple(float(v) for v in c))

    def inertia_about_pivot_kg_m2(self, *, with_spin: bool = True) -> np.ndarray:
        """The whole device's inertia tensor about the pivot in the body frame, wheels locked (with their
        spin inertia) or, `with_spin=False`, with their spin inertia left out, kg m^2."""
        from .massprops3d import shifted
        total = shifted(np.array(self.body_inertia_com_kg_m2), self.body_mass_kg, np.array(self.body_com_m))
        for w in self.wheels:
            spin = w.spin_inertia_kg_m2 if with_spin else 0.0
            total = total + shifted(wheel_tensor(spin, w.transverse_inertia_kg_m2, w.axis), w.mass_kg, np.array(w.at_m))
        return total

    def inertia_seen_by_wheel_kg_m2(self, i: int) -> float:
        """The inertia wheel i's motor turns against: I_w in series with the body about the wheel's axis
        (1/I = 1/I_w + a^T J^-1 a for a ball, a_x^2/J_xx for a hinge), kg m^2. Used only for the motor's
        step-exact mean current (`sim.physics.motor`); J leaves the wheels' spin out and the body's turning
        is taken as it starts from rest, so the figure is the short-term one. A locked body takes no part:
        the wheel's spin inertia alone."""
        w = self.wheels[i]
        if self.locked:
            return w.spin_inertia_kg_m2
        a = np.array(w.axis)
        j = self.inertia_about_pivot_kg_m2(with_spin=False)
        try:
            if self.mount == "ball":
                body_compliance = float(a @ np.linalg.solve(j, a))
            else:
                body_compliance = a[0] ** 2 / j[0, 0]
        except (np.linalg.LinAlgError, ZeroDivisionError):
            body_compliance = 0.0   # a body with no inertia about some axis: the motor sees the wheel alone
        if not np.isfinite(body_compliance) or body_compliance < 0:
            body_compliance = 0.0
        return 1.0 / (1.0 / w.spin_inertia_kg_m2 + body_compliance)

    def field_names(self) -> tuple[str, ...]:
        return tuple(f.name for f in fields(self))
