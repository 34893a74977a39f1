"""Pictures of a finished trial: a visual-only scene built from the scenario's own parts.

Frames are drawn after the trial from its recorded trace (body angle, wheel angle), never by
simulating again. Two pybullet clients in DIRECT mode (CPU only, no display) hold the scene:

- a static one (floor, stand, pivot axle), drawn once per camera into a cached background
  colour and depth image;
- a moving one (the body's parts, the motor, the wheel's parts and its marks), posed for each
  frame from the trace and drawn with pybullet's tiny software renderer, then laid over the
  background by depth.

Drawing the static scene once matters: the tiny renderer's cost grows with the pixels it fills,
and a floor fills a third of the frame (measured: ~80 ms against ~20 ms per 960x540 frame).

Geometry and signs follow `sim.physics.engine`: the pivot is the world x axis through the origin, the
body axis points along +z at angle 0, and a positive angle turns the body about +x (right-hand
rule), so its tip moves towards -y. The wheel's angle is relative to the body. Distances in m.
For the picture only, the motor and wheel sit beside the body along the pivot axis (+x, towards
the default camera); that offset does not change the dynamics, which are planar about x.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..model.massprops import wheel_part_outer_radius
from ..physics.engine import import_pybullet

CAMERAS = ("axis", "oblique")
"""Camera presets: `axis` looks along the pivot axis at the swing plane; `oblique` from above and aside."""

# Our own palette (linear 0..1 RGBA). Printed plastics are warm, metals cool, the motor dark.
COLOURS = {
    "printed": (0.93, 0.47, 0.30, 1.0),
    "aluminium": (0.74, 0.77, 0.80, 1.0),
    "steel": (0.52, 0.55, 0.58, 1.0),
    "brass": (0.83, 0.66, 0.30, 1.0),
    "other": (0.44, 0.52, 0.62, 1.0),
    "motor": (0.17, 0.19, 0.22, 1.0),
    "mark": (0.98, 0.93, 0.62, 1.0),
    "bolt": (0.30, 0.32, 0.35, 1.0),
    "stand": (0.33, 0.36, 0.40, 1.0),
    "floor": (0.86, 0.85, 0.81, 1.0),
}
SKY_TOP, SKY_BOTTOM = np.array([206, 216, 224]), np.array([238, 240, 240])
FOV_DEG = 30.0
SCENE_FRACTION = 0.76   # the top share of the frame kept for the scene; the overlay's panel takes the rest


def _qx(angle: float) -> tuple[float, float, float, float]:
    """Quaternion (x, y, z, w) of a rotation by `angle` rad about +x."""
    return (math.sin(angle / 2), 0.0, 0.0, math.cos(angle / 2))


def _qmul(a, b) -> tuple[float, float, float, float]:
    ax, ay, az, aw = a
    bx, by, bz, bw = b
    return (aw * bx + ax * bw + ay * bz - az * by, aw * by - ax * bz + ay * bw + az * bx,
            aw * bz + ax * by - ay * bx + az * bw, aw * bw - ax * bx - ay * by - az * bz)


# a turn about +y by 90 deg takes a primitive's local z (pybullet's cylinder axis) onto x
Q_Z_TO_X = (0.0, math.sin(math.pi / 4), 0.0, math.cos(math.pi / 4))
Q_NONE = (0.0, 0.0, 0.0, 1.0)


@dataclass(frozen=True)
class Piece:
    """One visual primitive riding on the body or the wheel.

    `x` is its offset along the pivot axis, `r` its distance from the link's origin along the
    link's local z (the body axis, or a wheel radius), `psi` an extra turn about x (copies of a
    wheel part), `q` its own orientation. `geom` is ("box", half extents), ("cyl", radius, length),
    ("ring", outer, inner, thickness) or ("sphere", radius).
    """

    link: str
    geom: tuple
    colour: tuple
    x: float = 0.0
    r: float = 0.0
    psi: float = 0.0
    q: tuple = Q_NONE


def _part_colour(part) -> tuple:
    mat = part.material_props
    if mat is None:
        return COLOURS["other"]
    if mat.printed:
        return COLOURS["printed"]
    name = (mat.name or "").lower()
    return next((COLOURS[k] for k in ("aluminium", "steel", "brass") if k in name), COLOURS["other"])


def _part_geom(part, scale: float) -> tuple[tuple, tuple]:
    """(geometry, own orientation) of a part; sizes a part leaves open get a size for the picture."""
    s = part.shape
    if s in ("box", "hollow_box"):  # a closed shell looks like a solid box from outside
        return ("box", (part.thickness / 2, part.width / 2, part.length / 2)), Q_NONE
    if s == "rod":
        return ("cyl", part.radius or 0.02 * part.length, part.length), Q_NONE
    if s == "disk":
        return ("cyl", part.radius, part.thickness or 0.15 * part.radius), Q_Z_TO_X
    if s == "ring":
        return ("ring", part.outer_radius, part.inner_radius, part.thickness or 0.15 * part.outer_radius), Q_NONE
    return ("sphere", scale), Q_NONE


def _x_half(geom, q=Q_NONE) -> float:
    """Half the extent of a piece along the pivot axis (x)."""
    kind = geom[0]
    if kind == "box":
        return geom[1][0]
    if kind == "cyl":  # rods stand along z (x extent = radius); disks are turned to lie along x
        return geom[2] / 2 if q == Q_Z_TO_X else geom[1]
    if kind == "ring":
        return geom[3] / 2
    return geom[1]


@dataclass(frozen=True)
class Layout:
    """The scene's pieces and sizes, derived from a scenario. Distances in m."""

    pieces: tuple
    reach_m: float          # furthest point of the device from the pivot
    wheel_at_m: float
    wheel_x_m: float        # the wheel plane's offset along the pivot axis
    wheel_radius_m: float
    floor_z_m: float

    @classmethod
    def from_scenario(cls, sc) -> "Layout":
        wheel_r = max([wheel_part_outer_radius(p) for p in sc.wheel.parts] + [0.01])
        body_reach = max(_body_extent(p) for p in sc.body.parts)
        reach = max(body_reach, sc.wheel.at + wheel_r)
        pieces = []
        for p in sc.body.parts:
            geom, q = _part_geom(p, 0.035 * reach)
            pieces.append(Piece("body", geom, _part_colour(p), r=p.at, q=q))
        body_half_x = max(_x_half(pc.geom, pc.q) for pc in pieces)
        wheel_pieces, wheel_t = _wheel_pieces(sc.wheel.parts, wheel_r)
        motor_r, motor_len = 0.3 * wheel_r, 0.32 * wheel_r
        wheel_x = body_half_x + motor_len + wheel_t / 2 + 0.02 * wheel_r
        pieces.append(Piece("body", ("cyl", motor_r, motor_len), COLOURS["motor"], x=body_half_x + motor_len / 2,
                            r=sc.wheel.at, q=Q_Z_TO_X))
        pieces += [Piece("wheel", pc.geom, pc.colour, x=wheel_x + pc.x, r=pc.r, psi=pc.psi, q=pc.q)
                   for pc in wheel_pieces]
        return cls(tuple(pieces), reach, sc.wheel.at, wheel_x, wheel_r, -1.25 * reach)


