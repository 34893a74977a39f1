"""The upright linearisation of a reaction-wheel device with one to three wheels on any axes.

Conventions (SI throughout):

- Body frame: x along the hinge axis (a hinge mount turns about it), z along the body axis,
  y completing a right-handed frame. The pivot is the body frame's origin.
- Upright attitude R0: the body-to-world rotation that puts the whole device's centre of mass
  (body and wheels) straight above the pivot. For a ball mount it is the smallest rotation taking
  the centre-of-mass direction to world +z (identity when the centre of mass lies on body z); for
  a hinge mount it is the rotation about x that does so for the centre of mass's projection on
  the y-z plane (the hinge keeps world x = body x; a centre of mass off that plane loads the
  bearing, not the hinge).
- Attitude relative to upright: R = R_wb R0^T = Rz(heading) Ry(tilt_y) Rx(tilt_x), so the tilts
  are rotations about the heading frame's x and y axes (the world's at heading 0; right-hand rule) and a positive tilt_x moves the
  centre of mass toward world -y.
- Rates: the body's angular velocity in the heading frame (the world frame turned about the
  vertical by the heading; the world frame at heading 0), (wx, wy, wz), rad/s. Near upright
  tilt_x' = wx, tilt_y' = wy, heading' = wz (first order) at any heading: gravity does not change
  under a turn about the vertical, so the model (and a law designed from it) is the same at
  every heading.
- Wheel speeds: each wheel's angular velocity relative to the body about its own axis, rad/s,
  positive by the right-hand rule about `axis`. A positive motor torque accelerates the wheel
  positively; its reaction acts on the body.
- Inputs: one winding voltage per wheel, V; the motor torque is k_t (V - k_e w) / R (inductance
  neglected, as in `sim.model.device.Device.linear_model`). With `drive_mode` "current" (a
  torque-mode driver) one winding current per wheel, A, and the torque k_t i: the driver's current
  loop is taken as fast against the body and overcomes the back-EMF, so the back-EMF damping leaves
  the plant (the one-wheel current-mode model, `Device.linear_model`, does the same).

The linearisation is about rest upright with every wheel still, so gyroscopic terms (products of
body rate and wheel speed) are second order and drop out. Viscous pivot friction (-b_p w, on every
axis the mount lets turn) and viscous bearing friction (-b_w w_i between wheel and body) are in;
Coulomb friction is not (it has no slope at rest).

Equations (generalised speeds: the body's rates allowed by the mount, then the relative wheel
speeds): the total angular momentum about the pivot H = I_O w + sum I_s,i a_i w_i changes by the
external torques (gravity and pivot friction), and each wheel's spin momentum I_s,i (a_i . w + w_i)
by its motor and bearing torques. I_O holds the body and every wheel (mass at its centre plus its
full inertia tensor I_s a a^T + I_t (E - a a^T)), about the pivot, in the upright frame.
Gravity torque to first order: M g rho (tilt_x, tilt_y, 0), rho = the centre of mass's height
above the pivot (Euler's laws for rigid bodies, any dynamics text, e.g. Meriam & Kraige, Dynamics;
the one-wheel hinge case is the model of Spong, Corke & Lozano, Automatica 37(11), 2001).

States: hinge: [angle, body_rate, wheel1_speed, ...]; ball: [tilt_x, tilt_y, rate_x, rate_y,
(rate_z when some wheel axis has a vertical component upright), wheel1_speed, ...]. The heading is
neutral (gravity does not depend on it) and is left out; without a wheel acting about the vertical
the heading rate is left out too (nothing can steer it), which neglects only its coupling through
pivot friction and products of inertia with the vertical.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, fields

import numpy as np

MOUNTS = ("hinge", "ball")
DRIVE_MODES = ("voltage", "current")

_VERTICAL_TOL = 1e-9   # a wheel axis "has a vertical component" above this (unit vector)


@dataclass(frozen=True)
class WheelUnit:
    """One wheel with its motor, drive and bearing (SI; vectors in the body frame).

    `at_m`: the wheel's centre from the pivot, m. `axis`: its spin axis, a unit vector.
    `mass_kg`: wheel and rotor. `spin_inertia_kg_m2`: about `axis` (rotor included);
    `transverse_inertia_kg_m2`: about a diameter through the wheel's centre. Motor: `k_e_v_s_rad`
    (back-EMF, V s/rad), `k_t_n_m_a` (N m/A), `resistance_ohm`, `inductance_h`, `current_limit_a`
    (inf for none); drive: `supply_v`, `brake_torque_n_m` (None for no brake); bearing:
    `coulomb_n_m`, `viscous_n_m_s` (between wheel and body).
    """

    at_m: tuple[float, float, float]
    axis: tuple[float, float, float]
    mass_kg: float
    spin_inertia_kg_m2: float
    transverse_inertia_kg_m2: float
    k_e_v_s_rad: float
    k_t_n_m_a: float
    resistance_ohm: float
    inductance_h: float
    current_limit_a: float
    supply_v: float
    brake_torque_n_m: float | None
    coulomb_n_m: float
    viscous_n_m_s: float

    def __post_init__(self) -> None:
        at, axis = _vector(self.at_m, "at_m"), _vector(self.axis, "axis")
        if abs(float(np.linalg.norm(axis)) - 1.0) > 1e-9:
            raise ValueError(f"WheelUnit.axis must be a unit vector, found {tuple(axis)}")
        object.__setattr__(self, "at_m", tuple(float(v) for v in at))
        object.__setattr__(self, "axis", tuple(float(v) for v in axis))

    @property
    def no_load_speed_rad_s(self) -> float:
        """Relative wheel speed where back-EMF equals the supply, supply / k_e, rad/s."""
        return self.supply_v / self.k_e_v_s_rad

    def command_limit(self, drive_mode: str) -> float:
        """The largest command the wheel's drive takes: the supply, V (voltage mode), or the current
        limit, A (current mode; the stall current at the supply when that is lower, or without a
        limit), as the one-wheel `Device.command_limit`."""
        if drive_mode == "current":
            return min(self.current_limit_a, self.supply_v / self.resistance_ohm)
        return self.supply_v


@dataclass(frozen=True)
class LinearSpec:
    """What the linearisation needs of a device (SI; vectors and tensors in the body frame).

    `mount`: "hinge" or "ball". `body_com_m`: the body's centre of mass from the pivot;
    `body_inertia_com_kg_m2`: the body's 3x3 inertia tensor about its centre of mass. The body
    includes the motor stators and excludes the wheels. `wheels`: one `WheelUnit` each.
    `pivot_viscous_n_m_s` acts on every axis the mount lets turn. `control_rate_hz` and `delay_s`
    are the loop's (the discrete design and the delay predictor read them). `drive_mode`: "voltage"
    (inputs in volts) or "current" (a torque-mode driver: inputs in amps).
    """

    mount: str
    gravity_m_s2: float
    body_mass_kg: float
    body_com_m: tuple[float, float, float]
    body_inertia_com_kg_m2: tuple[tuple[float, float, float], ...]
    wheels: tuple[WheelUnit, ...]
    pivot_coulomb_n_m: float
    pivot_viscous_n_m_s: float
    control_rate_hz: float
    delay_s: float
    drive_mode: str = field(default="voltage", kw_only=True)   # keyword-only: a subclass may add plain fields

    def __post_init__(self) -> None:
        if self.mount not in MOUNTS:
            raise ValueError(f"LinearSpec.mount must be one of {MOUNTS}, found {self.mount!r}")
        if self.drive_mode not in DRIVE_MODES:
            raise ValueError(f"LinearSpec.drive_mode must be one of {DRIVE_MODES}, found {self.drive_mode!r}")
        if not self.wheels:
            raise ValueError("LinearSpec.wheels must be a non-empty sequence of WheelUnit")
        # a wheel of another module with the same fields (e.g. the 3D device's) is taken field by field
        object.__setattr__(self, "wheels", tuple(w if isinstance(w, WheelUnit) else as_wheel_unit(w)
                                                 for w in self.wheels))
        inertia = np.asarray(self.body_inertia_com_kg_m2, dtype=float)
        if inertia.shape != (3, 3) or not np.all(np.isfinite(inertia)):
            raise ValueError("LinearSpec.body_inertia_com_kg_m2 must be a finite 3x3 tensor")
        object.__setattr__(self, "body_com_m", tuple(float(v) for v in _vector(self.body_com_m, "body_com_m")))
        object.__setattr__(self, "body_inertia_com_kg_m2", tuple(tuple(float(v) for v in row) for row in inertia))

    def linear_model(self) -> "LinearModel":
        """`linearise(self)`, solved once per spec (a spec is immutable)."""
        cached = _MODELS.get(self)
        if cached is None:
            if len(_MODELS) >= 64:
                _MODELS.pop(next(iter(_MODELS)))
            cached = _MODELS[self] = linearise(self)
        return cached


_MODELS: dict[LinearSpec, "LinearModel"] = {}


def as_wheel_unit(wheel) -> WheelUnit:
    """A `WheelUnit` from any object (or mapping) carrying its fields; ValueError naming a missing one."""
    return WheelUnit(**_fields_of(wheel, WHEEL_FIELDS, "wheel"))


def as_linear_spec(source) -> LinearSpec:
    """A `LinearSpec` from a LinearSpec, a mapping of its fields (what a device's `linear_spec()`
    may return) or any object carrying them as attributes (such as a 3D device itself)."""
    if isinstance(source, LinearSpec):
        return source
    return LinearSpec(**_fields_of(source, SPEC_FIELDS, "device"))


def _fields_of(source, names, what) -> dict:
    get = source.get if isinstance(source, Mapping) else (lambda k, d=None: getattr(source, k, d))
    missing = object()
    values = {k: get(k, missing) for k in names}
    for k in OPTIONAL_FIELDS:     # a field with a default may be left out (a device written before it)
        if values.get(k, None) is missing:
            del values[k]
    absent = [k for k, v in values.items() if v is missing]
    if absent:
        raise ValueError(f"the {what} has no {', '.join(absent)} (fields of sim.model.linear3d)")
    return values


@dataclass(frozen=True)
class LinearModel:
    """x' = A x + B u about rest upright; `state_names` and `input_names` label rows and columns.

    State units follow the names: angles and tilts in rad, rates and wheel speeds in rad/s;
    inputs in V (`wheelN_voltage`) or A (`wheelN_current`, a current-mode drive). Arrays are read-only.
    """

    A: np.ndarray
    B: np.ndarray
    state_names: tuple[str, ...]
    input_names: tuple[str, ...]

    @property
    def state_units(self) -> tuple[str, ...]:
        return tuple("rad" if n in ("angle", "tilt_x", "tilt_y") else "rad/s" for n in self.state_names)

    @property
    def input_units(self) -> tuple[str, ...]:
        return tuple("A" if n.endswith("_current") else "V" for n in self.input_names)


def wheel_state_names(n: int) -> tuple[str, ...]:
    return tuple(f"wheel{i + 1}_speed" for i in range(n))


def _vector(v, name: str) -> np.ndarray:
    a = np.asarray(v, dtype=float)
    if a.shape != (3,) or not np.all(np.isfinite(a)):
        raise ValueError(f"{name} must be a finite 3-vector, found {v!r}")
    return a


def device_com_m(spec: LinearSpec) -> np.ndarray:
    """The whole device's centre of mass (body and wheels) from the pivot, body frame, m."""
    mass = spec.body_mass_kg + sum(w.mass_kg for w in spec.wheels)
    first = spec.body_mass_kg * np.asarray(spec.body_com_m) + sum(w.mass_kg * np.asarray(w.at_m) for w in spec.wheels)
    return first / mass if mass > 0 else np.zeros(3)


