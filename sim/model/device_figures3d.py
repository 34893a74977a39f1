"""The derived figures `validate` prints for a 3D device (`sim.model.device3d.Device3D`): what a
builder checks before buying parts, per wheel and for the body as a whole.

Frames as in `sim.core.frames`. The largest tilt the wheels can hold is the static torque balance
of a hinge or ball body held tilted by theta: gravity's torque m g d sin(theta) about a horizontal
axis u must be met by the wheels' motor torques, each along its own axis and at most its stall
torque (common practice, no source). On a hinge only the torques' components along the hinge count
(the bearing takes the rest). On a ball the wheels' torques must add up to exactly that torque
about u in the horizontal plane (a torque about the other horizontal axis would tip the body the
other way; one about the vertical only turns its heading): for each of HOLD_DIRECTIONS directions
u a linear program (scipy.optimize.linprog) finds the largest torque along u, and the worst
direction sets the figure.
"""

from __future__ import annotations

import math

import numpy as np

from ..strategies.jump_figures import edge_to_corner, face_to_edge, jump_margin, wheel_reach

HOLD_DIRECTIONS = 72     # horizontal directions tried for a ball mount (every 5 degrees)


def stall_torque_n_m(wheel) -> float:
    """k_t min(V / R, I_max): the largest torque wheel's motor gives at rest, N m."""
    return wheel.k_t_n_m_a * min(wheel.supply_v / wheel.resistance_ohm, wheel.current_limit_a)


