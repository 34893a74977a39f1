"""The scenario schema: a mapping in, one validation pass, frozen typed objects in SI units out
(files are read by `sim.model.scenario_yaml`).

Every value is checked here and nowhere later. Quantities accept unit strings ("80 g",
"300 rpm/V"); bare numbers are SI. Unknown keys are rejected with the nearest known key.

Bounds (checked at load, SI): every number is finite, and sizes, masses, inertias, noise and
rates stay within ranges a bench device can have, so that a typo (1e300 m, noise 1e308) is
refused with its key instead of overflowing later. Our choices, generous by orders of magnitude:
lengths, sizes and distances up to 100 m; masses up to 10 t;
densities up to 1e5 kg/m^3 (the densest element is about 2.3e4); strengths up to 1e12 Pa;
inertias and inertia corrections up to 1e8 kg m^2 (10 t at 100 m); friction and brake torques
up to 1e4 N m; pushes up to 1e4 N m s; speeds and rate-sensor noise and bias up to 1e5 rad/s
(about 10^6 rpm); angle noise and bias up to pi rad (beyond that a reading carries no angle);
start angles up to 1e3 rad; winding resistance from 1 uohm to 1 Mohm; inductance up to 10 H;
current limits up to 1e4 A; Kv up to 1e5 rad/s/V; k_e and k_t up to 1e3. The wheel's spin
inertia must be above zero (a wheel of point masses on its axis cannot store momentum).

Conventions: body angle 0 = upright, +-pi = hanging, measured about the pivot axis by the
right-hand rule. Wheel speed is relative to the body, about the same axis. Positive voltage
accelerates the wheel in the positive sense; its reaction turns the body the negative way.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import (BaseModel, BeforeValidator, ConfigDict, Field, ValidationError,
                      ValidationInfo, field_validator, model_validator)

from ..core.errors import ScenarioError
from ..core.units import Q, parse_quantity
from ..core.validation_messages import describe_problems, describe_validation_error, step_suggestion
from .floor import FloorSection, check_floor, design_mount
from .sensing import EncoderLimits, EstimatorField, ImuSpec, Timing, check_sensing
from ..strategies.base import StrategySpec

MAX_STEPS = 5_000_000          # physics steps in one trial; more is a typo, not a plan

# Physical bounds, SI (see the module docstring for why).
MAX_SIZE_M = 100.0
MAX_MASS_KG = 1e4
MAX_INERTIA = 1e8
MAX_TORQUE = 1e4
MAX_SPEED = 1e5
MAX_ANGLE_NOISE = math.pi


Length = Q("length", ge=-MAX_SIZE_M, le=MAX_SIZE_M)
PositiveLength = Q("length", gt=0, le=MAX_SIZE_M)
PositiveMass = Q("mass", gt=0, le=MAX_MASS_KG)
Fraction = Q("fraction", gt=0, le=1)


def _parse_vector(value: Any, kind: str, bound: float, *, scalar_ok: bool):
    """A quantity of `kind` (when `scalar_ok`) or a list of three, each finite and within +-`bound` (SI)."""
    if isinstance(value, (list, tuple)):
        if len(value) != 3:
            raise ValueError(f"expected {'a number or ' if scalar_ok else ''}a list of three, found a list of {len(value)}")
        out = tuple(parse_quantity(v, kind) for v in value)
    elif scalar_ok:
        out = parse_quantity(value, kind)
    else:
        raise ValueError(f"expected a list of three numbers, found {value!r}")
    for v in (out if isinstance(out, tuple) else (out,)):
        if not (math.isfinite(v) and -bound <= v <= bound):
            raise ValueError(f"expected values within +-{bound:g} (SI), found {v:g}")
    return out


def _scalar_or_vector(kind: str, bound: float):
    """A field type: a quantity of `kind`, or a list of three. A scalar stays a float and a list
    becomes a 3-tuple, so that today's scalar files keep exactly today's values."""
    return Annotated[float | tuple[float, float, float],
                     BeforeValidator(lambda v: _parse_vector(v, kind, bound, scalar_ok=True))]


def _vector(kind: str, bound: float):
    """A field type: a list of three quantities of `kind`, as a 3-tuple."""
    return Annotated[tuple[float, float, float], BeforeValidator(lambda v: _parse_vector(v, kind, bound, scalar_ok=False))]


LengthOrVector = _scalar_or_vector("length", MAX_SIZE_M)
AngleOrVector = _scalar_or_vector("angle", 1e3)
ImpulseOrVector = _scalar_or_vector("impulse", MAX_TORQUE)
Direction = _vector("fraction", 1e6)


class Strict(BaseModel):
    """Base for scenario sections: frozen, unknown keys rejected."""

    model_config = ConfigDict(extra="forbid", frozen=True, arbitrary_types_allowed=True)


class World(Strict):
    gravity: Q("acceleration", ge=0, le=1000) = 9.81
    """Gravitational acceleration, m/s^2 (0 allowed)."""
    step: Q("time", gt=0, le=0.01) = 1e-3
    """Physics step, s."""


class Friction(Strict):
    coulomb: Q("torque", ge=0, le=MAX_TORQUE) = 0.0
    """Coulomb (dry) friction torque, N m."""
    viscous: Q("viscous", ge=0, le=MAX_TORQUE) = 0.0
    """Viscous friction coefficient, N m s/rad."""


class MaterialSpec(Strict):
    """A material given inline instead of by name."""

    name: str = "custom"
    density: Q("density", gt=0, le=1e5) | None = None
    tensile_strength: Q("stress", gt=0, le=1e12) | None = None
    poisson_ratio: Annotated[float, Field(gt=-1, lt=0.5)] = 0.33
    printed: bool = False


SHAPE_SIZES: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    # shape: (required sizes, optional sizes)
    "point": ((), ()),
    "rod": (("length",), ("radius",)),
    "box": (("length", "width", "thickness"), ()),
    "disk": (("radius",), ("thickness",)),
    "ring": (("outer_radius", "inner_radius"), ("thickness",)),
    "hollow_box": (("length", "width", "thickness", "wall"), ()),   # closed six-faced shell, outer sizes
}


def _material_spec(value: Any) -> Any:
    """An inline material mapping validated on its own, so a bad field is reported under
    `material.<field>` (not as the union's 'expected a string')."""
    if not isinstance(value, dict):
        return value
    try:
        return MaterialSpec.model_validate(value)
    except ValidationError as exc:
        raise ValueError("; ".join("@" + piece for piece in describe_problems(exc, MaterialSpec))) from None


class Part(Strict):
    """A primitive part. Body parts: `at` is the distance of the part's centre from the pivot
    along the body axis (negative below the pivot). Wheel parts: `at` is the radial distance of
    the part's centre from the wheel axis, with `count` copies spaced evenly around it.

    Orientation: rods and boxes lie with `length` along the body axis (for wheel parts, across
    the wheel axis); `width` is in the swing plane; `thickness` is along the pivot axis. Disks
    and rings have their axis parallel to the pivot axis. A hollow box is a closed six-faced shell
    oriented like a box, its sizes the outside ones, its faces `wall` thick.

    3D placement (body parts only): `at` may be a 3-vector [x, y, z] in the body frame (x the
    hinge axis, z the body axis, y completing a right-handed frame; a scalar is [0, 0, at]), and
    `rotation` turns the part from the orientation above: an angle about x, or [about x, about y,
    about z] applied in that order about the body's fixed axes (R = Rz Ry Rx), rad.
    """

    name: str | None = None
    shape: Literal["point", "rod", "box", "disk", "ring", "hollow_box"]
    length: PositiveLength | None = None
    width: PositiveLength | None = None
    thickness: PositiveLength | None = None
    radius: PositiveLength | None = None
    outer_radius: PositiveLength | None = None
    inner_radius: Q("length", ge=0, le=MAX_SIZE_M) | None = None
    wall: PositiveLength | None = None
    mass: PositiveMass | None = None
    material: Annotated[str | MaterialSpec | None, BeforeValidator(_material_spec)] = None
    infill: Fraction | None = None
    at: LengthOrVector = 0.0
    rotation: AngleOrVector = 0.0
    count: Annotated[int, Field(ge=1, le=1000, strict=True)] = 1

    @property
    def placed_off_axis(self) -> bool:
        """True when the part uses 3D placement: a vector `at` or any rotation."""
        return isinstance(self.at, tuple) or self.rotation != 0.0

    @model_validator(mode="after")
    def _sizes_fit_shape(self):
        needed, optional = SHAPE_SIZES[self.shape]
        for key in needed:
            if getattr(self, key) is None:
                raise ValueError(f"@{key}: a {self.shape} needs '{key}'")
        for key in ("length", "width", "thickness", "radius", "outer_radius", "inner_radius", "wall"):
            if getattr(self, key) is not None and key not in needed + optional:
                raise ValueError(f"@{key}: a {self.shape} takes no '{key}' (it takes {', '.join(needed + optional) or 'no sizes'})")
        if self.shape == "ring" and self.inner_radius >= self.outer_radius:
            raise ValueError("@inner_radius: must be smaller than outer_radius")
        if self.shape == "hollow_box" and 2 * self.wall >= min(self.length, self.width, self.thickness):
            raise ValueError("@wall: twice the wall must be smaller than the box's length, width and thickness")
        if isinstance(self.material, str):
            from .materials import known_names, lookup
            if lookup(self.material) is None:
                raise ValueError(f"@material: unknown material {self.material!r}; known: {', '.join(known_names())}, "
                                 "or a mapping with density and tensile_strength")
        if self.mass is None:
            from .massprops import part_volume
            if self.density_kg_m3 is None:
                raise ValueError("@mass: give a mass, or a material with a density")
            if part_volume(self) is None:
                raise ValueError(f"@mass: give a mass, or the sizes that fix a {self.shape}'s volume "
                                 "(a rod's radius, a disk's or ring's thickness)")
        if self.infill is not None and not self.is_printed:
            raise ValueError("@infill: infill applies to printed materials only")
        return self

    @property
    def material_props(self):
        """The part's `materials.Material`, or None when no material is given."""
        from .materials import Material, lookup
        if self.material is None:
            return None
        if isinstance(self.material, str):
            return lookup(self.material)
        m = self.material
        return Material(m.name, m.density, m.tensile_strength, poisson_ratio=m.poisson_ratio, printed=m.printed)

    @property
    def is_printed(self) -> bool:
        mat = self.material_props
        return bool(mat and mat.printed)

    @property
    def density_kg_m3(self) -> float | None:
        """Effective density (infill applied), kg/m^3, or None."""
        mat = self.material_props
        if mat is None or mat.density_kg_m3 is None:
            return None
        return mat.density_kg_m3 * (self.infill if self.infill is not None else 1.0)


class Body(Strict):
    parts: Annotated[list[Part], Field(min_length=1, max_length=200)]
    mount: Literal["hinge", "ball", "floor"] = "hinge"
    """hinge: a revolute joint about the body's x axis at the origin; ball: a spherical joint there
    (the body can tip in any direction and turn about the vertical); floor: the body rests on a floor
    plane by its parts' geometry (`sim.model.floor`)."""
    balance_on: Literal["edge", "corner"] | None = None
    """Floor mount: the body balances on the edge along its x axis through the origin (default) or on
    the corner at the origin (`sim.model.floor`)."""
    pivot_friction: Friction = Friction()
    locked: bool = False
    """True clamps the body at its start angle, or a 3D body at its start attitude (a bench test of the
    wheel drive; not on the floor)."""
    inertia_correction: Q("inertia", ge=-MAX_INERTIA, le=MAX_INERTIA) = 0.0
    """Signed, kg m^2: added to the body's inertia about the pivot (e.g. from `wheelbench fit`)."""


class Wheel(Strict):
    at: PositiveLength
    """Pivot-to-wheel-axis distance, m."""
    parts: Annotated[list[Part], Field(min_length=1, max_length=200)]
    bearing_friction: Friction = Friction()
    inertia_correction: Q("inertia", ge=-MAX_INERTIA, le=MAX_INERTIA) = 0.0
    """Signed, kg m^2: added to the wheel's spin inertia (e.g. from `wheelbench fit`)."""

    @field_validator("parts")
    @classmethod
    def _balanced(cls, parts):
        for i, p in enumerate(parts):
            if isinstance(p.at, tuple):
                raise ValueError(f"@[{i}].at: a wheel part's at is its distance from the wheel axis (a number)")
            if p.rotation != 0.0:
                raise ValueError(f"@[{i}].rotation: wheel parts lie on the wheel axis; set the wheel's axis instead")
            if p.count == 1 and p.at != 0.0:
                raise ValueError(f"@[{i}].at: a single part off the wheel axis unbalances the wheel; "
                                 "give count >= 2 for evenly spaced copies")
        return parts


class MotorThermal(Strict):
    """Winding heating, first-order model (see `sim.studies.thermal`). Temperatures in degC (bare numbers too).

    Defaults: common practice for small hobby motors, no source; replace them with your motor's
    datasheet figures.
    """

    thermal_resistance: Q("temperature_rise_per_watt", gt=0) = 10.0
    """Winding-to-ambient thermal resistance, K/W."""
    thermal_capacity: Q("heat_capacity", gt=0) = 20.0
    """Heat capacity of winding and stator, J/K."""
    ambient: Q("temperature", ge=-60, le=200) = 25.0
    """Ambient temperature, degC."""
    max_temperature: Q("temperature", gt=-60, le=400) = 100.0
    """Highest acceptable winding temperature, degC (kept well below insulation class B, 130 degC)."""
    coupled: bool = False
    """True: the winding's temperature raises its resistance during the trial (`sim.physics.drive`)."""


class CurvePoint(Strict):
    speed: Q("angular_speed", ge=0, le=MAX_SPEED)
    torque: Q("torque", ge=-MAX_TORQUE, le=MAX_TORQUE)


class MotorCurve(Strict):
    """A datasheet's torque-speed line at one voltage (`sim.physics.curve`), used by the drive instead
    of the straight line from Kv and R. Speeds rising from 0, torque falling."""

    voltage: Q("voltage", gt=0, le=1000)
    points: Annotated[list[CurvePoint], Field(min_length=2, max_length=200)]

    @field_validator("points")
    @classmethod
    def _rising_speed_falling_torque(cls, points):
        for i, (a, b) in enumerate(zip(points, points[1:])):
            if not b.speed > a.speed:
                raise ValueError(f"@[{i + 1}].speed: speeds must rise from point to point")
            if b.torque > a.torque:
                raise ValueError(f"@[{i + 1}].torque: torque must not rise with speed")
        if not points[-1].torque < points[0].torque:
            raise ValueError("@[0].torque: the torque must fall over the curve")
        if points[0].torque <= 0:
            raise ValueError("@[0].torque: the first point's torque must be positive (the motor drives)")
        return points


class Motor(Strict):
    name: str | None = None
    speed_constant: Q("speed_constant", gt=0, le=1e5) | None = None
    """Kv, stored in rad/s per V."""
    back_emf_constant: Q("back_emf", gt=0, le=1e3) | None = None
    """k_e, V s/rad."""
    torque_constant: Q("torque_constant", gt=0, le=1e3) | None = None
    """k_t, N m/A (defaults to k_e: equal in SI for an ideal motor)."""
    resistance: Q("resistance", ge=1e-6, le=1e6)
    inductance: Q("inductance", ge=0, le=10) = 0.0
    current_limit: Q("current", gt=0, le=1e4) | None = None
    rotor_inertia: Q("inertia", ge=0, le=MAX_INERTIA) = 0.0
    mass: Q("mass", ge=0, le=MAX_MASS_KG) = 0.0
    thermal: MotorThermal = MotorThermal()
    curve: MotorCurve | None = None
    """A datasheet torque-speed curve the drive uses instead of the line from Kv and R (voltage mode)."""

    @model_validator(mode="after")
    def _one_speed_constant(self):
        if (self.speed_constant is None) == (self.back_emf_constant is None):
            raise ValueError("@speed_constant: give exactly one of speed_constant (Kv) and back_emf_constant")
        return self

    @property
    def k_e(self) -> float:
        """Back-EMF constant, V s/rad."""
        return self.back_emf_constant if self.back_emf_constant is not None else 1.0 / self.speed_constant

    @property
    def k_t(self) -> float:
        """Torque constant, N m/A."""
        return self.torque_constant if self.torque_constant is not None else self.k_e


class Pwm(Strict):
    resolution_bits: Annotated[int, Field(ge=1, le=31, strict=True)]
    """Duty resolution, bits: firmware strategies get pwm_max = 2^bits - 1 and write a duty."""
    frequency: Q("frequency", gt=0, le=10e6) | None = None
    """Switching frequency, Hz. Given, the drive models the PWM (`sim.physics.pwm`: duty quantised to
    2^bits - 1 counts, dead band, dead-time loss); without it a duty acts as its mean voltage."""
    dead_time: Q("time", ge=0, le=1e-3) = 0.0
    """Dead time per switching edge, s (needs `frequency`)."""
    min_duty: Q("fraction", ge=0, lt=1) = 0.0
    """Duties below this (magnitude) apply nothing: a dead band (needs `frequency`)."""

    @model_validator(mode="after")
    def _timing_needs_frequency(self):
        if self.frequency is None:
            for key in ("dead_time", "min_duty"):
                if getattr(self, key):
                    raise ValueError(f"@{key}: needs drive.pwm.frequency (the PWM model)")
        elif 2.0 * self.dead_time * self.frequency >= 1.0:
            raise ValueError("@dead_time: twice the dead time fills the whole PWM period")
        return self


class Trip(Strict):
    """Over-current protection: the driver switches off when |i| stays above `current` for `time`."""

    current: Q("current", gt=0, le=1e4)
    time: Q("time", ge=0, le=60) = 0.0
    recovery: Q("time", gt=0, le=3600) | None = None
    """Off this long after a trip, s; absent: off for the rest of the trial."""


class Drive(Strict):
    supply: Q("voltage", gt=0, le=1000) | None = None
    """Bench supply voltage, V (a fixed source); the commanded voltage is clamped to +-supply. Give
    this or a `battery`; with a battery it is set to the pack's open-circuit voltage at the start."""
    brake_torque: Q("torque", gt=0, le=MAX_TORQUE) | None = None
    """A mechanical brake on the wheel (for brake-to-jump strategies), N m."""
    brake_engage_time: Q("time", ge=0, le=10) | None = None
    """The brake's engagement time, s: its torque ramps from 0 to brake_torque over it (`sim.physics.brake`);
    absent: full torque on the step it is engaged, as before."""
    pwm: Pwm | None = None
    """Firmware strategies read `resolution_bits`; with `frequency` the drive models the PWM."""
    mode: Literal["voltage", "current"] = "voltage"
    """voltage: strategies command volts; current: a torque-mode driver, strategies command amps."""
    current_bandwidth: Q("frequency", gt=0, le=1e6) | None = None
    """Current mode: the inner current loop's bandwidth, Hz (first order)."""
    reversal_delay: Q("time", ge=0, le=10) | None = None
    """Time the driver needs to change direction, s; the command is held at zero meanwhile."""
    trip: Trip | None = None
    bus_capacitance: Q("capacitance", gt=0, le=10) | None = None
    """Capacitance on the driver's bus, F: regenerated charge that the supply cannot take raises its voltage."""
    max_bus_voltage: Q("voltage", gt=0, le=1000) | None = None
    """The driver's bus over-voltage limit, V: above it the driver switches off for the rest of the trial."""

    @model_validator(mode="after")
    def _current_mode_needs_bandwidth(self):
        if self.mode == "current" and self.current_bandwidth is None:
            raise ValueError("@current_bandwidth: drive.mode current needs the current loop's bandwidth")
        if self.mode != "current" and self.current_bandwidth is not None:
            raise ValueError("@current_bandwidth: applies to drive.mode current only")
        return self

    @property
    def models_power(self) -> bool:
        """True when any key of the power chain is set (`sim.physics.drive.PowerChain` runs the drive)."""
        return (self.mode == "current" or self.reversal_delay is not None or self.trip is not None
                or self.bus_capacitance is not None or self.max_bus_voltage is not None
                or (self.pwm is not None and self.pwm.frequency is not None))


class Battery(Strict):
    """A pack of cells in series (`sim.physics.battery`). Give `internal_resistance` (the pack's) or
    `cell_resistance` (per cell)."""

    cells: Annotated[int, Field(ge=1, le=100, strict=True)]
    chemistry: Literal["lipo", "li-ion", "nimh"]
    capacity: Q("charge", gt=0, le=3.6e6)
    """Rated capacity, C (e.g. '2200 mAh')."""
    internal_resistance: Q("resistance", ge=0, le=100) | None = None
    cell_resistance: Q("resistance", ge=0, le=100) | None = None
    state_of_charge: Q("fraction", ge=0, le=1) = 1.0
    cutoff: Q("voltage", gt=0, le=10) | None = None
    """Low-voltage cut-off per cell under load, V (default by chemistry, `battery.CUTOFF_PER_CELL_V`)."""

    @model_validator(mode="after")
    def _one_resistance(self):
        if (self.internal_resistance is None) == (self.cell_resistance is None):
            raise ValueError("@internal_resistance: give exactly one of internal_resistance (pack) and cell_resistance")
        return self

    @property
    def cutoff_per_cell(self) -> float:
        from .cells import CUTOFF_PER_CELL_V
        return self.cutoff if self.cutoff is not None else CUTOFF_PER_CELL_V[self.chemistry]


class WheelSpec(Wheel):
    """One wheel of a `wheels:` list. `at`: a 3-vector in the body frame, or a distance along the
    body axis (as `wheel.at`), m. `axis`: the spin axis in the body frame (normalised; default the
    hinge axis x). `motor` and `brake_torque`: this wheel's own, else the scenario's `motor` and
    `drive.brake_torque`."""

    at: LengthOrVector
    axis: Direction = (1.0, 0.0, 0.0)
    motor: Motor | None = None
    brake_torque: Q("torque", gt=0, le=MAX_TORQUE) | None = None
    brake_engage_time: Q("time", ge=0, le=10) | None = None
    """This wheel's brake engagement time, else `drive.brake_engage_time`, s."""

    @field_validator("axis")
    @classmethod
    def _axis_nonzero(cls, axis):
        if math.hypot(*axis) < 1e-9:
            raise ValueError("expected a direction, found a zero vector")
        return axis

    @field_validator("at")
    @classmethod
    def _at_positive(cls, at):
        if not isinstance(at, tuple) and at <= 0.0:
            raise ValueError(f"a distance along the body axis must be above 0 m, found {at:g}")
        return at

    @property
    def at_vector_m(self) -> tuple[float, float, float]:
        """The wheel centre in the body frame, m."""
        return self.at if isinstance(self.at, tuple) else (0.0, 0.0, self.at)


class AngleSensor(EncoderLimits):
    counts_per_rev: Annotated[int, Field(ge=4, le=2**31, strict=True)] | None = None
    noise: Q("angle", ge=0, le=MAX_ANGLE_NOISE) = 0.0
    bias: Q("angle", ge=-MAX_ANGLE_NOISE, le=MAX_ANGLE_NOISE) = 0.0


class RateGyro(Strict):
    noise: Q("angular_speed", ge=0, le=MAX_SPEED) = 0.0
    bias: Q("angular_speed", ge=-MAX_SPEED, le=MAX_SPEED) = 0.0


class WheelSensor(EncoderLimits):
    counts_per_rev: Annotated[int, Field(ge=4, le=2**31, strict=True)] | None = None
    noise: Q("angular_speed", ge=0, le=MAX_SPEED) = 0.0


class Sensors(Strict):
    rate: Q("frequency", gt=0, le=100_000) = 500.0
    """Control loop rate, Hz."""
    delay: Q("time", ge=0, le=1.0) = 0.0
    """Measurement delay, s (rounded to whole physics steps)."""
    angle: AngleSensor | None = AngleSensor()
    """null: no angle encoder (an IMU-only device; it needs `imu` and `estimator`)."""
    rate_gyro: RateGyro | None = None
    """Absent: the body rate is estimated from successive angle readings."""
    wheel: WheelSensor = WheelSensor()
    imu: ImuSpec | None = None
    """A gyro and accelerometer on the body (`sim.model.sensing`); recorded in the trace."""
    estimator: EstimatorField = None
    """How the law's angle and rate are made from the IMU (`sim.strategies.estimators`); with one,
    the strategy sees its output instead of the angle encoder's and rate gyro's."""


class Start(Strict):
    angle: Q("angle", ge=-1e3, le=1e3) = 0.0
    rate: Q("angular_speed", ge=-MAX_SPEED, le=MAX_SPEED) = 0.0
    wheel_speed: Q("angular_speed", ge=-MAX_SPEED, le=MAX_SPEED) | list[Q("angular_speed", ge=-MAX_SPEED, le=MAX_SPEED)] = 0.0
    """Relative wheel speed, rad/s: one for every wheel, or a list with one per wheel (`wheels:`)."""
    tilt: Annotated[list[Q("angle", ge=-math.pi / 2, le=math.pi / 2)], Field(min_length=2, max_length=2)] | None = None
    """Ball mount: the start attitude as [about x, about y] from upright (R = Ry(about_y) Rx(about_x)), rad."""
    tilt_rate: Annotated[list[Q("angular_speed", ge=-MAX_SPEED, le=MAX_SPEED)], Field(min_length=2, max_length=2)] | None = None
    """Ball mount: the start body rate [about world x, about world y], rad/s (default: at rest)."""
    resting_on: Literal["face", "edge", "corner"] | None = None
    """Floor mount: start lying on a face, on the balance edge or on the corner, at rest (`sim.model.floor`)."""
    side: Literal[1, -1] | None = None
    """Floor mount, resting_on face: the sign of the turn about the edge that lays the body down (default +1)."""


class Push(Strict):
    at: Q("time", ge=0)
    impulse: ImpulseOrVector
    """Angular impulse about the pivot, N m s, applied over one physics step: a number (about the
    hinge axis, world x) or a 3-vector in the world frame."""


class Trial(Strict):
    duration: Q("time", gt=0) = 10.0
    start: Start = Start()
    pushes: Annotated[list[Push], Field(max_length=1000)] = []
    seed: Annotated[int, Field(ge=0, lt=2**63, strict=True)] = 0
    stop_early: bool = False
    """True ends the trial as soon as its outcome is settled (used by sweeps and bisection)."""


class Requirements(Strict):
    """Limits the `check` battery judges against. Defaults are our choice unless noted."""

    wheel_speed_margin: Q("fraction", ge=0, lt=1) = 0.2
    """Peak wheel speed must stay this far below the no-load speed at the supply."""
    settle_time: Q("time", gt=0) = 2.0
    """From the catch until the angle stays within 1 degree, s."""
    swing_up_time: Q("time", gt=0) = 10.0
    """From hanging to caught, s (strategies that swing up)."""
    min_push: Q("impulse", ge=0) = 0.005
    """Smallest angular impulse about the pivot the design must survive, N m s."""
    burst_safety_factor: Annotated[float, Field(gt=0, le=1000, allow_inf_nan=False)] = 4.0
    """On stress at the runaway speed; 4 on the across-layer strength is a suggested minimum for
    printed parts (references.md, [mem])."""
    pass_fraction: Q("fraction", ge=0, le=1) = 0.95
    """Share of Monte Carlo trials over the tolerances that must pass."""
    voltage_headroom: Q("fraction", ge=0, lt=1) = 0.1
    """While holding: 1 - (99th percentile |V|) / supply."""
    current_headroom: Q("fraction", ge=0, lt=1) = 0.1
    """While holding: 1 - (99th percentile |i|) / (current limit, or stall current without one)."""
    hold_time: Q("time", ge=1, le=3600) = 60.0
    """Length of the long holds that measure the wheel's slow drift under an angle bias, s."""
    run_time: Q("time", gt=0) = 600.0
    """How long the device must run before its wheel drifts to its speed limit, s (a demo's length)."""


def _strategy_from_raw(raw: Any, info: ValidationInfo) -> StrategySpec:
    from ..strategies import spec_from_raw
    return spec_from_raw(raw, info)


class Scenario(Strict):
    name: str = "unnamed"
    description: str = ""
    world: World = World()
    body: Body
    wheel: Wheel | None = None
    """One wheel on the hinge axis (today's shorthand); give this or `wheels`."""
    wheels: Annotated[list[WheelSpec], Field(min_length=1, max_length=3)] | None = None
    """One to three wheels anywhere on the body, each on its own axis (the general 3D device)."""
    motor: Motor | None
    """The motor of every wheel that names none of its own (required unless every wheel in `wheels` has one)."""
    drive: Drive
    battery: Battery | None = None
    """A battery pack instead of the bench supply `drive.supply`."""
    sensors: Sensors = Sensors()
    strategy: Annotated[StrategySpec, BeforeValidator(_strategy_from_raw)]
    trial: Trial = Trial()
    requirements: Requirements = Requirements()
    floor: FloorSection | None = None
    """Friction and restitution of the floor a `body.mount: floor` body stands on (`sim.model.floor`)."""
    timing: Timing | None = None
    """Compute time, jitter and the overrun rule of the control loop (`sim.physics.timing`)."""
    tolerances: dict[str, float | str] | None = None
    """Monte Carlo tolerances: dotted key -> "10%" (relative) or a quantity (absolute); see `sim.model.tolerances`.
    None: the defaults in `sim.model.tolerances.DEFAULT_TOLERANCES`."""
    source: str = "<memory>"
    """Where the scenario came from (for messages)."""

    @model_validator(mode="before")
    @classmethod
    def _one_wheel_key(cls, raw: Any):
        if isinstance(raw, dict):
            # a key given as null counts as not given
            if raw.get("wheel") is not None and raw.get("wheels") is not None:
                raise ValueError("@wheels: give either wheel (one wheel on the hinge axis) or wheels (a list), not both")
            if raw.get("wheel") is None and raw.get("wheels") is None:
                raise ValueError("@wheel: missing: give wheel (one wheel) or wheels (a list of one to three)")
            wheels = raw.get("wheels")
            if ("motor" not in raw and isinstance(wheels, list) and wheels
                    and all(isinstance(w, dict) and w.get("motor") is not None for w in wheels)):
                raw = {**raw, "motor": None}    # every wheel has its own: no shared motor needed
        return raw

    @model_validator(mode="after")
    def _brake_times_need_brakes(self):
        drive_brake = self.drive.brake_torque is not None
        if self.drive.brake_engage_time is not None and not (
                drive_brake or any(getattr(w, "brake_torque", None) is not None for w in self.wheel_list)):
            raise ValueError("@drive.brake_engage_time: needs a brake (drive.brake_torque, or a wheel's brake_torque)")
        for i, w in enumerate(self.wheels or []):
            if w.brake_engage_time is not None and w.brake_torque is None and not drive_brake:
                raise ValueError(f"@wheels[{i}].brake_engage_time: this wheel has no brake (its brake_torque or "
                                 "drive.brake_torque)")
        return self

    @model_validator(mode="after")
    def _device_keys_fit(self):
        if self.motor is None and (self.wheels is None or any(w.motor is None for w in self.wheels)):
            raise ValueError("@motor: expected a motor (shared), or a motor for every wheel in wheels")
        check_floor(self)   # before the planar return: a floor key on a planar device is refused, not ignored
        if self.is_planar:
            return self
        ball = self.design_mount == "ball"
        if self.body.locked:    # a bench clamp: the body held at its start attitude (`sim.physics.engine3d`)
            if self.body.mount == "floor":
                raise ValueError("@body.locked: a body on the floor is not clamped; lock it on its bench rig "
                                 "(body.mount: hinge or ball)")
            moving = any(self.trial.start.tilt_rate or ()) if ball else self.trial.start.rate
            if moving:
                raise ValueError(f"@trial.start.{'tilt_rate' if ball else 'rate'}: a locked body is held at rest "
                                 "at its start attitude")
        if self.trial.start.tilt is not None and not ball:
            raise ValueError("@trial.start.tilt: a start tilt [about_x, about_y] needs body.mount: ball (a hinge takes start.angle)")
        if self.trial.start.tilt_rate is not None and not ball:
            raise ValueError("@trial.start.tilt_rate: a start rate [about_x, about_y] needs body.mount: ball "
                             "(a hinge takes start.rate)")
        if ball and (self.trial.start.angle or self.trial.start.rate):
            raise ValueError("@trial.start.angle: a ball mount starts from trial.start.tilt [about_x, about_y] at rest")
        speeds = self.trial.start.wheel_speed
        if isinstance(speeds, list) and len(speeds) != len(self.wheel_list):
            raise ValueError(f"@trial.start.wheel_speed: expected one speed or {len(self.wheel_list)} (one per wheel), "
                             f"found {len(speeds)}")
        # an estimator gives the law its tilts: a ball (or a floor corner) reads two
        est = self.sensors.estimator
        if est is not None and ball and getattr(est.cls, "tilt_axes", 1) < 2:
            raise ValueError(f"@sensors.estimator.kind: {est.kind} gives one tilt (about x); a device on a ball or "
                             "a floor corner needs two (tilt_axes = 2, e.g. kind: complementary)")
        for i, w in enumerate(self.wheels or []):
            m = w.motor
            if m is not None and m.curve is not None and self.drive.mode == "current":
                raise ValueError(f"@wheels[{i}].motor.curve: applies to drive.mode voltage (a current-mode driver "
                                 "sets the current)")
            if m is not None and m.curve is not None and m.thermal.coupled:
                raise ValueError(f"@wheels[{i}].motor.thermal.coupled: the winding's resistance does not enter a "
                                 "motor.curve; give one or the other")
        mounts = getattr(self.strategy.cls, "mounts_3d", None) if self.strategy is not None else None
        if mounts is not None and self.body.mount not in mounts:
            raise ValueError(f"@strategy.kind: {self.strategy.kind} on a 3D device needs body.mount "
                             f"{' or '.join(mounts)} (found {self.body.mount})")
        if self.strategy is not None and getattr(self.strategy.cls, "planar_only", False):
            raise ValueError(f"@strategy.kind: {self.strategy.kind} works on one wheel on a hinge only; this device "
                             f"has {len(self.wheel_list)} wheel(s) on a {self.body.mount} mount")
        return self

    @property
    def is_planar(self) -> bool:
        """True for today's one-wheel planar device (it runs on the planar code path, numbers unchanged):
        `wheel:` (not `wheels:`), a hinge mount, no body part placed in 3D, and no start tilt,
        per-wheel start speeds or vector pushes."""
        return (self.wheels is None and self.body.mount == "hinge"
                and not any(p.placed_off_axis for p in self.body.parts)
                and self.trial.start.tilt is None and self.trial.start.tilt_rate is None
                and not isinstance(self.trial.start.wheel_speed, list)
                and not any(isinstance(p.impulse, tuple) for p in self.trial.pushes))

    def brake_engage_times(self) -> list[float | None]:
        """Each wheel's brake engagement time (its own, else `drive.brake_engage_time`), s; None: instant."""
        own = [getattr(w, "brake_engage_time", None) for w in self.wheel_list]
        return [t if t is not None else self.drive.brake_engage_time for t in own]

    @property
    def design_mount(self) -> str:
        """The mount the balance law designs for: the body's mount, or for a floor mount a hinge at the
        balance edge or a ball at the balance corner (`sim.model.floor.design_mount`)."""
        return self.body.mount if self.body.mount != "floor" else design_mount(self.body.balance_on)

    @property
    def wheel_list(self) -> list:
        """The wheels as a list: `wheels`, or the one `wheel`."""
        return list(self.wheels) if self.wheels is not None else [self.wheel]

    def wheel_motor(self, i: int) -> Motor:
        """Wheel i's motor: its own, else the shared one."""
        return getattr(self.wheel_list[i], "motor", None) or self.motor

    @model_validator(mode="after")
    def _step_counts(self):
        steps = self.trial.duration / self.world.step
        if steps > MAX_STEPS:
            raise ValueError(f"@trial.duration: {self.trial.duration:g} s at a {self.world.step:g} s step needs "
                             f"{steps:.3g} steps; the limit is {MAX_STEPS:.0e}")
        req = self.requirements   # `check` runs trials of these lengths too: the same limit holds
        for key, seconds in (("swing_up_time", req.swing_up_time + req.settle_time + 1.0), ("hold_time", req.hold_time)):
            if seconds / self.world.step > MAX_STEPS:
                raise ValueError(f"@requirements.{key}: check's {seconds:g} s trial at a {self.world.step:g} s step "
                                 f"needs {seconds / self.world.step:.3g} steps; the limit is {MAX_STEPS:.0e}")
        ratio = 1.0 / (self.sensors.rate * self.world.step)
        if ratio < 0.999 or abs(ratio - round(ratio)) > 1e-6 * ratio:
            raise ValueError(f"@sensors.rate: the control period (1/{self.sensors.rate:g} Hz) must be a whole "
                             f"number of physics steps ({self.world.step:g} s); "
                             + step_suggestion(self.sensors.rate, self.world.step))
        check_sensing(self.sensors, self.world.step, self.sensors.rate, self.timing)
        for i, push in enumerate(self.trial.pushes):  # the trial applies a push on step round(at/step)
            if round(push.at / self.world.step) >= self.n_steps:
                raise ValueError(f"@trial.pushes[{i}].at: a push at {push.at:g} s is at or after the end of the "
                                 f"trial ({self.trial.duration:g} s) and would never be applied")
        if self.tolerances is not None:
            from .tolerances import parse_tolerances
            parse_tolerances(self, self.tolerances)  # raises ValueError("@tolerances.<key>: ...")
        return self

    @model_validator(mode="after")
    def _one_supply(self):
        if (self.drive.supply is None) == (self.battery is None):
            raise ValueError("@drive.supply: give exactly one of drive.supply (a bench supply) and battery")
        if self.battery is not None:
            from .cells import open_circuit_volts_per_cell
            b = self.battery
            # the supply the laws, margins and clamps read: the pack at rest at the start (frozen model:
            # set once here, in the one validation pass)
            self.drive.__dict__["supply"] = b.cells * open_circuit_volts_per_cell(b.chemistry, b.state_of_charge)
        if self.motor is not None and self.motor.curve is not None and self.motor.thermal.coupled:
            raise ValueError("@motor.thermal.coupled: the winding's resistance does not enter a motor.curve; "
                             "give one or the other")
        if self.drive.mode == "current" and self.motor is not None and self.motor.curve is not None:
            raise ValueError("@motor.curve: applies to drive.mode voltage (a current-mode driver sets the current)")
        if self.drive.mode == "current" and not getattr(self.strategy.cls, "commands_current", False):
            raise ValueError(f"@drive.mode: strategy '{self.strategy.kind}' commands volts only; drive.mode "
                             "current needs a law that commands current (lqr, fixed_current)")
        if self.drive.mode != "current" and getattr(self.strategy.cls, "needs_current_mode", False):
            raise ValueError(f"@strategy.kind: '{self.strategy.kind}' commands current: it needs drive.mode current")
        # firmware that writes one form only (strategy.writes): the drive must read that form
        writes = getattr(self.strategy.params, "writes", None) if self.strategy.kind == "firmware" else None
        if writes == "duty" and self.drive.pwm is None:
            raise ValueError("@strategy.writes: duty needs drive.pwm.resolution_bits (without it pwm_max is 0 and "
                             "the runner reads the firmware's volts, not its duty)")
        if writes == "volts" and self.drive.pwm is not None:
            raise ValueError("@drive.pwm: the firmware writes volts (strategy.writes), but with drive.pwm it gets "
                             "pwm_max > 0 and the runner reads its duty; remove drive.pwm or write a duty")
        return self

    @property
    def power_model(self) -> bool:
        """True when any power-chain key is set: the runner then drives through
        `sim.physics.drive.PowerChain` instead of today's `MotorDrive` alone."""
        return (self.battery is not None or self.drive.models_power
                or any(m.thermal.coupled or m.curve is not None
                       for m in ([self.motor] if self.motor is not None else []) + [getattr(w, "motor", None) or self.motor
                                                                                   for w in self.wheel_list]
                       if m is not None))

    @model_validator(mode="after")
    def _wheel_spins(self):
        # a wheel of point masses on its axis has no spin inertia: the run would divide by zero
        from .massprops import wheel_props
        for i, w in enumerate(self.wheel_list):
            key = "wheel" if self.wheels is None else f"wheels[{i}]"
            spin = wheel_props(w.parts, rotor_inertia=self.wheel_motor(i).rotor_inertia).inertia_com[0]
            if spin <= 0.0 and not w.inertia_correction:  # a correction is checked below
                raise ValueError(f"@{key}.parts: the wheel's spin inertia is 0 kg m^2 (only point masses on its axis); "
                                 "give it a part with a size (a disk or ring), copies off the axis, or motor.rotor_inertia")
        return self

    @model_validator(mode="after")
    def _corrected_inertias_positive(self):
        # a fitted correction may be negative; the corrected inertias must stay physical
        from .massprops import body_props, wheel_props
        corr = self.body.inertia_correction
        if corr:
            if self.is_planar:
                extra = [(self.motor.mass, self.wheel.at)] if self.motor.mass else []
                own = body_props(self.body.parts, extra_point_masses=extra).inertia_com[0]
            else:
                from .massprops3d import body_mass_properties
                own = body_mass_properties(self).inertia_com_kg_m2[0][0]
            if own + corr <= 0.0:
                raise ValueError(f"@body.inertia_correction: {corr:.4g} kg m^2 would make the body's inertia "
                                 f"about its centre of mass ({own:.4g} kg m^2) zero or negative")
        for i, w in enumerate(self.wheel_list):
            corr = w.inertia_correction
            if corr:
                own = wheel_props(w.parts, rotor_inertia=self.wheel_motor(i).rotor_inertia).inertia_com[0]
                if own + corr <= 0.0:
                    key = "wheel" if self.wheels is None else f"wheels[{i}]"
                    raise ValueError(f"@{key}.inertia_correction: {corr:.4g} kg m^2 would make the wheel's spin "
                                     f"inertia ({own:.4g} kg m^2) zero or negative")
        return self

    @property
    def control_steps(self) -> int:
        """Physics steps per control tick."""
        return int(round(1.0 / (self.sensors.rate * self.world.step)))

    @property
    def n_steps(self) -> int:
        return int(round(self.trial.duration / self.world.step))


def validate_scenario(raw: dict, *, where: str, plugins_anywhere: bool = False) -> Scenario:
    """Validate a raw mapping as the scenario file `where`. `plugins_anywhere`: plug-in files may
    lie outside its folder (for a caller that reports where they lie instead of refusing)."""
    base_dir = Path(where).parent if where and not where.startswith("<") else Path.cwd()
    raw = dict(raw)
    raw.pop("source", None)
    try:
        # a mapping given in memory (no file) comes from Python code: its plug-ins may lie anywhere
        anywhere = plugins_anywhere or where.startswith("<")
        sc = Scenario.model_validate(raw, context={"base_dir": base_dir, "in_memory": anywhere})
    except ValidationError as exc:
        raise ScenarioError(f"{where}: {describe_validation_error(exc, Scenario)}") from None
    except RecursionError:
        raise ScenarioError(f"{where}: scenario nested too deeply") from None
    return sc.model_copy(update={"source": where})