def upright_rotation(spec: LinearSpec) -> np.ndarray:
    """R0: body-frame vectors to world vectors in the upright attitude (see the module docstring)."""
    c = device_com_m(spec)
    if spec.mount == "hinge":
        if math.hypot(c[1], c[2]) == 0.0:
            return np.eye(3)
        return _rot_x(math.atan2(c[1], c[2]))
    norm = float(np.linalg.norm(c))
    if norm == 0.0:
        return np.eye(3)
    d = c / norm
    axis = np.cross(d, [0.0, 0.0, 1.0])
    s, cos = float(np.linalg.norm(axis)), float(d[2])
    if s < 1e-15:
        # on body z: identity; straight below the pivot: half a turn about x (as a hinge would)
        return np.eye(3) if cos > 0 else _rot_x(math.pi)
    k = axis / s
    K = np.array([[0.0, -k[2], k[1]], [k[2], 0.0, -k[0]], [-k[1], k[0], 0.0]])
    return np.eye(3) + s * K + (1.0 - cos) * (K @ K)     # Rodrigues' rotation formula


def _rot_x(angle: float) -> np.ndarray:
    """Rotation by `angle` about x (right-hand rule); Rx(atan2(y, z)) takes (0, y, z) onto +z."""
    c, s = math.cos(angle), math.sin(angle)
    return np.array([[1.0, 0.0, 0.0], [0.0, c, -s], [0.0, s, c]])


