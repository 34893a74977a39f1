"""A body on the floor in pybullet (DIRECT mode, CPU): a floating body, its wheels, a static plane at z = 0.

The body is the multibody's base, free in all six degrees of freedom (no fixed base, no joint at the
contact); links 0..n-1 are the wheels, each on a revolute joint about its own axis at its centre.
The base's frame is the body's centre of mass on its principal axes (pybullet takes a diagonal inertia;
with the inertial frame at the base frame no offset convention of pybullet's is involved). The body's
collision shapes come from its parts (`sim.model.floor.collision_shapes`); wheels have none.

Contact, as pybullet 3.2.7 does it (checked in `tests/test_floor.py`):
- friction: Coulomb with a friction cone; the coefficient of a contact is the PRODUCT of the two
  bodies' `lateralFriction` (capped at 10), so the plane gets 1 and the body `floor.friction`;
- restitution: likewise the product of the two bodies' `restitution`, so the plane gets 1 and the body
  `floor.restitution`. With pybullet's default contact processing threshold (speculative contacts a
  couple of centimetres ahead) a drop bounced anywhere from 2% to 70% of e^2 h; with the threshold 0
  on both bodies (set here) it bounces 1.1-1.3 e^2 h (the penetration recovery adds a little energy);
- contact stiffness: pybullet's rigid contact with its default error reduction; spinning and rolling
  friction 0. Link damping and the joint-speed clamp are off, as on the other engines.

Units and frames of the calls (as `sim.physics.engine3d.Engine3D`):
- `read()` -> (tilt_x, tilt_y, heading, tilt_rad, body rate (wx, wy, wz) rad/s in the heading frame,
  wheel angles rad, wheel speeds rad/s relative to the body): the attitude relative to upright about the
  balancing contact (`sim.core.frames`); for an edge device tilt_x turns about the edge.
- `contact()` -> (x, y, z of the balancing contact (the body frame's origin) in the world, m; 1.0 while
  the body touches the floor else 0.0; |F_t| / F_n of the body's floor contacts over the last step).
- `advance(push_world, wheel_torques)`: each wheel's net torque about its axis, N m (the reaction acts on
  the body), and a push, N m in the world frame about the balancing contact, or None: applied as a force
  at the body's centre of mass (a tap at its height) with that moment about the contact, the part of the
  moment along the contact-to-centre line as a torque. A tap of one physics step asks the floor for a
  large horizontal impulse: on a low friction the edge slides, as a tapped cube on a table does.
"""

from __future__ import annotations

import math

import numpy as np

from ..core.frames import matmul, matrix_to_quat, quat_to_matrix, transpose
from ..model.device3d import Device3D
from ..model.floor import lowest_z
from ..model.massprops3d import wheel_tensor
from .engine import MAX_JOINT_SPEED, import_pybullet
from .engine3d import OneClient, principal
from .joint_attitude import relative_attitude

BASE = -1


