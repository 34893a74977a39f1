"""The picture of a 3D device: its parts as flat-shaded polygons from a pinhole camera, drawn with PIL.

Frames come from a finished trial's trace alone (tilt angles, heading, wheel angles), never from
simulating again. Each frame projects every face of the body, its wheels and the stand through the
camera (`Camera3D`, a 3x4 matrix P = K [R | t]), drops closed solids' faces that look away, and
paints the rest far to near (the painter's algorithm); hollow boxes are see-through shells, so the
wheels inside a cube show. The sky, the floor and its grid are drawn once per clip.

Frames and signs follow `sim.core.frames`: world z up; the body's attitude in the world is
R_wb = R R0, R = Rz(heading) Ry(tilt_y) Rx(tilt_x) relative to the upright attitude R0; on a hinge
R = Rx(tilt_x). A wheel's angle (trace `wheel{i}_angle_rad`) is relative to the body, positive
about its own axis (right-hand rule). Distances m, angles rad, pixels with row 0 at the top.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from ..model.massprops import wheel_part_outer_radius
from ..model.massprops3d import rot_x, rot_y, rot_z
from .mesh3d import Face, basis_from_x, body_part_faces, box, moved, ring, spin_mark, wheel_part_faces
from .render import COLOURS, SKY_BOTTOM, SKY_TOP, _part_colour

FOV_DEG = 30.0
PRESETS = {"oblique": (38.0, 22.0), "axis": (0.0, 10.0)}
"""Camera azimuth and elevation, deg: `oblique` from the +x, -y side and above; `axis` nearly along
the world x axis (a hinge's axis), raised a little so the device's depth still shows."""
LIGHT_WORLD = np.array([0.45, -0.55, 0.75]) / np.linalg.norm([0.45, -0.55, 0.75])
AMBIENT, DIFFUSE = 0.42, 0.58
FRAMING = {"hinge": ((0.5, 1.0, -1.0), -1.1), "ball": ((0.6, 0.6, -0.4), -0.9), "floor": ((0.7, 0.7, 0.0), 0.0)}
"""Per mount, the box the camera keeps in view ((half x, half y, lowest z), in reaches from the pivot:
a hinge body may swing a full turn, a ball-mounted one mostly stands above its socket) and the
floor's height (a floor-mounted device stands on the ground plane z = 0)."""
WHEEL_TINTS = ((1.0, 0.69, 0.23), (0.35, 0.62, 1.0), (0.45, 0.86, 0.45))
"""Each wheel's spin mark, dial and plot line share its tint (wheel 1, 2, 3)."""


def body_to_world(tilt_x: float, tilt_y: float, heading: float, upright) -> np.ndarray:
    """R_wb = Rz(heading) Ry(tilt_y) Rx(tilt_x) R0: body-frame vectors to the world frame."""
    return rot_z(heading) @ rot_y(tilt_y) @ rot_x(tilt_x) @ np.asarray(upright, dtype=float)


@dataclass(frozen=True)
class Camera3D:
    """A pinhole camera looking from `eye` at `target` (m, world), world z up, `focal_px` pixels
    focal length, principal point (cx, cy) px; `width` x `height` pixels."""

    width: int
    height: int
    eye: tuple
    target: tuple
    focal_px: float
    cx: float
    cy: float

    @property
    def rotation(self) -> np.ndarray:
        """R_cw: world vectors to camera axes (x right, y down, z along the line of sight)."""
        f = np.subtract(self.target, self.eye)
        f = f / np.linalg.norm(f)
        r = np.cross(f, [0.0, 0.0, 1.0])
        r = r / np.linalg.norm(r)
        u = np.cross(r, f)
        return np.array([r, -u, f])

    @cached_property
    def _p(self) -> np.ndarray:
        return self.matrix()

    def matrix(self) -> np.ndarray:
        """P = K [R_cw | -R_cw eye], 3x4: homogeneous world points to homogeneous pixels."""
        k = np.array([[self.focal_px, 0.0, self.cx], [0.0, self.focal_px, self.cy], [0.0, 0.0, 1.0]])
        rot = self.rotation
        return k @ np.hstack([rot, (-rot @ np.asarray(self.eye, dtype=float))[:, None]])

    def project(self, points) -> tuple[np.ndarray, np.ndarray]:
        """(pixels (N, 2) as column, row; depth along the line of sight (N,), m) of world points (N, 3)."""
        p = np.atleast_2d(np.asarray(points, dtype=float))
        m = self._p
        h = p @ m[:, :3].T + m[:, 3]
        return h[:, :2] / h[:, 2:3], h[:, 2]

    def scaled(self, factor: float) -> "Camera3D":
        """The same view drawn `factor` times larger in pixels (supersampling)."""
        return Camera3D(int(round(self.width * factor)), int(round(self.height * factor)), self.eye, self.target,
                        self.focal_px * factor, self.cx * factor, self.cy * factor)


def frame_camera(corners, *, preset: str, width: int, height: int, margin: float = 0.92) -> Camera3D:
    """The camera of `preset` that sees every corner (world points, m) inside `margin` of a
    `width` x `height` picture, centred on the corners' middle."""
    az, el = (math.radians(v) for v in PRESETS[preset])
    direction = np.array([math.cos(el) * math.cos(az), -math.cos(el) * math.sin(az), math.sin(el)])
    corners = np.asarray(corners, dtype=float)
    target = (corners.min(axis=0) + corners.max(axis=0)) / 2
    focal = height / 2 / math.tan(math.radians(FOV_DEG) / 2)
    size = float(np.linalg.norm(corners.max(axis=0) - corners.min(axis=0)))

    def fits(dist: float) -> bool:
        cam = Camera3D(width, height, tuple(target + dist * direction), tuple(target), focal, width / 2, height / 2)
        px, depth = cam.project(corners)
        return bool((depth > 0).all() and (np.abs(px[:, 0] - width / 2) <= margin * width / 2).all()
                    and (np.abs(px[:, 1] - height / 2) <= margin * height / 2).all())
    lo, hi = 0.1 * size, 50.0 * size
    for _ in range(40):     # the nearest distance that fits: bisection
        mid = (lo + hi) / 2
        lo, hi = (lo, mid) if fits(mid) else (mid, hi)
    return Camera3D(width, height, tuple(target + hi * direction), tuple(target), focal, width / 2, height / 2)


class _Group:
    """Faces of one rigid piece, packed into arrays once: vertices, per-face slices, normals, centres,
    colours (0..255 before shading), opacities, whether a face may be culled, depth biases."""

    def __init__(self, faces: list, spheres: list = ()):
        self.faces = faces
        self.verts = np.concatenate([f.verts for f in faces]) if faces else np.zeros((0, 3))
        sizes = [len(f.verts) for f in faces]
        self.starts = np.cumsum([0] + sizes).tolist()
        self.normals = np.array([f.normal for f in faces]).reshape(-1, 3)
        self.centres = np.array([f.verts.mean(axis=0) for f in faces]).reshape(-1, 3)
        self.rgb = 255.0 * np.array([f.rgb for f in faces]).reshape(-1, 3)
        self.alpha = [int(255 * f.alpha) for f in faces]
        self.cull = np.array([f.cull for f in faces], dtype=bool)
        self.bias = np.array([f.bias for f in faces], dtype=float)
        self.marks = self.bias > 0          # spin marks: washed into the wheel's colour when it turns fast
        self.outline = [None if f.outline is None else tuple(int(255 * v) for v in f.outline) + (235,) for f in faces]
        self.spheres = list(spheres)


@dataclass(frozen=True)
class Layout3D:
    """Sizes of the picture, m: the device's reach from the pivot, the floor's height, the mount."""

    reach_m: float
    floor_z_m: float
    mount: str


def _wheel_group(w, *, tint) -> tuple[_Group, float, float]:
    """(the wheel's faces in its own frame, outer radius m, thickness m)."""
    radius = max([wheel_part_outer_radius(p) for p in w.parts] + [0.01])
    solid = [p for p in w.parts if p.shape in ("ring", "disk")]
    thick = max([p.thickness or 0.15 * wheel_part_outer_radius(p) for p in solid] + [0.08 * radius])
    faces = []
    for p in w.parts:
        faces += wheel_part_faces(p, _part_colour(p)[:3], bolt_rgb=COLOURS["bolt"][:3], wheel_radius=radius,
                                  thickness=thick)
    faces += ring(0.13 * radius, 0.0, 1.4 * thick, COLOURS["steel"][:3], segments=10)   # the hub
    faces += spin_mark(0.16 * radius, 0.97 * radius, thick, tint)
    return _Group(faces), radius, thick


class Scene3D:
    """The device of a loaded 3D scenario, posed frame by frame from trace rows.

    Parameters
    ----------
    scenario : a loaded scenario that is not planar; device : its `Device3D`.
    width, height : the picture, pixels (the scene only; a panel goes below it elsewhere).
    camera : a key of PRESETS.
    supersample : draw this many times larger and shrink (smooth edges; cost grows with its square).
    """

    def __init__(self, scenario, device, *, width: int, height: int, camera: str = "oblique", supersample: int = 2):
        from PIL import Image

        self._Image = Image
        self.ss = supersample
        self.upright = np.asarray(device.upright(), dtype=float)
        self.com_m = np.asarray(device.com_m, dtype=float)
        # a body on the floor: `device.mount` is the mount its law designs for (sim.model.floor)
        self.mount = "floor" if getattr(device, "floor", None) is not None else device.mount
        body_faces, spheres = [], []
        reach0 = max(_part_reach(p) for p in scenario.body.parts)
        for p in scenario.body.parts:
            f, s = body_part_faces(p, _part_colour(p)[:3], point_size=0.035 * max(reach0, 0.05))
            body_faces += f
            spheres += s
        self.wheels = []
        for i, (w, unit) in enumerate(zip(scenario.wheel_list, device.wheels)):
            group, radius, thick = _wheel_group(w, tint=WHEEL_TINTS[i % len(WHEEL_TINTS)])
            basis = basis_from_x(unit.axis)
            at = np.asarray(unit.at_m, dtype=float)
            body_faces += _motor_can(at, basis, radius, thick, self.com_m)
            self.wheels.append((group, basis, at, radius))
        self.body = _Group(body_faces, spheres)
        reach = max([float(np.linalg.norm(self.body.verts, axis=1).max()) if len(self.body.verts) else 0.0]
                    + [float(np.linalg.norm(at)) + r for _, _, at, r in self.wheels] + [0.02])
        # what the camera frames, in reaches: (half x, half y, lowest z), and the floor's height
        (hx, hy, low), floor = FRAMING.get(self.mount, FRAMING["ball"])
        self.layout = Layout3D(reach, floor * reach, self.mount)
        self.stand = _Group(*_stand(self.layout, self.body.verts, self.wheels))
        corners = [(x * hx * reach, y * hy * reach, z * reach) for x in (-1, 1) for y in (-1, 1) for z in (low, 1.02)]
        self.camera = frame_camera(corners, preset=camera, width=width, height=height)
        self._cam = self.camera.scaled(self.ss)
        self._background = self._draw_background()          # drawing size (supersampled)
        self._background_small = self._background.reduce(self.ss) if self.ss != 1 else self._background

    # -- posing ---------------------------------------------------------------------------------
    def attitude(self, tilt_x: float, tilt_y: float = 0.0, heading: float = 0.0) -> np.ndarray:
        """R_wb of a trace row (`body_to_world` with this device's upright attitude)."""
        return body_to_world(tilt_x, tilt_y, heading, self.upright)

    def _posed(self, r_wb: np.ndarray, wheel_angles, origin=None) -> list[tuple[_Group, np.ndarray, np.ndarray]]:
        """(group, rotation to world, origin in world) of every piece; `origin`: the body frame's origin
        in the world, m (the pivot at 0 unless the body is free on the floor)."""
        o = np.zeros(3) if origin is None else np.asarray(origin, dtype=float)
        pieces = [(self.stand, np.eye(3), np.zeros(3)), (self.body, r_wb, o)]
        for (group, basis, at, _), angle in zip(self.wheels, wheel_angles):
            pieces.append((group, r_wb @ basis @ rot_x(angle), r_wb @ at + o))
        return pieces

    # -- drawing --------------------------------------------------------------------------------
    def draw_image(self, r_wb: np.ndarray, wheel_angles, *, mark_fade=(), origin=None):
        """The picture (a PIL RGB image, width x height) at body attitude `r_wb`, the body frame's origin
        at `origin` (world, m; None: at the pivot) and wheel angles (rad, relative to the body). `mark_fade` : per wheel 0..1, how far its spin mark is washed into the
        wheel (a fast wheel's mark would jump about between frames).

        Only the box around what moves (and the stand) is drawn, at `supersample` times the size,
        then shrunk into the cached background: the cost follows the pixels drawn.
        """
        from PIL import ImageDraw

        pieces = self._posed(r_wb, wheel_angles, origin)
        dist, polys, fills, outlines, pixels = [], [], [], [], []
        eye = np.asarray(self._cam.eye)
        for gi, (group, rot, origin) in enumerate(pieces):
            if len(group.faces):
                fade = mark_fade[gi - 2] if 2 <= gi < 2 + len(mark_fade) else 0.0
                self._shade(group, rot, origin, eye, fade, dist, polys, fills, outlines, pixels)
            for centre, radius, rgb in group.spheres:
                c = rot @ centre + origin
                (x, y), depth = (v[0] for v in self._cam.project(c[None, :]))
                r = self._cam.focal_px * radius / max(depth, 1e-9)
                dist.append(float(np.linalg.norm(c - eye)) - radius)
                polys.append(np.array([[x - r, y - r], [x + r, y + r]]))
                fills.append(rgb)
                outlines.append("sphere")
                pixels.append(polys[-1])
        hull = self._shadow_hull(pieces[1:])
        box = self._draw_box(pixels + ([hull] if hull is not None else []))
        img = self._background_small.copy()
        if box is None:
            return img
        x0, y0, x1, y1 = box
        crop = self._background.crop(box)
        draw = ImageDraw.Draw(crop, "RGBA")
        offset = np.array([x0, y0], dtype=float)
        if hull is not None:
            draw.polygon((hull - offset).ravel().tolist(), fill=(40, 44, 52, 46))
        for j in np.argsort(-np.asarray(dist), kind="stable").tolist():
            pts = polys[j] - offset
            if outlines[j] == "sphere":
                self._sphere(draw, pts, fills[j])
            else:
                draw.polygon(pts.ravel().tolist(), fill=fills[j], outline=outlines[j],
                             width=self.ss if outlines[j] else 0)
        img.paste(crop.reduce(self.ss) if self.ss != 1 else crop, (x0 // self.ss, y0 // self.ss))
        return img

    def _shade(self, group, rot, origin, eye, fade, dist, polys, fills, outlines, pixels) -> None:
        """Project one posed group; append its visible faces' depth, pixels, fill and outline."""
        px, _ = self._cam.project(group.verts @ rot.T + origin)
        pixels.append(px)
        normals = group.normals @ rot.T
        centres = group.centres @ rot.T + origin
        facing = np.einsum("ij,ij->i", normals, eye - centres)
        light = normals @ LIGHT_WORLD
        lit = AMBIENT + DIFFUSE * np.where(group.cull, np.maximum(light, 0.0), np.abs(light))
        rgb = group.rgb
        if fade:
            rgb = rgb.copy()
            rgb[group.marks] = (1 - fade) * rgb[group.marks] + fade * rgb[0]
        colour = np.minimum(rgb * lit[:, None], 255.0).astype(int).tolist()
        d = (np.linalg.norm(centres - eye, axis=1) - group.bias).tolist()
        starts = group.starts
        for j in np.flatnonzero(~group.cull | (facing > 0)).tolist():
            dist.append(d[j])
            polys.append(px[starts[j]:starts[j + 1]])
            fills.append((*colour[j], group.alpha[j]))
            outlines.append(group.outline[j])

    def _draw_box(self, pixel_sets) -> tuple | None:
        """(x0, y0, x1, y1) at drawing size, multiples of the supersampling, holding every pixel set."""
        pts = np.concatenate([p.reshape(-1, 2) for p in pixel_sets]) if pixel_sets else np.zeros((0, 2))
        if not len(pts):
            return None
        ss, w, h = self.ss, self._cam.width, self._cam.height
        x0 = max(0, (int(np.floor(pts[:, 0].min())) - 2 * ss) // ss * ss)
        y0 = max(0, (int(np.floor(pts[:, 1].min())) - 2 * ss) // ss * ss)
        x1 = min(w // ss * ss, -(-(int(np.ceil(pts[:, 0].max())) + 2 * ss) // ss) * ss)
        y1 = min(h // ss * ss, -(-(int(np.ceil(pts[:, 1].max())) + 2 * ss) // ss) * ss)
        return (x0, y0, x1, y1) if x1 - x0 >= ss and y1 - y0 >= ss else None

    def _sphere(self, draw, corners, rgb) -> None:
        """A ball (the socket) as a shaded disc with a highlight; `corners` its pixel box."""
        (xa, ya), (xb, yb) = corners
        x, y, r = (xa + xb) / 2, (ya + yb) / 2, (xb - xa) / 2
        draw.ellipse([xa, ya, xb, yb], fill=tuple(int(200 * v) for v in rgb) + (255,))
        h = 0.45 * r   # a highlight towards the light
        draw.ellipse([x - 0.35 * r - h, y - 0.4 * r - h, x - 0.35 * r + h, y - 0.4 * r + h],
                     fill=tuple(int(min(255, 255 * (0.3 + v))) for v in rgb) + (255,))

    def _shadow_hull(self, pieces) -> np.ndarray | None:
        """Pixels (drawing size) of a soft dark patch on the floor under the device: the convex hull
        of its points dropped straight down; None when it has no area in view."""
        pts = [g.verts[::3] @ rot.T + origin for g, rot, origin in pieces if len(g.verts)]
        if not pts:
            return None
        pts = np.concatenate(pts)
        pts[:, 2] = self.layout.floor_z_m
        px, depth = self._cam.project(pts)
        px = px[depth > 0]
        if len(px) < 3:
            return None
        from scipy.spatial import ConvexHull, QhullError
        try:
            return px[ConvexHull(px).vertices]
        except QhullError:   # the points lie on a line: no area to darken
            return None

    def _draw_background(self):
        """Sky and floor with a grid, at the drawing size (supersampled)."""
        from PIL import ImageDraw

        cam, Image = self._cam, self._Image
        rows = np.linspace(0.0, 1.0, cam.height)[:, None, None]
        sky = (SKY_TOP * (1 - rows) + SKY_BOTTOM * rows).astype(np.uint8)
        img = Image.fromarray(np.broadcast_to(sky, (cam.height, cam.width, 3)).copy())
        draw = ImageDraw.Draw(img, "RGBA")
        z, span = self.layout.floor_z_m, 6.0 * self.layout.reach_m
        floor = np.array([(-span, -span, z), (span, -span, z), (span, span, z), (-span, span, z)])
        poly = _clip_near(cam, floor)
        if len(poly) >= 3:
            draw.polygon(cam.project(poly)[0].ravel().tolist(), fill=tuple(int(255 * v) for v in COLOURS["floor"][:3]))
        step = _grid_step(self.layout.reach_m)
        n = int(span / step)
        for k in range(-n, n + 1):
            for a, b in (((k * step, -span, z), (k * step, span, z)), ((-span, k * step, z), (span, k * step, z))):
                seg = _clip_near(cam, np.array([a, b]), closed=False)
                if len(seg) == 2:
                    draw.line(cam.project(seg)[0].ravel().tolist(), fill=(150, 150, 142, 120), width=self.ss)
        return img

    def push_arrow(self, r_wb: np.ndarray, impulse_world, origin=None) -> tuple | None:
        """Pixel tail and head of an arrow towards the body's upper part, along the way an angular
        impulse (N m s, world frame) first moves it (omega x r, omega along the impulse for a
        roughly round body); None when the push turns the body about its own centre line."""
        tip = r_wb @ self.com_m
        n = float(np.linalg.norm(tip))
        if n == 0.0:
            return None
        tip = tip / n * 0.8 * self.layout.reach_m
        way = np.cross(np.asarray(impulse_world, dtype=float), tip)
        if np.linalg.norm(way) < 1e-12 * max(np.linalg.norm(impulse_world), 1e-300) * n:
            return None
        way = way / np.linalg.norm(way)
        head = tip - way * 0.12 * self.layout.reach_m + (0.0 if origin is None else np.asarray(origin, dtype=float))
        tail = head - way * 0.5 * self.layout.reach_m
        px, _ = self.camera.project([tail, head])
        return tuple(px[0]), tuple(px[1])


def _mix(a, b, share: float) -> tuple:
    return tuple((1 - share) * x + share * y for x, y in zip(a, b))


def _part_reach(part) -> float:
    at = part.at if isinstance(part.at, tuple) else (0.0, 0.0, part.at)
    return float(np.linalg.norm(at))


def _motor_can(at, basis, radius: float, thick: float, com) -> list:
    """The motor's dark can on the wheel's axis, on the side towards the body's centre of mass."""
    axis = basis[:, 0]
    side = -1.0 if float(np.dot(axis, np.asarray(com) - at)) < 0 else 1.0
    length = 0.32 * radius
    centre = at + side * axis * (thick / 2 + length / 2 + 0.02 * radius)
    return moved(ring(0.3 * radius, 0.0, length, COLOURS["motor"][:3], segments=14), basis, centre)


def _stand(layout: Layout3D, body_verts, wheels) -> tuple[list, list]:
    """(faces, spheres) of what holds the pivot, world frame: a hinge's post and axle along x, a
    ball's post and socket; a floor mount has none (the floor is the background)."""
    reach, floor = layout.reach_m, layout.floor_z_m
    steel, stand = COLOURS["steel"][:3], COLOURS["stand"][:3]
    if layout.mount == "floor":
        return [], []
    base = moved(box((0.3 * reach, 0.3 * reach, 0.015 * reach), stand), np.eye(3), (0, 0, floor + 0.015 * reach))
    if layout.mount == "hinge":
        xs = [body_verts[:, 0].min()] if len(body_verts) else [0.0]
        xs += [at[0] - r for _, _, at, r in wheels]
        x_post = min(xs) - 0.08 * reach
        post = moved(box((0.025 * reach, 0.05 * reach, (0.06 * reach - floor) / 2), stand), np.eye(3),
                      (x_post, 0, (0.06 * reach + floor) / 2))
        axle = moved(ring(0.018 * reach, 0.0, -x_post, steel, segments=10), np.eye(3), (x_post / 2, 0, 0))
        base = moved(base, np.eye(3), (x_post, 0, 0))
        return base + post + axle, []
    socket = 0.045 * reach
    turn = np.array([[0.0, 0.0, -1.0], [0.0, 1.0, 0.0], [1.0, 0.0, 0.0]])   # x -> z: the post stands up
    post = moved(ring(0.02 * reach, 0.0, -socket - floor, stand, segments=12), turn, (0, 0, (floor - socket) / 2))
    return base + post, [(np.zeros(3), socket, steel)]


def _clip_near(cam: Camera3D, pts: np.ndarray, *, closed: bool = True, near: float = 1e-3) -> np.ndarray:
    """The polygon (or segment) `pts` cut to the part in front of the camera (depth > near)."""
    depth = (pts - np.asarray(cam.eye)) @ cam.rotation[2]
    out = []
    n = len(pts)
    for i in range(n if closed else n - 1):
        a, b, da, db = pts[i], pts[(i + 1) % n], depth[i], depth[(i + 1) % n]
        if da > near:
            out.append(a)
        if (da > near) != (db > near):
            out.append(a + (b - a) * (near - da) / (db - da))
    if not closed and depth[-1] > near:
        out.append(pts[-1])
    return np.array(out)


def _grid_step(reach: float) -> float:
    """A round grid spacing, m: 1, 2 or 5 times a power of ten near half the reach."""
    raw = 0.5 * reach
    power = 10 ** math.floor(math.log10(raw))
    return next(m * power for m in (1, 2, 5, 10) if m * power >= raw)


__all__ = ["Camera3D", "Face", "Scene3D", "body_to_world", "frame_camera", "PRESETS", "WHEEL_TINTS"]