def inertia_about_pivot(spec: LinearSpec, R0: np.ndarray) -> np.ndarray:
    """The whole device's inertia tensor about the pivot with the wheels held, upright frame, kg m^2."""
    E = np.eye(3)

    def shifted(mass, at):
        r = R0 @ np.asarray(at)
        return mass * (float(r @ r) * E - np.outer(r, r))          # parallel-axis theorem

    I_O = R0 @ np.asarray(spec.body_inertia_com_kg_m2) @ R0.T + shifted(spec.body_mass_kg, spec.body_com_m)
    for w in spec.wheels:
        a = R0 @ np.asarray(w.axis)
        I_O = I_O + w.spin_inertia_kg_m2 * np.outer(a, a) + w.transverse_inertia_kg_m2 * (E - np.outer(a, a))
        I_O = I_O + shifted(w.mass_kg, w.at_m)
    return I_O


def linearise(spec: LinearSpec) -> LinearModel:
    """The upright linear model of `spec` (conventions, states and equations: the module docstring)."""
    R0 = upright_rotation(spec)
    n_w = len(spec.wheels)
    axes = np.array([R0 @ np.asarray(w.axis) for w in spec.wheels])          # n_w x 3, upright frame
    I_s = np.array([w.spin_inertia_kg_m2 for w in spec.wheels])
    bearing = np.array([w.viscous_n_m_s for w in spec.wheels])
    if spec.drive_mode == "current":    # torque k_t i; the current loop overcomes the back-EMF
        c, d = np.array([w.k_t_n_m_a for w in spec.wheels]), bearing
    else:
        c = np.array([w.k_t_n_m_a / w.resistance_ohm for w in spec.wheels])      # N m / V at standstill
        d = c * np.array([w.k_e_v_s_rad for w in spec.wheels]) + bearing
    mass = spec.body_mass_kg + sum(w.mass_kg for w in spec.wheels)
    rho = float((R0 @ device_com_m(spec))[2])                                # height of the COM upright
    mgr = mass * spec.gravity_m_s2 * rho

    if spec.mount == "hinge":
        S = np.array([[1.0], [0.0], [0.0]])          # body rates allowed: about world x = body x
        body_angles, body_rates = ("angle",), ("body_rate",)
        stiffness = np.array([[mgr]])
    else:
        vertical = bool(np.any(np.abs(axes[:, 2]) > _VERTICAL_TOL))
        S = np.eye(3)[:, : 3 if vertical else 2]
        body_angles, body_rates = ("tilt_x", "tilt_y"), ("rate_x", "rate_y", "rate_z")[: S.shape[1]]
        stiffness = np.zeros((S.shape[1], 2))
        stiffness[0, 0] = stiffness[1, 1] = mgr

    n_b = S.shape[1]                 # body rates in the state
    n_a = len(body_angles)           # body angles in the state
    I_O = inertia_about_pivot(spec, R0)
    G = S.T @ (axes.T * I_s)         # coupling of body rates and wheel spins, n_b x n_w
    M = np.block([[S.T @ I_O @ S, G], [G.T, np.diag(I_s)]])

    # generalised forces per state: M v' = F_angles angles + F_v v + F_u u
    n_v = n_b + n_w
    F_angles = np.zeros((n_v, n_a))
    F_angles[:n_b, :] = stiffness
    F_v = np.zeros((n_v, n_v))
    F_v[:n_b, :n_b] = -spec.pivot_viscous_n_m_s * np.eye(n_b)
    F_v[n_b:, n_b:] = -np.diag(d)
    F_u = np.zeros((n_v, n_w))
    F_u[n_b:, :] = np.diag(c)

    n = n_a + n_v
    A = np.zeros((n, n))
    A[:n_a, n_a:n_a + n_a] = np.eye(n_a)            # angle' = rate (first order about rest)
    A[n_a:, :n_a] = np.linalg.solve(M, F_angles)
    A[n_a:, n_a:] = np.linalg.solve(M, F_v)
    B = np.zeros((n, n_w))
    B[n_a:, :] = np.linalg.solve(M, F_u)
    for a in (A, B):
        a.setflags(write=False)
    return LinearModel(A=A, B=B, state_names=body_angles + body_rates + wheel_state_names(n_w),
                       input_names=input_names(n_w, spec.drive_mode))


