"""The floor mount: a body resting on a floor plane by its own parts' geometry (`body.mount: floor`).

Scenario keys (checked here, once, at load):
- `body.mount: floor` with a top-level `floor: {friction, restitution, slip_limit}`: the Coulomb friction
  coefficient between body and floor, the coefficient of restitution (0..1), and how far the balancing
  contact may slide while balancing before the trial counts as `slipped` (default 5 mm, see SLIP_LIMIT_M).
- `body.balance_on: edge | corner` (default edge). The body frame's origin is the balancing contact: the
  edge is the body x axis through the origin, the corner is the origin itself, exactly as the hinge and
  ball mounts' pivot. The law designs as on a hinge (edge) or a ball (corner) at that point, assuming the
  contact does not slip (`design_mount`).
- `trial.start: {resting_on: face | edge | corner, side: +1 | -1}`, or today's `angle` (edge) / `tilt`
  (corner). face: lying on the face next to the balance edge, reached by turning about the edge
  (world x at the start) from balancing on it, in the sign of `side`, until a second point of the body
  reaches the floor; edge: balanced on the edge at rest (for a corner device: the edge along body x, next
  to the corner); corner: balanced on the corner at rest. The body is placed with its lowest point on
  z = 0, at rest.

Collision geometry (`collision_shapes`), body parts only, in the body frame: a box as its box, a hollow
box as its outer box (the floor only meets its outside), a disk or ring as a solid cylinder of its outer
radius and thickness (a ring's hole never meets a flat floor from outside; a disk without a thickness as
1 mm thick), a rod with a radius as a cylinder; a point or a rod without a radius has no shape. Wheels
have none (they turn inside the body). Faces named in outputs are the body frame's axis directions
("-y face": the body's -y side down), which are a box body's faces.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np
from pydantic import BaseModel, ConfigDict

from ..core.frames import smallest_rotation_to_z
from ..core.units import Q
from .massprops3d import rot_x, rot_y, rotation_matrix

SLIP_LIMIT_M = 0.005
"""Default `floor.slip_limit`: 5 mm. A held contact in pybullet creeps well under a millimetre over a
trial (the contact solver's compliance; `tests/test_floor.py` measures the demo's), while 5 mm is about a
tenth of a small cube's half-width: a contact that moved that far has slid, not crept (our choice)."""
THIN_DISK_M = 1e-3
CONTACT_TOLERANCE_M = 1e-4   # a body reaching this far below its balance contact is refused (our choice)
RIM_POINTS = 64        # points per cylinder rim when finding the resting angle (about 0.1% of the radius off)


class FloorSection(BaseModel):
    """`floor:` (with `body.mount: floor`)."""

    model_config = ConfigDict(extra="forbid", frozen=True, arbitrary_types_allowed=True)
    friction: Q("fraction", ge=0, le=10)
    """Coulomb friction coefficient between the body and the floor (pybullet caps it at 10)."""
    restitution: Q("fraction", ge=0, le=1)
    """Coefficient of restitution of a body-floor impact, 0 (no bounce) to 1."""
    slip_limit: Q("length", gt=0, le=10) = SLIP_LIMIT_M
    """How far the balancing contact may slide while balancing before the trial is `slipped`, m."""


FaceSide = Literal[1, -1]


@dataclass(frozen=True)
class CollisionShape:
    """One collision shape in the body frame: kind "box" (half extents along its own x, y, z) or
    "cylinder" (radius, half length along its own z); centre m; rotation rows (own axes to body)."""

    kind: str
    sizes: tuple[float, ...]
    centre_m: tuple[float, float, float]
    rotation: tuple[tuple[float, float, float], ...]


@dataclass(frozen=True)
class FloorSpec:
    """What the device carries for the floor (SI): friction, restitution, slip limit m, balance_on, shapes."""

    friction: float
    restitution: float
    slip_limit_m: float
    balance_on: str
    shapes: tuple[CollisionShape, ...]


def design_mount(balance_on: str | None) -> str:
    """The mount the balance law designs for: a hinge at the edge, a ball at the corner (no slip)."""
    return "ball" if balance_on == "corner" else "hinge"


def floor_spec(sc) -> FloorSpec:
    f = sc.floor
    return FloorSpec(friction=f.friction, restitution=f.restitution, slip_limit_m=f.slip_limit,
                     balance_on=sc.body.balance_on or "edge", shapes=collision_shapes(sc.body.parts))