def _body_extent(part) -> float:
    """Furthest point of a body part from the pivot, m (a box's corner, a disk's rim)."""
    along = abs(part.at)
    if part.shape in ("box", "hollow_box"):
        return math.hypot(along + part.length / 2, part.width / 2)
    if part.shape == "rod":
        return math.hypot(along + part.length / 2, part.radius or 0.0)
    if part.shape in ("disk", "ring"):
        return along + (part.radius if part.shape == "disk" else part.outer_radius)
    return along


def _wheel_pieces(parts, wheel_r: float) -> tuple[list, float]:
    """The wheel's parts plus our marks: three light spokes and a hub, so that its spin shows."""
    solid = [_part_geom(p, 0.0) for p in parts if p.shape != "point"]
    thick = max([2 * _x_half(g, q) for g, q in solid] + [0.0]) or 0.08 * wheel_r
    pieces = []
    for p in parts:
        if p.shape == "point":  # a bolt through the rim: a short dark cylinder showing on both faces
            geom, q, colour = ("cyl", 0.045 * wheel_r, 1.3 * thick), Q_Z_TO_X, COLOURS["bolt"]
        else:
            (geom, q), colour = _part_geom(p, 0.0), _part_colour(p)
        pieces += [Piece("wheel", geom, colour, r=p.at, psi=2 * math.pi * j / p.count, q=q) for j in range(p.count)]
    spoke_len = 0.8 * wheel_r
    for j in range(3):  # marks standing just proud of both faces
        pieces.append(Piece("wheel", ("box", (0.6 * thick, 0.05 * wheel_r, spoke_len / 2)), COLOURS["mark"],
                            r=0.1 * wheel_r + spoke_len / 2, psi=2 * math.pi * j / 3))
    pieces.append(Piece("wheel", ("cyl", 0.13 * wheel_r, 1.4 * thick), COLOURS["steel"], q=Q_Z_TO_X))
    return pieces, thick