class FloorEngine(OneClient):
    """One pybullet client holding one body on the floor. Not thread-safe; one per trial."""

    ball = False   # no joint at the contact (the runner asks engines this)

    def __init__(self, device: Device3D, *, step_s: float):
        if device.floor is None:
            raise ValueError("FloorEngine needs a device on a floor mount")
        pb = import_pybullet()
        self.pb, self.device, self.step_s = pb, device, step_s
        self.client = self.connect()
        self.wheel_joints = tuple(range(device.n_wheels))
        self.body_id, self.plane_id = self._build()
        self.set_dry_friction([w.coulomb_n_m for w in device.wheels])

    def _build(self) -> tuple[int, int]:
        pb, dev, cid, floor = self.pb, self.device, self.client, self.device.floor
        pb.resetSimulation(physicsClientId=cid)
        pb.setGravity(0, 0, -dev.gravity_m_s2, physicsClientId=cid)
        pb.setTimeStep(self.step_s, physicsClientId=cid)
        pb.setPhysicsEngineParameter(numSubSteps=0, physicsClientId=cid)
        diag, q_p = principal(np.array(dev.body_inertia_com_kg_m2))
        self.principal_axes = p = np.array(quat_to_matrix(q_p))     # columns: principal axes in the body frame
        self.q_principal = q_p
        com = np.array(dev.body_com_m)
        self.com_in_base = tuple(float(v) for v in p.T @ com)       # the body frame's origin is at -this in F
        types, halves, radii, lengths, positions, orientations = [], [], [], [], [], []
        for s in floor.shapes:
            rot = p.T @ np.array(s.rotation)
            positions.append(list(p.T @ (np.array(s.centre_m) - com)))
            orientations.append(list(matrix_to_quat(tuple(tuple(r) for r in rot))))
            if s.kind == "box":
                types.append(pb.GEOM_BOX)
                halves.append(list(s.sizes))
                radii.append(0.0)
                lengths.append(0.0)
            else:
                types.append(pb.GEOM_CYLINDER)
                halves.append([0.0, 0.0, 0.0])
                radii.append(s.sizes[0])
                lengths.append(2.0 * s.sizes[1])
        shape = pb.createCollisionShapeArray(types, radii=radii, halfExtents=halves, lengths=lengths,
                                             collisionFramePositions=positions,
                                             collisionFrameOrientations=orientations, physicsClientId=cid)
        wheel_quats, wheel_diags = [], []
        for w in dev.wheels:
            axis_f = p.T @ np.array(w.axis)
            d, q = principal(wheel_tensor(w.spin_inertia_kg_m2, w.transverse_inertia_kg_m2, axis_f))
            wheel_diags.append(d)
            wheel_quats.append(q)
        n = dev.n_wheels
        body = pb.createMultiBody(
            baseMass=dev.body_mass_kg, baseCollisionShapeIndex=shape, baseVisualShapeIndex=-1,
            basePosition=[0, 0, 1], baseOrientation=[0, 0, 0, 1],
            baseInertialFramePosition=[0, 0, 0], baseInertialFrameOrientation=[0, 0, 0, 1],
            linkMasses=[w.mass_kg for w in dev.wheels], linkCollisionShapeIndices=[-1] * n,
            linkVisualShapeIndices=[-1] * n,
            linkPositions=[list(p.T @ (np.array(w.at_m) - com)) for w in dev.wheels],
            linkOrientations=[[0, 0, 0, 1]] * n, linkInertialFramePositions=[[0, 0, 0]] * n,
            linkInertialFrameOrientations=wheel_quats, linkParentIndices=[0] * n,
            linkJointTypes=[pb.JOINT_REVOLUTE] * n,
            linkJointAxis=[list(p.T @ np.array(w.axis)) for w in dev.wheels], physicsClientId=cid)
        for link, d in [(BASE, diag)] + list(enumerate(wheel_diags)):
            # inertia in its own call: passing mass in the same call drops it (pybullet 3.2.7)
            pb.changeDynamics(body, link, localInertiaDiagonal=list(d), physicsClientId=cid)
            pb.changeDynamics(body, link, linearDamping=0.0, angularDamping=0.0, jointDamping=0.0,
                              maxJointVelocity=MAX_JOINT_SPEED, physicsClientId=cid)
        plane = pb.createMultiBody(0, pb.createCollisionShape(pb.GEOM_PLANE, physicsClientId=cid),
                                   physicsClientId=cid)
        # pybullet multiplies the two bodies' coefficients: the plane's 1 leaves the floor's own
        for bid, mu, e in ((plane, 1.0, 1.0), (body, floor.friction, floor.restitution)):
            pb.changeDynamics(bid, BASE, lateralFriction=mu, restitution=e, spinningFriction=0.0,
                              rollingFriction=0.0, contactProcessingThreshold=0.0, physicsClientId=cid)
        return body, plane

    def set_dry_friction(self, wheel_n_m) -> None:
        """Coulomb friction (or a brake) on each wheel's bearing, N m."""
        pb = self.pb
        pb.setJointMotorControlArray(self.body_id, list(self.wheel_joints), pb.VELOCITY_CONTROL,
                                     targetVelocities=[0.0] * len(self.wheel_joints), forces=list(wheel_n_m),
                                     physicsClientId=self.client)

    def reset(self, *, attitude, rate_world=(0.0, 0.0, 0.0), height_m: float = 0.0, wheel_speeds_rad_s=None,
              **_unused) -> None:
        """Place the body at `attitude` (R_wb, rows) with its lowest point `height_m` above the floor,
        turning at `rate_world` (rad/s) about its balancing contact (the contact at rest), wheels at
        their speeds relative to the body (angles 0)."""
        pb, cid, body = self.pb, self.client, self.body_id
        r_wb = np.array(attitude)
        origin = np.array([0.0, 0.0, height_m - lowest_z(self.device.floor.shapes, attitude)])
        lever = r_wb @ np.array(self.device.body_com_m)
        r_wf = r_wb @ self.principal_axes
        w = np.array(rate_world, dtype=float)
        pb.resetBasePositionAndOrientation(body, list(origin + lever), list(matrix_to_quat(_rows(r_wf))),
                                           physicsClientId=cid)
        pb.resetBaseVelocity(body, list(np.cross(w, lever)), list(w), physicsClientId=cid)
        speeds = wheel_speeds_rad_s or [0.0] * len(self.wheel_joints)
        for j, s in zip(self.wheel_joints, speeds):
            pb.resetJointState(body, j, 0.0, float(s), physicsClientId=cid)

    def io(self):
        """(read, advance, contact) closures with every lookup bound once (see the module docstring).
        Paid every physics step: plain floats, no numpy."""
        pb, cid, body, plane = self.pb, self.client, self.body_id, self.plane_id
        base_pose, base_vel, states = pb.getBasePositionAndOrientation, pb.getBaseVelocity, pb.getJointStates
        torques, step, contacts, external = (pb.setJointMotorControlArray, pb.stepSimulation, pb.getContactPoints,
                                             pb.applyExternalTorque)
        force = pb.applyExternalForce
        mode, world_frame, wheels = pb.TORQUE_CONTROL, pb.WORLD_FRAME, self.wheel_joints
        cos, sin, sqrt = math.cos, math.sin, math.sqrt
        unused = (0.0,) * len(wheels)
        # q_rel = q_wF conj(q0 q_P): the attitude relative to upright from the base's quaternion
        cx, cy, cz, cw = matrix_to_quat(matmul(self.device.upright(), self.principal_axes_rows()))
        cx, cy, cz = -cx, -cy, -cz
        ox, oy, oz = self.com_in_base
        pose = [(0.0, 0.0, 0.0), (0.0, 0.0, 0.0, 1.0)]
        relative = relative_attitude

        def read():
            pos, (x, y, z, w) = base_pose(body, cid)
            pose[0], pose[1] = pos, (x, y, z, w)
            rate = base_vel(body, cid)[1]
            tilt_x, tilt_y, heading, tilt = relative(x, y, z, w, cx, cy, cz, cw)
            ch, sh = cos(heading), sin(heading)
            ws = states(body, wheels, cid)
            return (tilt_x, tilt_y, heading, tilt,
                    (ch * rate[0] + sh * rate[1], ch * rate[1] - sh * rate[0], rate[2]),
                    [s[0] for s in ws], [s[1] for s in ws])

        def push(torque):
            # a push of moment `torque` about the contact: the horizontal-most force at the centre of
            # mass with that moment, F = tau x r / |r|^2 (r: contact to centre of mass), and the rest of the
            # moment (about r itself) as a torque
            (px, py, pz), q = pose
            r = _rotate(q, (ox, oy, oz))
            rr = r[0] * r[0] + r[1] * r[1] + r[2] * r[2]
            f = _cross(torque, r)
            f = (f[0] / rr, f[1] / rr, f[2] / rr)
            m = _cross(r, f)
            force(body, BASE, f, (px, py, pz), world_frame, cid)
            external(body, BASE, (torque[0] - m[0], torque[1] - m[1], torque[2] - m[2]), world_frame, cid)

        def contact():
            (px, py, pz), (x, y, z, w) = pose
            # the body frame's origin: the centre of mass minus R_wF c_F (v + 2w u x v + 2 u x (u x v))
            tx, ty, tz = 2.0 * (y * oz - z * oy), 2.0 * (z * ox - x * oz), 2.0 * (x * oy - y * ox)
            cxw = ox + w * tx + y * tz - z * ty
            cyw = oy + w * ty + z * tx - x * tz
            czw = oz + w * tz + x * ty - y * tx
            found = contacts(body, plane, BASE, -1, cid)
            if not found:
                return px - cxw, py - cyw, pz - czw, 0.0, 0.0
            fn = fx = fy = 0.0
            for c in found:
                fn += c[9]
                f1, d1, f2, d2 = c[10], c[11], c[12], c[13]
                fx += f1 * d1[0] + f2 * d2[0]
                fy += f1 * d1[1] + f2 * d2[1]
            return px - cxw, py - cyw, pz - czw, 1.0, (sqrt(fx * fx + fy * fy) / fn if fn > 0.0 else 0.0)

        def advance(push_world, wheel_torques):
            if push_world is not None:
                push(push_world)
            torques(body, wheels, mode, unused, unused, wheel_torques, unused, unused, cid)
            step(cid)
        return read, advance, contact

    def principal_axes_rows(self) -> tuple[tuple[float, float, float], ...]:
        return _rows(self.principal_axes)

    def attitude(self) -> tuple[tuple[float, float, float], ...]:
        """R_wb, the body's attitude (body-frame vectors to world), row tuples (for checks)."""
        q = self.pb.getBasePositionAndOrientation(self.body_id, physicsClientId=self.client)[1]
        return matmul(quat_to_matrix(q), transpose(self.principal_axes_rows()))

    def origin_m(self) -> tuple[float, float, float]:
        """The body frame's origin (the balancing contact) in the world, m (for checks)."""
        pos = self.pb.getBasePositionAndOrientation(self.body_id, physicsClientId=self.client)[0]
        lever = np.array(self.attitude()) @ np.array(self.device.body_com_m)
        return tuple(float(v) for v in np.array(pos) - lever)

    def com_m(self) -> tuple[float, float, float]:
        """The body's centre of mass (without the wheels) in the world, m (for checks)."""
        return tuple(self.pb.getBasePositionAndOrientation(self.body_id, physicsClientId=self.client)[0])


def _rows(m) -> tuple[tuple[float, float, float], ...]:
    return tuple(tuple(float(v) for v in row) for row in np.asarray(m))


def _rotate(q, v) -> tuple[float, float, float]:
    """v turned by the unit quaternion q = (x, y, z, w): v + 2w (u x v) + 2 u x (u x v)."""
    x, y, z, w = q
    tx, ty, tz = 2.0 * (y * v[2] - z * v[1]), 2.0 * (z * v[0] - x * v[2]), 2.0 * (x * v[1] - y * v[0])
    return (v[0] + w * tx + y * tz - z * ty, v[1] + w * ty + z * tx - x * tz, v[2] + w * tz + x * ty - y * tx)


def _cross(a, b) -> tuple[float, float, float]:
    return (a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0])