def check_floor(sc) -> None:
    """The floor keys' rules across sections; raises ValueError("@key: ...") (one line)."""
    on_floor = sc.body.mount == "floor"
    start = sc.trial.start
    if not on_floor:
        for key, used in (("floor", sc.floor is not None), ("body.balance_on", sc.body.balance_on is not None),
                          ("trial.start.resting_on", start.resting_on is not None),
                          ("trial.start.side", start.side is not None)):
            if used:
                raise ValueError(f"@{key}: needs body.mount: floor (this body is on a {sc.body.mount} mount)")
        return
    if sc.floor is None:
        raise ValueError("@floor: body.mount: floor needs a floor section {friction, restitution}")
    if sc.body.pivot_friction.coulomb or sc.body.pivot_friction.viscous:
        raise ValueError("@body.pivot_friction: a body on the floor has no pivot; its contact friction is floor.friction")
    if sc.body.inertia_correction:
        raise ValueError("@body.inertia_correction: not taken on a floor mount (the body floats; give its parts)")
    corner = sc.body.balance_on == "corner"
    if start.resting_on is not None:
        if start.resting_on == "corner" and not corner:
            raise ValueError("@trial.start.resting_on: corner needs body.balance_on: corner")
        if start.angle or start.rate or start.tilt is not None:
            raise ValueError("@trial.start.resting_on: give resting_on or a start angle/tilt, not both")
    if start.side is not None and start.resting_on != "face":
        raise ValueError("@trial.start.side: the side a body lies on goes with resting_on: face")
    shapes = collision_shapes(sc.body.parts)
    if not shapes:
        raise ValueError("@body.parts: a body on the floor needs a part with a shape that touches it "
                         "(box, hollow_box, disk, ring, or a rod with a radius)")
    below = -lowest_z(shapes, _upright(sc, corner))
    if below > CONTACT_TOLERANCE_M:
        where = "corner" if corner else "edge"
        raise ValueError(f"@body.balance_on: balanced on its {where}, the body reaches {below * 1e3:.1f} mm below "
                         f"it; the body frame's origin must be on the {where} the body stands on (its lowest "
                         f"{'point' if corner else 'line'} when balanced)")


def _upright(sc, corner: bool):
    """The balanced attitude from the scenario's mass properties (as `Device3D.upright`)."""
    from .massprops3d import body_mass_properties, wheel_centre, wheel_inertias
    body = body_mass_properties(sc)
    first, mass = body.mass_kg * np.array(body.com_m), body.mass_kg
    for i, w in enumerate(sc.wheel_list):
        m = wheel_inertias(w, rotor_inertia=sc.wheel_motor(i).rotor_inertia)[0]
        first, mass = first + m * np.array(wheel_centre(w)), mass + m
    com = first / mass
    return smallest_rotation_to_z(tuple(float(v) for v in (com if corner else (0.0, com[1], com[2]))))


# -- geometry ---------------------------------------------------------------------------------------
def collision_shapes(parts) -> tuple[CollisionShape, ...]:
    """The body parts' collision shapes in the body frame (see the module docstring)."""
    out = []
    for p in parts:
        rot = rotation_matrix(p.rotation)
        at = p.at if isinstance(p.at, tuple) else (0.0, 0.0, float(p.at))
        if p.shape in ("box", "hollow_box"):   # part axes: x thickness, y width, z length (massprops)
            kind, sizes = "box", (p.thickness / 2, p.width / 2, p.length / 2)
        elif p.shape in ("disk", "ring"):      # axis along the part's x; pybullet's cylinder is along z
            radius = p.radius if p.shape == "disk" else p.outer_radius
            kind, sizes, rot = "cylinder", (radius, (p.thickness or THIN_DISK_M) / 2), rot @ rot_y(math.pi / 2)
        elif p.shape == "rod" and p.radius:
            kind, sizes = "cylinder", (p.radius, p.length / 2)
        else:
            continue
        out.append(CollisionShape(kind, tuple(float(s) for s in sizes), tuple(float(a) for a in at),
                                  tuple(tuple(float(v) for v in row) for row in rot)))
    return tuple(out)