def _bounding_radius(geom) -> float:
    """Radius of a sphere about a piece's centre that holds it, m."""
    kind = geom[0]
    if kind == "box":
        return float(np.linalg.norm(geom[1]))
    if kind == "cyl":
        return math.hypot(geom[1], geom[2] / 2)
    if kind == "ring":
        return math.hypot(geom[1], geom[3] / 2)
    return geom[1]


def ring_mesh(outer: float, inner: float, thickness: float, segments: int = 48):
    """Vertices, triangle indices and normals of an annular prism with its axis along x, m."""
    a = np.linspace(0.0, 2 * math.pi, segments, endpoint=False)
    c, s = np.cos(a), np.sin(a)
    h = thickness / 2
    verts, norms, idx = [], [], []

    def add_band(r_lo, r_hi, x_lo, x_hi, normal_fn, flip):
        base = len(verts)
        for k in range(segments):
            verts.append((x_lo, r_lo * c[k], r_lo * s[k]))
            verts.append((x_hi, r_hi * c[k], r_hi * s[k]))
            norms.extend([normal_fn(k)] * 2)
        for k in range(segments):
            i0, i1 = base + 2 * k, base + 2 * ((k + 1) % segments)
            tri = [(i0, i1, i0 + 1), (i1, i1 + 1, i0 + 1)]
            for t in tri:
                idx.extend(t[::-1] if flip else t)

    add_band(outer, outer, -h, h, lambda k: (0.0, c[k], s[k]), False)        # outer wall
    if inner > 0:
        add_band(inner, inner, -h, h, lambda k: (0.0, -c[k], -s[k]), True)   # inner wall
    add_band(inner, outer, h, h, lambda k: (1.0, 0.0, 0.0), True)           # +x face
    add_band(inner, outer, -h, -h, lambda k: (-1.0, 0.0, 0.0), False)       # -x face
    return [list(v) for v in verts], idx, [list(n) for n in norms]


def _visual_shape(pb, cid, geom, colour) -> int:
    kind = geom[0]
    if kind == "box":
        return pb.createVisualShape(pb.GEOM_BOX, halfExtents=list(geom[1]), rgbaColor=colour, physicsClientId=cid)
    if kind == "cyl":
        # our own mesh: pybullet's cylinder in the tiny renderer has cone-like caps that bulge over
        # whatever sits on its faces. Axis along local z, as pybullet's cylinders have it: the
        # x-axis mesh's coordinates are turned cyclically (x, y, z) -> (y, z, x).
        v, i, n = ring_mesh(geom[1], 0.0, geom[2], segments=32)
        return pb.createVisualShape(pb.GEOM_MESH, vertices=[[a[1], a[2], a[0]] for a in v], indices=i,
                                    normals=[[a[1], a[2], a[0]] for a in n], rgbaColor=colour, physicsClientId=cid)
    if kind == "ring":
        v, i, n = ring_mesh(*geom[1:])
        return pb.createVisualShape(pb.GEOM_MESH, vertices=v, indices=i, normals=n, rgbaColor=colour,
                                    physicsClientId=cid)
    return pb.createVisualShape(pb.GEOM_SPHERE, radius=geom[1], rgbaColor=colour, physicsClientId=cid)