def holdable_tilt(device) -> tuple[float, float | None]:
    """(largest tilt the wheels can hold in the worst direction, rad; that direction's angle in the
    horizontal plane from the heading frame's x axis, rad, or None on a hinge)."""
    mgd = device.gravity_torque_coeff_n_m
    if mgd <= 0:
        return math.pi, None
    r0 = np.array(device.upright())
    axes = np.array([r0 @ np.array(w.axis) for w in device.wheels])      # upright, world frame
    stalls = np.array([stall_torque_n_m(w) for w in device.wheels])
    if device.mount == "hinge":
        capacity = float(np.sum(stalls * np.abs(axes[:, 0])))
        return math.asin(min(1.0, capacity / mgd)), None
    worst, worst_phi = math.inf, 0.0
    for phi in np.linspace(0.0, math.pi, HOLD_DIRECTIONS // 2, endpoint=False):   # +-u hold alike
        alpha = _hold_torque(axes, stalls, float(phi))
        if alpha < worst:
            worst, worst_phi = alpha, float(phi)
    return math.asin(min(1.0, worst / mgd)), worst_phi


def holdable_tilt_about(device, phi_rad: float) -> float:
    """The largest tilt (rad) a ball-mounted device's wheels can hold about the horizontal axis at
    `phi_rad` from the heading frame's x axis (the same linear program as `holdable_tilt`)."""
    mgd = device.gravity_torque_coeff_n_m
    if mgd <= 0:
        return math.pi
    r0 = np.array(device.upright())
    axes = np.array([r0 @ np.array(w.axis) for w in device.wheels])
    stalls = np.array([stall_torque_n_m(w) for w in device.wheels])
    return math.asin(min(1.0, _hold_torque(axes, stalls, phi_rad) / mgd))


def _hold_torque(axes: np.ndarray, stalls: np.ndarray, phi: float) -> float:
    """The largest torque about the horizontal axis u at `phi` the wheels give with no torque about
    the other horizontal axis, N m (`axes`: wheel axes upright, world frame)."""
    from scipy.optimize import linprog

    n = len(stalls)
    u = np.array([math.cos(phi), math.sin(phi)])
    v = np.array([-u[1], u[0]])
    # variables: wheel torques t_i and the torque alpha along u; maximise alpha with
    # sum t_i (a_i . u) = alpha, sum t_i (a_i . v) = 0 (horizontal components), |t_i| <= stall_i
    c = np.zeros(n + 1)
    c[-1] = -1.0
    a_eq = np.vstack([np.append(axes[:, :2] @ u, -1.0), np.append(axes[:, :2] @ v, 0.0)])
    bounds = [(-s, s) for s in stalls] + [(0.0, None)]
    res = linprog(c, A_eq=a_eq, b_eq=np.zeros(2), bounds=bounds, method="highs")
    return float(res.x[-1]) if res.success else 0.0


def figures3d_text(device, spec, *, rest_tilt_rad: float = 0.0) -> list[str]:
    """Lines for the terminal. `rest_tilt_rad`: the start tilt about the hinge (a body lying on a face:
    the jump's figures are given from there)."""
    com = device.com_m
    d = float(np.linalg.norm(com))
    r0 = np.array(device.upright())
    lean = math.degrees(math.acos(max(-1.0, min(1.0, float(r0[2, 2])))))
    j = device.inertia_about_pivot_kg_m2(with_spin=True)
    j = np.where(np.abs(j) < 1e-12 * np.abs(j).max(), 0.0, j)     # rounding left by the rotations
    lines = [
        (f"{device.mount} mount" if device.floor is None else
         f"floor mount, balancing on its {device.floor.balance_on} (the pivot is that contact; the law designs as on a {device.mount})")
        + f", {device.n_wheels} wheel{'s' if device.n_wheels > 1 else ''}; mass "
        f"{device.mass_kg * 1000:.1f} g, centre of mass {d * 1000:.1f} mm from the pivot at "
        f"[{', '.join(f'{v * 1000:.1f}' for v in com)}] mm (body frame), m g d {device.gravity_torque_coeff_n_m * 1000:.2f} mN m",
        f"upright: the body turned {lean:.2f} deg from its own z axis (centre of mass straight above the pivot)",
        "inertia about the pivot, wheels locked (body frame, kg m^2): "
        + "; ".join("[" + ", ".join(f"{v:.4g}" for v in row) + "]" for row in j),
    ]
    for i, w in enumerate(device.wheels, start=1):
        no_load = w.supply_v / w.k_e_v_s_rad
        lines.append(f"wheel {i}: axis [{', '.join(f'{v:.3g}' for v in w.axis)}] at "
                     f"[{', '.join(f'{v * 1000:.1f}' for v in w.at_m)}] mm, I_w {w.spin_inertia_kg_m2:.4g} kg m^2, "
                     f"no-load speed {no_load:.1f} rad/s ({no_load * 60 / (2 * math.pi):.0f} rpm), "
                     f"stall torque {stall_torque_n_m(w) * 1000:.1f} mN m")
    tilt, phi = holdable_tilt(device)
    where = "" if phi is None else f", worst about the axis {math.degrees(phi):.0f} deg from x in the horizontal plane"
    lines.append(f"largest tilt the wheels can hold: {math.degrees(tilt):.3g} deg (static balance of stall torques"
                 f" against m g d sin(tilt){where})")
    lines += jump_lines(device, rest_tilt_rad=rest_tilt_rad)
    lines.append(f"strategy {spec.kind}:")
    for name, value in spec.params.model_dump().items():
        source = "scenario" if name in spec.params.model_fields_set else "default"
        shown = f"{value:.6g}" if isinstance(value, float) else str(value)
        lines.append(f"  {name} = {shown} ({source})")
    return lines


def jump_rest_tilt(sc, device) -> float:
    """The tilt about the balance edge the scenario starts from, rad: `trial.start.angle` on a hinge; on
    the floor, resting on a face, the turn about the balance edge (for a corner, the edge along body x
    through it) that lays it on that face (0 otherwise)."""
    start = sc.trial.start
    if device.floor is None or getattr(start, "resting_on", None) != "face":
        return start.angle
    from .floor import edge_upright, face_angle
    side = start.side or 1
    edge = device.upright() if device.floor.balance_on == "edge" else edge_upright(device.com_m)
    return side * face_angle(device.floor.shapes, edge, side)


def jump_lines(device, *, rest_tilt_rad: float) -> list[str]:
    """The brake-to-jump figures (`sim.strategies.jump_figures`) of a device with a brake: face to edge
    from `rest_tilt_rad` on a hinge, edge to corner with three wheels; lossless, so a lower bound."""
    if all(w.brake_torque_n_m is None for w in device.wheels):
        return []
    reach = [wheel_reach(w) for w in device.wheels]
    jumps = []
    if (device.mount == "hinge" or device.floor is not None) and abs(rest_tilt_rad) > 1e-9:
        jumps.append((f"face to edge from {math.degrees(rest_tilt_rad):.3g} deg",
                      lambda: face_to_edge(device, rest_tilt_rad=rest_tilt_rad)))
    if device.n_wheels == 3:
        jumps.append(("edge to corner", lambda: edge_to_corner(device)))
    lines = []
    for name, figures in jumps:
        try:
            fig = figures()
        except ValueError as exc:     # no wheel along the turning axis, or no rise
            lines.append(f"jump {name}: {exc}")
            continue
        lines.append(f"jump {name}: needs {fig.needed_wheel_speed_rad_s:.4g} rad/s before the brake (lossless, "
                     f"the centre of mass rising {fig.rise_m * 1000:.3g} mm); jump margin "
                     f"{jump_margin(fig.wheel_speeds_rad_s, reach):.3g} (reachable / needed - 1; below 0: out of reach "
                     "at this supply)")
    return lines
