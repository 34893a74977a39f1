"""Jump-up figures: the wheel speed a brake-to-jump needs, and how far over it the motor can go.

Here, beside the laws, because the jump laws compute them at construction (a strategy cannot import
the model layer); the figures read a 3D device through the fields every `Device3D` has (body mass,
centre of mass and inertia tensor in the body frame, and per wheel its centre, unit axis, mass,
spin and transverse inertias), via `device.inertia_about_pivot_kg_m2()`.

Frames and signs: the body frame of `sim.core.frames` with its origin at the balancing contact (the
edge is the body x axis through the origin, the corner is the origin). Wheel speeds are relative to
the body, positive by the right-hand rule about the wheel's axis. A turning axis `n` is a unit vector
in the body frame; a positive body rate about `n` is the sense that raises the centre of mass.

The relation (momentum, then energy; Gajamohan, Merz, Thommen & D'Andrea, "The Cubli: a cube that
can jump up and balance", IROS 2012; shared/references.md "Jump-up by braking"): the body rests, the
wheels spin at w_i; a brake short enough that gravity's impulse during it is negligible locks them to
the body, and the angular momentum about the turning axis is kept:

    sum_i I_i (a_i . n) w_i = Theta_0 rate,    Theta_0 = n^T J_lock n,

J_lock the whole device about the contact with the wheels locked (their spin inertia included). The
body then rises if 1/2 Theta_0 rate^2 >= m g h, h the rise of the whole device's centre of mass.
Several wheels share the momentum in proportion to their axes' components c_i = a_i . n
(w_i = c_i L / sum_j I_j c_j^2: the split with the least wheel kinetic energy, so the least brake
loss, for a given momentum, by a Lagrange multiplier). Lossless: a real brake and contact lose some
energy, so the measured need is higher (the laws aim a margin over it and correct on a miss).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

EDGE_AXIS = (1.0, 0.0, 0.0)     # the balance edge: body x through the origin (the floor convention)


@dataclass(frozen=True)
class JumpFigures:
    """One jump's figures (SI). `wheel_speeds_rad_s`: each wheel's needed speed before the brake,
    signed (relative to the body, about its own axis), 0 for wheels that take no part;
    `needed_wheel_speed_rad_s` the largest magnitude among them."""

    axis: tuple[float, float, float]       # turning axis n, body frame (unit)
    rise_angle_rad: float                  # angle the body turns from rest to balance
    rise_m: float                          # rise of the whole device's centre of mass
    inertia_kg_m2: float                   # Theta_0 = n^T J_lock n
    energy_needed_j: float                 # m g rise
    body_rate_rad_s: float                 # the body rate right after the brake that just reaches balance
    wheel_speeds_rad_s: tuple[float, ...]
    needed_wheel_speed_rad_s: float


def face_to_edge(device, *, rest_tilt_rad: float, wheels=None) -> JumpFigures:
    """The jump from lying on a face to balancing on the edge (body x axis through the origin).

    `rest_tilt_rad`: the body's tilt about the edge while it lies on the face, from balance (its
    sign says which face; the rise is towards 0). The centre of mass turns about the edge at its
    distance d from the edge (the y-z part of its position), so it rises d (1 - cos(rest_tilt)).
    `wheels`: indices of the wheels that take part (default: every wheel with an axis component
    along the edge).
    """
    c = np.asarray(device.com_m, dtype=float)
    d = math.hypot(c[1], c[2])
    theta0 = abs(float(rest_tilt_rad))
    sense = -1.0 if rest_tilt_rad > 0 else 1.0     # the rate that brings the tilt back to 0
    n = np.array(EDGE_AXIS) * sense
    return _figures(device, n, rise_angle_rad=theta0, rise_m=d * (1.0 - math.cos(theta0)), wheels=wheels)


def edge_to_corner(device, *, wheels=None) -> JumpFigures:
    """The jump from balancing on the edge (body x through the origin) at rest to balancing on the
    corner (the origin).

    Assumed: the body starts balanced on the edge and still (centre of mass straight above the
    edge); the corner stays where it is and the far end of the edge lifts (no slip); the body turns
    about the horizontal axis through the corner at right angles to the edge, n = c x u / |c x u|
    (c the centre of mass, u its direction from the edge, the vertical at the start), by the angle
    between c and u; the brake is short; only the wheels' momentum along n counts (what they hold
    across n is taken by the floor along the edge while it is still in contact); lossless. The
    centre of mass rises from d (its distance from the edge) to |c|.
    """
    c = np.asarray(device.com_m, dtype=float)
    d = math.hypot(c[1], c[2])
    if d == 0.0 or abs(c[0]) < 1e-12:
        raise ValueError("the centre of mass lies on the edge's normal plane through the corner: no rise to "
                         "the corner (edge_to_corner needs a centre of mass off the plane x = 0)")
    u = np.array([0.0, c[1] / d, c[2] / d])
    n = np.cross(c, u)
    n = n / np.linalg.norm(n)
    norm_c = float(np.linalg.norm(c))
    return _figures(device, n, rise_angle_rad=math.atan2(abs(c[0]), d), rise_m=norm_c - d, wheels=wheels)


def _figures(device, n: np.ndarray, *, rise_angle_rad: float, rise_m: float, wheels) -> JumpFigures:
    j_lock = np.asarray(device.inertia_about_pivot_kg_m2(with_spin=True), dtype=float)
    theta0 = float(n @ j_lock @ n)
    mass = float(device.mass_kg)
    energy = mass * float(device.gravity_m_s2) * rise_m
    rate = math.sqrt(2.0 * energy / theta0)
    units = device.wheels
    take = range(len(units)) if wheels is None else wheels
    comps = [0.0] * len(units)
    for i in take:
        comps[i] = float(np.dot(units[i].axis, n))
    share = sum(units[i].spin_inertia_kg_m2 * comps[i] ** 2 for i in range(len(units)))
    if share < 1e-15:
        raise ValueError("no wheel has an axis component along the turning axis: it cannot throw the body about it")
    momentum = theta0 * rate
    speeds = tuple(comps[i] * momentum / share for i in range(len(units)))
    return JumpFigures(axis=tuple(float(v) for v in n), rise_angle_rad=float(rise_angle_rad), rise_m=float(rise_m),
                       inertia_kg_m2=theta0, energy_needed_j=energy, body_rate_rad_s=rate,
                       wheel_speeds_rad_s=speeds, needed_wheel_speed_rad_s=max(abs(s) for s in speeds))


def reachable_wheel_speed(*, k_t_n_m_a: float, k_e_v_s_rad: float, resistance_ohm: float, current_limit_a: float,
                          supply_v: float, coulomb_n_m: float = 0.0, viscous_n_m_s: float = 0.0) -> float:
    """The highest wheel speed the motor can hold at this supply, the body still, rad/s.

    Defined as the speed where the torque available equals the bearing's friction: available is the
    lesser of k_t I_max (the current limit) and k_t (V - k_e w) / R (the back-EMF line;
    shared/references.md "Motor"), friction T_c + b w. Without friction this is the no-load speed
    V / k_e (the current limit only slows the approach); with friction it is a little lower, and 0
    when the current limit cannot overcome the Coulomb friction.
    """
    drive = k_t_n_m_a * supply_v / resistance_ohm
    if min(drive, k_t_n_m_a * current_limit_a) <= coulomb_n_m:
        return 0.0
    on_line = (drive - coulomb_n_m) / (k_t_n_m_a * k_e_v_s_rad / resistance_ohm + viscous_n_m_s)
    on_limit = (k_t_n_m_a * current_limit_a - coulomb_n_m) / viscous_n_m_s if viscous_n_m_s > 0 else math.inf
    return min(on_line, on_limit)


def jump_margin(needed_rad_s, reachable_rad_s) -> float:
    """How far over the needed speed the motors can go: min_i (reachable_i / |needed_i|) - 1 over the
    wheels that take part (needed_i != 0). 0.3: every wheel can reach 30% above its need;
    negative: the jump is out of reach at this supply. Either argument may be one number."""
    needed = np.atleast_1d(np.abs(np.asarray(needed_rad_s, dtype=float)))
    reach = np.broadcast_to(np.atleast_1d(np.asarray(reachable_rad_s, dtype=float)), needed.shape)
    used = needed > 0.0
    if not used.any():
        return math.inf
    return float(np.min(reach[used] / needed[used]) - 1.0)


def wheel_reach(unit) -> float:
    """`reachable_wheel_speed` of one 3D wheel unit (`sim.model.linear3d.WheelUnit` fields), rad/s."""
    return reachable_wheel_speed(k_t_n_m_a=unit.k_t_n_m_a, k_e_v_s_rad=unit.k_e_v_s_rad,
                                 resistance_ohm=unit.resistance_ohm, current_limit_a=unit.current_limit_a,
                                 supply_v=unit.supply_v, coulomb_n_m=unit.coulomb_n_m, viscous_n_m_s=unit.viscous_n_m_s)