def input_names(n: int, drive_mode: str = "voltage") -> tuple[str, ...]:
    """The inputs' names: `wheelN_voltage`, or `wheelN_current` for a current-mode drive."""
    quantity = "current" if drive_mode == "current" else "voltage"
    return tuple(f"wheel{i + 1}_{quantity}" for i in range(n))


def spec_from_device(device) -> LinearSpec:
    """Today's one-wheel planar `sim.model.device.Device` as a LinearSpec (hinge, wheel on x).

    The body's centre of mass and the wheel lie on body z; the body's inertia is its diagonal.
    """
    body, wheel = device.body, device.wheel
    unit = WheelUnit(
        at_m=(0.0, 0.0, device.wheel_at_m), axis=(1.0, 0.0, 0.0), mass_kg=wheel.mass_kg,
        spin_inertia_kg_m2=device.I_w_kg_m2, transverse_inertia_kg_m2=wheel.inertia_com[1],
        k_e_v_s_rad=device.k_e_v_s_rad, k_t_n_m_a=device.k_t_n_m_a, resistance_ohm=device.resistance_ohm,
        inductance_h=device.inductance_h, current_limit_a=device.current_limit_a, supply_v=device.supply_v,
        brake_torque_n_m=device.brake_torque_n_m, coulomb_n_m=device.wheel_coulomb_n_m,
        viscous_n_m_s=device.wheel_viscous_n_m_s)
    return LinearSpec(
        mount="hinge", gravity_m_s2=device.gravity_m_s2, body_mass_kg=body.mass_kg,
        body_com_m=(0.0, 0.0, body.com_m), body_inertia_com_kg_m2=tuple(map(tuple, np.diag(body.inertia_com))),
        wheels=(unit,), pivot_coulomb_n_m=device.pivot_coulomb_n_m, pivot_viscous_n_m_s=device.pivot_viscous_n_m_s,
        control_rate_hz=device.control_rate_hz, delay_s=device.delay_s,
        drive_mode=getattr(device, "drive_mode", "voltage"))


OPTIONAL_FIELDS = ("drive_mode",)
SPEC_FIELDS = tuple(f.name for f in fields(LinearSpec))
WHEEL_FIELDS = tuple(f.name for f in fields(WheelUnit))