@dataclass(frozen=True)
class Camera:
    """A pinhole camera: pybullet's column-major view and projection matrices and a pixel size."""

    width: int
    height: int
    view: tuple
    proj: tuple
    frustum: tuple          # (left, right, bottom, top) at the near plane, m
    near_m: float
    far_m: float

    @classmethod
    def framing(cls, layout: Layout, *, preset: str = "axis", width: int, height: int,
                scene_share: float = SCENE_FRACTION) -> "Camera":
        """Frame the whole swing circle, the stand and the floor in the top `scene_share` of the frame.

        The body may swing a full turn (swing-up), so the frame is sized from the device's reach,
        not from where this trial happened to go.
        """
        if preset not in CAMERAS:
            raise ValueError(f"unknown camera {preset!r}; known: {', '.join(CAMERAS)}")
        pb = import_pybullet()
        reach = layout.reach_m
        top, bottom = 1.1 * reach, layout.floor_z_m - 0.05 * reach
        half_h = (top - bottom) / scene_share / 2
        half_h = max(half_h, 1.25 * reach * height / width)   # narrow frames (side by side) fit the width
        target = np.array([layout.wheel_x_m / 2, 0.0, top - half_h])
        dist = half_h / math.tan(math.radians(FOV_DEG) / 2)
        if preset == "axis":
            direction = np.array([1.0, 0.0, 0.0])
        else:  # from the wheel's side, turned and raised so the stand and the wheel's depth show
            az, el = math.radians(38.0), math.radians(16.0)
            direction = np.array([math.cos(el) * math.cos(az), -math.cos(el) * math.sin(az), math.sin(el)])
            dist *= 1.08
        eye = target + dist * direction
        near, far = 0.2 * dist, 3.0 * dist
        view = pb.computeViewMatrix(eye.tolist(), target.tolist(), [0, 0, 1])
        t = near * math.tan(math.radians(FOV_DEG) / 2)
        r = t * width / height
        return cls._make(width, height, view, (-r, r, -t, t), near, far)

    @classmethod
    def _make(cls, width, height, view, frustum, near, far) -> "Camera":
        proj = import_pybullet().computeProjectionMatrix(*frustum, near, far)
        return cls(width, height, tuple(view), tuple(proj), tuple(frustum), near, far)

    def crop(self, x0: int, y0: int, x1: int, y1: int, *, scale: float = 1.0) -> "Camera":
        """The same view cut to the pixel box [x0, x1) x [y0, y1) (an off-centre frustum), drawn at
        `scale` times its pixel size. Pixels stay square; the crop lines up with the full frame."""
        left, right, bottom, top = self.frustum
        sx, sy = (right - left) / self.width, (top - bottom) / self.height
        frustum = (left + sx * x0, left + sx * x1, top - sy * y1, top - sy * y0)
        w, h = max(1, int(round((x1 - x0) * scale))), max(1, int(round((y1 - y0) * scale)))
        return Camera._make(w, h, self.view, frustum, self.near_m, self.far_m)

    def project(self, points) -> np.ndarray:
        """Pixel coordinates (column, row; row 0 at the top) of world points (N, 3), m."""
        p = np.atleast_2d(np.asarray(points, dtype=float))
        homo = np.hstack([p, np.ones((len(p), 1))])
        view = np.array(self.view).reshape(4, 4).T     # pybullet matrices are column-major
        proj = np.array(self.proj).reshape(4, 4).T
        clip = homo @ (proj @ view).T
        ndc = clip[:, :3] / clip[:, 3:4]
        return np.column_stack([(ndc[:, 0] + 1) / 2 * self.width, (1 - ndc[:, 1]) / 2 * self.height])


LIGHT = dict(lightDirection=[2.0, -1.2, 3.0], lightColor=[1.0, 0.98, 0.94], lightDistance=10.0,
             lightAmbientCoeff=0.5, lightDiffuseCoeff=0.55, lightSpecularCoeff=0.12)


def _static_pieces(layout: Layout) -> list[tuple]:
    """(geometry, colour, position, orientation) of the floor, stand and pivot axle."""
    reach = layout.reach_m
    post_t, post_w = 0.05 * reach, 0.09 * reach
    post_x = -(0.06 * reach + post_t / 2)
    floor = layout.floor_z_m
    post_top = 0.08 * reach
    return [
        (("box", (25 * reach, 25 * reach, 0.02 * reach)), COLOURS["floor"], (0, 0, floor - 0.02 * reach), Q_NONE),
        (("box", (0.35 * reach, 0.45 * reach, 0.025 * reach)), COLOURS["stand"],
         (post_x + 0.2 * reach, 0, floor + 0.025 * reach), Q_NONE),
        (("box", (post_t / 2, post_w / 2, (post_top - floor) / 2)), COLOURS["stand"],
         (post_x, 0, (post_top + floor) / 2), Q_NONE),
        (("cyl", 0.018 * reach, -post_x), COLOURS["steel"], (post_x / 2, 0, 0), Q_Z_TO_X),
    ]