def support_points(shapes, *, rim_points: int = RIM_POINTS) -> np.ndarray:
    """Points of the shapes' hulls in the body frame, (n, 3), m: box corners, cylinder rims sampled."""
    pts = []
    for s in shapes:
        rot, c = np.array(s.rotation), np.array(s.centre_m)
        if s.kind == "box":
            hx, hy, hz = s.sizes
            local = np.array([[sx * hx, sy * hy, sz * hz] for sx in (-1, 1) for sy in (-1, 1) for sz in (-1, 1)])
        else:
            r, hl = s.sizes
            a = np.linspace(0.0, 2 * math.pi, rim_points, endpoint=False)
            ring = np.column_stack([r * np.cos(a), r * np.sin(a)])
            local = np.vstack([np.column_stack([ring, np.full(rim_points, z)]) for z in (-hl, hl)])
        pts.append(local @ rot.T + c)
    return np.vstack(pts)


def lowest_z(shapes, attitude, origin_z: float = 0.0) -> float:
    """The lowest world height of the shapes, m, for the body at `attitude` (R_wb, rows) with its
    origin at height `origin_z`; cylinders exactly (c_z - h|n_z| - r sqrt(1 - n_z^2)), boxes by corners."""
    r_wb = np.array(attitude)
    low = math.inf
    for s in shapes:
        rot = r_wb @ np.array(s.rotation)
        cz = float(r_wb[2] @ np.array(s.centre_m)) + origin_z
        if s.kind == "box":
            low = min(low, cz - float(np.abs(rot[2]) @ np.array(s.sizes)))
        else:
            r, hl = s.sizes
            nz = float(rot[2, 2])
            low = min(low, cz - hl * abs(nz) - r * math.sqrt(max(0.0, 1.0 - nz * nz)))
    return low


def face_angle(shapes, base_attitude, side: int) -> float:
    """How far (rad, >= 0) the body turns about world x through the origin, from `base_attitude` in the
    sign of `side`, before a second point of it reaches the floor. A point at (y, z) from the edge is at
    height r cos(theta - phi) after a turn theta (phi = atan2(y, z)); it lands at theta = phi + pi/2
    (side +1) or -(pi/2 - phi) (side -1)."""
    pts = support_points(shapes) @ np.array(base_attitude).T
    y, z = pts[:, 1], pts[:, 2]
    r = np.hypot(y, z)
    keep = r > 1e-9
    phi = np.arctan2(y[keep], z[keep])
    turns = (phi + math.pi / 2) if side > 0 else (math.pi / 2 - phi)
    turns = np.mod(turns, 2 * math.pi)
    turns = turns[turns > 1e-9]
    return float(np.min(turns)) if turns.size else math.pi


def edge_upright(com_m) -> tuple[tuple[float, float, float], ...]:
    """The turn about x that brings the centre of mass's y-z projection above the x axis (balanced on
    the edge), rows."""
    return smallest_rotation_to_z((0.0, float(com_m[1]), float(com_m[2])))


def start_attitude(sc, device) -> tuple[tuple[tuple[float, float, float], ...], tuple[float, float, float]]:
    """(R_wb, body rate in the world frame rad/s) that the trial starts from (see the module docstring)."""
    start, floor = sc.trial.start, device.floor
    r0 = np.array(device.upright())
    if start.resting_on == "corner":
        return _rows(r0), (0.0, 0.0, 0.0)
    r_edge = np.array(edge_upright(device.com_m)) if floor.balance_on == "corner" else r0
    if start.resting_on == "edge":
        return _rows(r_edge), (0.0, 0.0, 0.0)
    if start.resting_on == "face":
        side = start.side or 1
        theta = side * face_angle(floor.shapes, r_edge, side)
        return _rows(rot_x(theta) @ r_edge), (0.0, 0.0, 0.0)
    if floor.balance_on == "corner":
        tx, ty = start.tilt if start.tilt is not None else (0.0, 0.0)
        return _rows(rot_y(ty) @ rot_x(tx) @ r0), (0.0, 0.0, 0.0)
    return _rows(rot_x(start.angle) @ r0), (float(start.rate), 0.0, 0.0)


def face_down(attitude) -> tuple[str, float]:
    """(the body face nearest to facing the floor, e.g. "-y face"; cosine of its normal's angle to world
    down). Faces are the body frame's axis directions."""
    down = -np.array(attitude)[2]          # world -z in the body frame: R_wb^T (0, 0, -1)
    i = int(np.argmax(np.abs(down)))
    return f"{'+' if down[i] > 0 else '-'}{'xyz'[i]} face", float(abs(down[i]))


def _rows(m) -> tuple[tuple[float, float, float], ...]:
    return tuple(tuple(float(v) for v in row) for row in np.asarray(m))