class Scene:
    """The device's picture, posed frame by frame from recorded angles.

    Parameters
    ----------
    scenario : a loaded scenario (its parts give the shapes, sizes and colours).
    width, height : frame size, pixels.
    camera : one of CAMERAS.
    render_scale : the moving parts are drawn at this share of the frame's resolution and scaled
        up (the renderer's cost grows with the pixels it covers; see benchmarks/render_speed.py).
    scene_rows : draw only the top rows of the frame (the rest is left for an opaque panel);
        None draws the whole frame.

    Both camera presets look from the +x side, where the moving parts always stand in front of
    the stand (at -x) and above the floor, so a frame is the cached background with the moving
    parts pasted over it, without a depth test.
    """

    def __init__(self, scenario, *, width: int, height: int, camera: str = "axis", render_scale: float = 1.0,
                 scene_rows: int | None = None):
        from PIL import Image

        self.pb = import_pybullet()
        self._Image = Image
        self.layout = Layout.from_scenario(scenario)
        self.rows = height if scene_rows is None else max(1, min(height, int(scene_rows)))
        self.camera = Camera.framing(self.layout, preset=camera, width=width, height=height,
                                     scene_share=SCENE_FRACTION if scene_rows is None else self.rows / height)
        self.scale = render_scale
        self._background = self._draw_static()
        self._bg_array = np.asarray(self._background)
        pb = self.pb
        self._cid = pb.connect(pb.DIRECT)
        self._ids = [pb.createMultiBody(0, -1, _visual_shape(pb, self._cid, pc.geom, pc.colour),
                                        physicsClientId=self._cid) for pc in self.layout.pieces]
        self._radii = np.array([_bounding_radius(pc.geom) for pc in self.layout.pieces])
        self._centres = np.zeros((len(self._ids), 3))
        self._marks = [i for i, pc in enumerate(self.layout.pieces) if pc.colour == COLOURS["mark"]]
        faces = [pc.colour for pc in self.layout.pieces if pc.link == "wheel" and pc.geom[0] in ("ring", "cyl")]
        self._wheel_colour = np.array(faces[0] if faces else COLOURS["other"])
        self._blur_level = 0

    def _draw_static(self):
        """The static scene at full size, with shadows, on a sky; rows below `rows` left dark."""
        pb, Image = self.pb, self._Image
        full = self.camera.crop(0, 0, self.camera.width, self.rows)
        cid = pb.connect(pb.DIRECT)
        try:
            for geom, colour, pos, q in _static_pieces(self.layout):
                pb.createMultiBody(0, -1, _visual_shape(pb, cid, geom, colour), list(pos), list(q), physicsClientId=cid)
            rgb, _, seg = self._snap(cid, full, shadow=True)
        finally:
            pb.disconnect(physicsClientId=cid)
        rows = np.arange(len(rgb))[:, None, None] / max(len(rgb) - 1, 1) * self.rows / self.camera.height
        sky = (SKY_TOP * (1 - rows) + SKY_BOTTOM * rows).astype(np.uint8)
        frame = Image.new("RGB", (self.camera.width, self.camera.height), (16, 24, 34))
        frame.paste(Image.fromarray(np.where((seg < 0)[..., None], sky, rgb)), (0, 0))
        return frame

    def _snap(self, cid, cam: Camera, *, shadow: bool):
        _, _, rgba, depth, seg = self.pb.getCameraImage(
            cam.width, cam.height, cam.view, cam.proj, renderer=self.pb.ER_TINY_RENDERER,
            shadow=int(shadow), physicsClientId=cid, **LIGHT)
        shape = (cam.height, cam.width)
        return (np.asarray(rgba, dtype=np.uint8).reshape(shape + (4,))[..., :3],
                np.asarray(depth, dtype=np.float32).reshape(shape), np.asarray(seg).reshape(shape))

    def _moving_box(self) -> tuple[int, int, int, int] | None:
        """Pixel box (x0, y0, x1, y1) holding every moving piece as posed, or None when off-frame."""
        r = self._radii[:, None]
        lo, hi = (self._centres - r).min(axis=0), (self._centres + r).max(axis=0)
        corners = np.array([[x, y, z] for x in (lo[0], hi[0]) for y in (lo[1], hi[1]) for z in (lo[2], hi[2])])
        px = self.camera.project(corners)
        x0, x1 = max(0, int(px[:, 0].min()) - 2), min(self.camera.width, int(np.ceil(px[:, 0].max())) + 2)
        y0, y1 = max(0, int(px[:, 1].min()) - 2), min(self.rows, int(np.ceil(px[:, 1].max())) + 2)
        return (x0, y0, x1, y1) if x1 - x0 >= 2 and y1 - y0 >= 2 else None

    def wheel_centre(self, angle_rad: float) -> np.ndarray:
        """World position of the wheel's centre at body angle `angle_rad`, m."""
        at = self.layout.wheel_at_m
        return np.array([self.layout.wheel_x_m, -at * math.sin(angle_rad), at * math.cos(angle_rad)])

    def pose(self, angle_rad: float, wheel_angle_rad: float) -> None:
        """Place every moving piece for a body angle and a wheel angle (relative to the body), rad."""
        pb, cid = self.pb, self._cid
        hub = self.wheel_centre(angle_rad)
        for i, (body_id, pc) in enumerate(zip(self._ids, self.layout.pieces)):
            if pc.link == "body":
                a, origin = angle_rad + pc.psi, (0.0, 0.0, 0.0)
            else:
                a, origin = angle_rad + wheel_angle_rad + pc.psi, (0.0, hub[1], hub[2])
            pos = (origin[0] + pc.x, origin[1] - pc.r * math.sin(a), origin[2] + pc.r * math.cos(a))
            pb.resetBasePositionAndOrientation(body_id, pos, _qmul(_qx(a), pc.q), physicsClientId=cid)
            self._centres[i] = pos

    def _blur_marks(self, wheel_step_rad: float) -> None:
        """Wash the spokes into the wheel's colour when it turns far between frames, as a camera's
        exposure would; sharp spokes would otherwise jump about (stroboscopic aliasing)."""
        # spokes repeat every 120 deg: past ~35 deg a frame their motion reads wrongly
        level = int(round(10 * min(1.0, max(0.0, (abs(wheel_step_rad) - 0.6) / 1.2))))
        if level == self._blur_level:
            return
        self._blur_level = level
        mix = 0.85 * level / 10
        colour = ((1 - mix) * np.array(COLOURS["mark"]) + mix * self._wheel_colour).tolist()
        for i in self._marks:
            self.pb.changeVisualShape(self._ids[i], -1, rgbaColor=colour, physicsClientId=self._cid)

    def draw_image(self, angle_rad: float, wheel_angle_rad: float, *, wheel_step_rad: float = 0.0):
        """One frame as a PIL RGB image of the frame's size; rows below `scene_rows` are left dark.

        `wheel_step_rad` : how far the wheel turns between frames (speed / frame rate), rad; large
        steps blur its marks. Only the box around the moving pieces is rendered (the renderer's
        cost follows its pixel count), scaled up when `render_scale` < 1 and laid over the
        background with a soft mask.
        """
        Image = self._Image
        self._blur_marks(wheel_step_rad)
        self.pose(angle_rad, wheel_angle_rad)
        frame = self._background.copy()
        box = self._moving_box()
        if box is None:
            return frame
        x0, y0, x1, y1 = box
        cam = self.camera.crop(x0, y0, x1, y1, scale=self.scale)
        rgb, _, seg = self._snap(self._cid, cam, shadow=False)
        drawn = seg >= 0
        size = (x1 - x0, y1 - y0)
        bg = self._bg_array[y0:y1, x0:x1]
        if (cam.width, cam.height) != size:
            # fill the crop's empty pixels with the background first, so scaling leaves no fringe
            bg = np.asarray(Image.fromarray(bg).resize((cam.width, cam.height), Image.BILINEAR))
        crop = Image.fromarray(np.where(drawn[..., None], rgb, bg))
        mask = Image.fromarray(drawn.view(np.uint8) * 255)
        if crop.size != size:
            crop, mask = crop.resize(size, Image.BILINEAR), mask.resize(size, Image.BILINEAR)
        frame.paste(crop, (x0, y0), mask)
        return frame

    def draw(self, angle_rad: float, wheel_angle_rad: float, *, wheel_step_rad: float = 0.0) -> np.ndarray:
        """One frame, (height, width, 3) uint8 RGB: the moving pieces laid over the cached background."""
        return np.asarray(self.draw_image(angle_rad, wheel_angle_rad, wheel_step_rad=wheel_step_rad))

    def close(self) -> None:
        try:
            self.pb.disconnect(physicsClientId=self._cid)
        except Exception:  # already gone: nothing to free
            pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
