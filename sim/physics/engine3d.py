"""The 3D device in pybullet (DIRECT mode, CPU): a body on a hinge or ball joint, one to three wheels.

A fixed base at the origin; link 0 is the body, on a revolute joint about the body's x axis
(hinge) or a spherical joint (ball) at the origin; links 1..n are the wheels, each on a revolute
joint about its own axis at its centre in the body frame. Link frames are the body frame (the body
link) and body-frame-aligned frames at the wheel centres; each link's inertial frame is turned to
the principal axes of its inertia tensor (pybullet takes a diagonal). Every pybullet default that
distorts a fast wheel or a free body is switched off for every joint and link: the 100 rad/s
joint-speed clamp, link damping, and the default joint motors (the spherical joint's included: a
zero-force multi-DoF motor). Gyroscopic terms are on (pybullet's default).

Units and frames of the calls:
- `read()` -> (tilt_x, tilt_y, heading, tilt_rad, body rate (wx, wy, wz) rad/s in the heading frame
  (the world frame turned about the vertical by the heading; the world frame at heading 0),
  wheel angles rad, wheel speeds rad/s relative to the body); see `io`.
- `raw_io()` (a free ball mount) reads the ball joint's raw state instead, which `attitude_map`
  (`sim.physics.joint_attitude`) turns into what `read()` gives, for a caller that needs it on some
  steps only.
- `advance(push_world, wheel_torques)`: each wheel's net torque about its axis, N m (the reaction acts
  on the body), and a push's torque on the body about the pivot, N m in the world frame, or None (a
  hinge takes its x component); the pivot's viscous friction is applied here; one physics step.
Coulomb friction (and a brake) at the wheel joints are zero-target velocity motors with a force cap,
as on the planar engine; viscous friction is applied by the caller as a torque. Coulomb friction at a
ball mount is a torque against the body's rate while it slides and the spherical joint's capped
velocity motor while it sticks (`ball_friction`).
"""

from __future__ import annotations

import math

import numpy as np

from ..core.angles import wrap_angle
from ..core.frames import matmul, matrix_to_quat, quat_to_matrix, transpose
from ..core.unrolled import unrolled
from ..model.device3d import Device3D
from ..model.massprops3d import wheel_tensor
from .ball_friction import BallFriction
from .engine import MAX_JOINT_SPEED, give_back_client, take_client, import_pybullet
from .joint_attitude import AttitudeMap, relative_attitude

BODY = 0


class OneClient:
    """What the 3D engines share: one pybullet client (`pb`, `client`) holding one body (`body_id`) whose
    wheels are the joints `wheel_joints`; closed once, also as a context manager."""

    def wheel_speeds(self) -> tuple[float, ...]:
        """Each wheel's speed relative to the body, rad/s (for checks)."""
        return tuple(s[1] for s in self.pb.getJointStates(self.body_id, list(self.wheel_joints),
                                                          physicsClientId=self.client))

    def connect(self) -> int:
        """A DIRECT client: the idle one this process keeps (`sim.physics.engine`; connecting costs
        tens of ms, more than a short trial's stepping), or a new one. The 3D engines always build
        their body anew in it (their `_build` starts with resetSimulation), so a reused client gives
        exactly the numbers a new one gives (tests/test_engine_reuse.py)."""
        return take_client(self.pb, None)[0]

    def close(self) -> None:
        """Hand the client back for the next trial in this process (once; the body is not kept)."""
        client, self.client = self.client, None
        if client is not None:
            give_back_client(self.pb, client, None, -1)

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self.close()


class Engine3D(OneClient):
    """One pybullet client holding one 3D device. Not thread-safe; one per trial."""

    def __init__(self, device: Device3D, *, step_s: float, attitude=None):
        """`attitude`: R_wb (row tuples) a locked body (`device.locked`) is held at; its body link is then
        a fixed joint, so the clamp, not the body, takes the wheels' reaction."""
        pb = import_pybullet()
        self.pb, self.device, self.step_s = pb, device, step_s
        if device.locked and attitude is None:
            raise ValueError("a locked body needs the attitude it is held at")
        self.held = tuple(tuple(float(v) for v in row) for row in attitude) if device.locked else None
        self.client = self.connect()
        self.ball = device.mount == "ball"
        self.wheel_joints = tuple(range(1, device.n_wheels + 1))
        self.body_id = self._build()
        self.set_dry_friction([w.coulomb_n_m for w in device.wheels])

    def _build(self) -> int:
        pb, dev, cid = self.pb, self.device, self.client
        pb.resetSimulation(physicsClientId=cid)
        pb.setGravity(0, 0, -dev.gravity_m_s2, physicsClientId=cid)
        pb.setTimeStep(self.step_s, physicsClientId=cid)
        pb.setPhysicsEngineParameter(numSubSteps=0, physicsClientId=cid)
        body_diag, body_q = principal(np.array(dev.body_inertia_com_kg_m2))
        # pybullet states a spherical joint's attitude, rate and torque in the body link's principal
        # (inertial) axes P: q = P^T R P, w = P^T w_body, tau = P^T tau_body (seen on pybullet 3.2.7;
        # tests/test_trial3d.py's momentum and precession checks hold the conversion)
        self.principal_axes = quat_to_matrix(body_q)
        self.attitude_map = AttitudeMap(self.principal_axes, dev.upright())    # a ball's raw state -> attitude, rates
        diags, quats = [body_diag], [body_q]
        for w in dev.wheels:
            d, q = principal(wheel_tensor(w.spin_inertia_kg_m2, w.transverse_inertia_kg_m2, w.axis))
            diags.append(d)
            quats.append(q)
        n = dev.n_wheels
        body_id = pb.createMultiBody(
            baseMass=0.0, baseCollisionShapeIndex=-1, baseVisualShapeIndex=-1, basePosition=[0, 0, 0],
            linkMasses=[dev.body_mass_kg] + [w.mass_kg for w in dev.wheels],
            linkCollisionShapeIndices=[-1] * (n + 1), linkVisualShapeIndices=[-1] * (n + 1),
            linkPositions=[[0, 0, 0]] + [list(w.at_m) for w in dev.wheels],
            linkOrientations=[list(matrix_to_quat(self.held)) if self.held else [0, 0, 0, 1]] + [[0, 0, 0, 1]] * n,
            linkInertialFramePositions=[list(dev.body_com_m)] + [[0, 0, 0]] * n,
            linkInertialFrameOrientations=quats,
            linkParentIndices=[0] + [1] * n,
            linkJointTypes=[pb.JOINT_FIXED if self.held else pb.JOINT_SPHERICAL if self.ball else pb.JOINT_REVOLUTE]
                           + [pb.JOINT_REVOLUTE] * n,
            linkJointAxis=[[1, 0, 0]] + [list(w.axis) for w in dev.wheels],
            physicsClientId=cid,
        )
        for link, diag in enumerate(diags):
            # inertia in its own call: passing mass in the same call drops it (pybullet 3.2.7)
            pb.changeDynamics(body_id, link, localInertiaDiagonal=list(diag), physicsClientId=cid)
            pb.changeDynamics(body_id, link, linearDamping=0.0, angularDamping=0.0, jointDamping=0.0,
                              maxJointVelocity=MAX_JOINT_SPEED, physicsClientId=cid)
        self.ball_friction = None
        if self.held:     # a fixed joint: no pivot motor, no pivot friction
            pass
        elif self.ball and dev.pivot_coulomb_n_m > 0:   # Coulomb friction: slide or hold (`ball_friction`)
            least = float(np.linalg.eigvalsh(dev.inertia_about_pivot_kg_m2(with_spin=False))[0])
            self.ball_friction = BallFriction(dev.pivot_coulomb_n_m, least_inertia_kg_m2=least, step_s=self.step_s)
            _ball_hold(pb, body_id, cid, dev.pivot_coulomb_n_m)
        elif self.ball:   # the spherical joint's default motor holds it: zero force
            pb.setJointMotorControlMultiDof(body_id, BODY, pb.POSITION_CONTROL, targetPosition=[0, 0, 0, 1],
                                            positionGain=0, velocityGain=0, force=[0, 0, 0], physicsClientId=cid)
        else:
            pb.setJointMotorControl2(body_id, BODY, pb.VELOCITY_CONTROL, targetVelocity=0.0,
                                     force=dev.pivot_coulomb_n_m, physicsClientId=cid)
        return body_id

    def set_dry_friction(self, wheel_n_m) -> None:
        """Coulomb friction (or a brake) on each wheel's bearing, N m."""
        pb = self.pb
        pb.setJointMotorControlArray(self.body_id, list(self.wheel_joints), pb.VELOCITY_CONTROL,
                                     targetVelocities=[0.0] * len(self.wheel_joints), forces=list(wheel_n_m),
                                     physicsClientId=self.client)

    def reset(self, *, attitude, rate_world=(0.0, 0.0, 0.0), hinge_angle_rad: float = 0.0,
              hinge_rate_rad_s: float = 0.0, wheel_speeds_rad_s=None) -> None:
        """Set the state: a ball's attitude R_wb (row tuples) and world rate, or a hinge's angle and
        rate; wheel speeds relative to the body (wheel angles 0)."""
        pb, cid, body = self.pb, self.client, self.body_id
        if self.held:
            pass        # held where it was built
        elif self.ball:
            p, pt = self.principal_axes, transpose(self.principal_axes)
            local = _mat_vec(pt, _mat_vec(transpose(attitude), rate_world))
            pb.resetJointStateMultiDof(body, BODY, targetValue=list(matrix_to_quat(matmul(matmul(pt, attitude), p))),
                                       targetVelocity=list(local), physicsClientId=cid)
        else:
            pb.resetJointState(body, BODY, hinge_angle_rad, hinge_rate_rad_s, physicsClientId=cid)
        speeds = wheel_speeds_rad_s or [0.0] * len(self.wheel_joints)
        for j, s in zip(self.wheel_joints, speeds):
            pb.resetJointState(body, j, 0.0, float(s), physicsClientId=cid)

    def io(self):
        """(read, advance) closures with every lookup bound once (see the module docstring).

        read() -> (tilt_x, tilt_y, heading, tilt rad, (wx, wy, wz) rad/s in the heading frame, wheel angles rad,
        wheel speeds rad/s): the attitude relative to upright (`sim.core.frames`); on a hinge
        tilt_x is the unwrapped body angle from upright and tilt_y = heading = 0.
        advance(push_world, wheel_torques): one step with each wheel's net torque about its axis
        (N m) and, when not None, a torque on the body about the pivot in the world frame (N m, a
        push); the pivot's viscous friction is applied here. Paid every physics step: plain floats,
        no numpy, no keyword parsing where pybullet takes positions.
        """
        if self.held:
            return self._held_io()
        if self.ball:
            read, _, advance = self._ball_io()
            return read, advance
        pb, cid, body, dev = self.pb, self.client, self.body_id, self.device
        states, torques, step = pb.getJointStates, pb.setJointMotorControlArray, pb.stepSimulation
        mode, wheels, bp = pb.TORQUE_CONTROL, self.wheel_joints, dev.pivot_viscous_n_m_s
        atan2, fabs, pi = math.atan2, math.fabs, math.pi
        r0 = dev.upright()
        joints, unused_all = (BODY,) + wheels, (0.0,) * (len(wheels) + 1)
        a0 = atan2(r0[2][1], r0[2][2])
        last = [0.0]

        def read():
            ss = states(body, joints, cid)
            tx, thd = ss[0][0] - a0, ss[0][1]
            last[0] = thd
            wrapped = fabs(tx) if -pi < tx <= pi else fabs((tx + pi) % (2 * pi) - pi)
            return (tx, 0.0, 0.0, wrapped, (thd, 0.0, 0.0), [s[0] for s in ss[1:]], [s[1] for s in ss[1:]])

        def advance(push_world, wheel_torques):
            pivot = -bp * last[0] + (push_world[0] if push_world is not None else 0.0)
            torques(body, joints, mode, unused_all, unused_all, (pivot, *wheel_torques), unused_all, unused_all, cid)
            step(cid)
        return read, advance

    def raw_io(self):
        """(read_raw, advance) on a free ball mount (`io` otherwise has no raw form): read_raw() ->
        (the ball joint's quaternion (qx, qy, qz, w) and rate (u0, u1, u2) rad/s, both as pybullet
        gives them, in the body's principal axes; wheel angles rad; wheel speeds rad/s), the state
        `io`'s read works its attitude and rates out of with `attitude_map.row` (for a caller that
        needs them on some steps only); `advance` as `io`'s."""
        if self.held or not self.ball:
            raise ValueError("raw_io needs a free ball mount")
        _, read_raw, advance = self._ball_io()
        return read_raw, advance

    def _ball_io(self):
        """(read, read_raw, advance) of a free ball mount, sharing the last read's state."""
        pb, cid, body, dev = self.pb, self.client, self.body_id, self.device
        torques, step, mode = pb.setJointMotorControlArray, pb.stepSimulation, pb.TORQUE_CONTROL
        wheels, bp, n = self.wheel_joints, dev.pivot_viscous_n_m_s, len(self.wheel_joints)
        unused = (0.0,) * n
        multi, multi_torque, joints = pb.getJointStatesMultiDof, pb.setJointMotorControlMultiDof, (BODY,) + wheels
        p = self.principal_axes
        state = [(0.0, 0.0, 0.0, 1.0), (0.0, 0.0, 0.0)]    # the last read: joint quaternion and rate (principal axes)
        skip_pivot, minus_bp = bp == 0.0, -bp
        friction = self.ball_friction
        wheel_values = _multi_dof_wheels(n)
        row = self.attitude_map.row

        def read_raw():
            ss = multi(body, joints, cid)     # the ball and every wheel in one request (one state copy)
            ball = ss[0]
            q, wp = ball[0], ball[1]
            state[0], state[1] = q, wp
            angles, speeds = wheel_values(ss)
            return q, wp, angles, speeds

        def read():
            (qx, qy, qz, w), (u0, u1, u2), angles, speeds = read_raw()
            tilt_x, tilt_y, heading, tilt, rate = row(qx, qy, qz, w, u0, u1, u2)
            return tilt_x, tilt_y, heading, tilt, rate, angles, speeds

        if friction is not None:
            return read, read_raw, self._advance_with_friction(state, bp, friction)

        def advance(push_world, wheel_torques):
            # viscous pivot friction -bp w is -bp wp in the principal axes: no turning needed
            if push_world is not None:
                push = _to_principal(p, state[0], push_world)
                wp = state[1]
                multi_torque(body, BODY, mode, force=(push[0] - bp * wp[0], push[1] - bp * wp[1], push[2] - bp * wp[2]),
                             physicsClientId=cid)
            elif not skip_pivot:
                wp = state[1]   # -bp w as (-bp) w: Python negates first, so the same doubles
                multi_torque(body, BODY, mode, force=(minus_bp * wp[0], minus_bp * wp[1], minus_bp * wp[2]),
                             physicsClientId=cid)
            torques(body, wheels, mode, unused, unused, wheel_torques, unused, unused, cid)
            step(cid)
        return read, read_raw, advance

    def _advance_with_friction(self, state, bp: float, friction):
        """`advance` on a ball mount with Coulomb friction: the sliding torque joins the pivot's other
        torques (principal axes, N m), or the hold is switched on when the body comes to rest."""
        pb, cid, body = self.pb, self.client, self.body_id
        multi_torque, torques, step = pb.setJointMotorControlMultiDof, pb.setJointMotorControlArray, pb.stepSimulation
        mode, wheels, p, cap = pb.TORQUE_CONTROL, self.wheel_joints, self.principal_axes, friction.coulomb_n_m
        unused = (0.0,) * len(wheels)

        def advance(push_world, wheel_torques):
            wp = state[1]
            was_holding = friction.holding
            slide = friction.torque(wp[0], wp[1], wp[2])
            if friction.holding != was_holding:
                _ball_hold(pb, body, cid, cap if friction.holding else 0.0)
            fx, fy, fz = slide if slide is not None else (0.0, 0.0, 0.0)
            if push_world is not None:
                push = _to_principal(p, state[0], push_world)
                fx, fy, fz = fx + push[0], fy + push[1], fz + push[2]
            multi_torque(body, BODY, mode, force=(fx - bp * wp[0], fy - bp * wp[1], fz - bp * wp[2]), physicsClientId=cid)
            torques(body, wheels, mode, unused, unused, wheel_torques, unused, unused, cid)
            step(cid)
        return advance

    def _held_io(self):
        """`io` of a locked body: its attitude as held, no rate; the wheels' torques only (a push goes
        into the clamp)."""
        pb, cid, body, wheels = self.pb, self.client, self.body_id, self.wheel_joints
        states, torques, step, mode = pb.getJointStates, pb.setJointMotorControlArray, pb.stepSimulation, pb.TORQUE_CONTROL
        unused, still = (0.0,) * len(wheels), (0.0, 0.0, 0.0)
        if self.ball:
            x, y, z, w = matrix_to_quat(self.held)
            cx, cy, cz, cw = matrix_to_quat(self.device.upright())
            tilt_x, tilt_y, heading, tilt = relative_attitude(x, y, z, w, -cx, -cy, -cz, cw)
        else:   # the angle about x from upright, as a hinge reads it
            r0 = self.device.upright()
            tilt_x = wrap_angle(math.atan2(self.held[2][1], self.held[2][2]) - math.atan2(r0[2][1], r0[2][2]))
            tilt_y = heading = 0.0
            tilt = math.fabs(tilt_x)

        def read():
            ws = states(body, wheels, cid)
            return (tilt_x, tilt_y, heading, tilt, still, [s[0] for s in ws], [s[1] for s in ws])

        def advance(push_world, wheel_torques):
            torques(body, wheels, mode, unused, unused, wheel_torques, unused, unused, cid)
            step(cid)
        return read, advance

    def attitude(self) -> tuple[tuple[float, float, float], ...]:
        """R_wb, the body's attitude (body-frame vectors to world), row tuples (for checks)."""
        pb = self.pb
        if self.held:
            return self.held
        if not self.ball:
            th = pb.getJointState(self.body_id, BODY, physicsClientId=self.client)[0]
            c, s = math.cos(th), math.sin(th)
            return ((1.0, 0.0, 0.0), (0.0, c, -s), (0.0, s, c))
        q = pb.getJointStateMultiDof(self.body_id, BODY, physicsClientId=self.client)[0]
        p = self.principal_axes
        return matmul(matmul(p, quat_to_matrix(q)), transpose(p))

    def body_rate_world(self) -> tuple[float, float, float]:
        """The body's angular velocity in the world frame, rad/s (for checks)."""
        pb = self.pb
        if self.held:
            return (0.0, 0.0, 0.0)
        if not self.ball:
            return (pb.getJointState(self.body_id, BODY, physicsClientId=self.client)[1], 0.0, 0.0)
        wp = pb.getJointStateMultiDof(self.body_id, BODY, physicsClientId=self.client)[1]
        return _mat_vec(self.attitude(), _mat_vec(self.principal_axes, wp))

    def link_states(self):
        """[(world centre-of-mass position, world link-frame orientation quaternion, world linear
        velocity, world angular velocity)] of the body and each wheel, from pybullet (for checks and
        rendering; pybullet hands these out in single precision)."""
        pb, out = self.pb, []
        for link in range(self.device.n_wheels + 1):
            s = pb.getLinkState(self.body_id, link, computeLinkVelocity=1, computeForwardKinematics=1,
                                physicsClientId=self.client)
            out.append((s[0], s[5], s[6], s[7]))
        return out


def _multi_dof_wheels(n: int):
    """`f(states) -> (wheel angles rad, wheel speeds rad/s)` from a getJointStatesMultiDof answer whose
    first entry is the body's joint and the next `n` the wheels' (each a revolute: one-element
    position and velocity), the entries unpacked by position, written out for n wheels
    (`sim.core.unrolled`: a list comprehension per step costs more than the rest of the unpacking)."""
    one = "," if n == 1 else ""
    source = ("def values(ss):\n"
              + "".join(f"    w{j} = ss[{j + 1}]\n" for j in range(n))
              + f"    return ({', '.join(f'w{j}[0][0]' for j in range(n))}{one}), "
              + f"({', '.join(f'w{j}[1][0]' for j in range(n))}{one})\n")
    return unrolled(source, {}, f"joint states of {n} wheels")["values"]


def _ball_hold(pb, body: int, cid: int, cap_n_m: float) -> None:
    """The spherical joint's velocity motor: target rate 0, force capped at `cap_n_m` (N m; pybullet
    applies the first of the three caps to every axis), 0 to release it."""
    pb.setJointMotorControlMultiDof(body, BODY, pb.POSITION_CONTROL, targetPosition=[0, 0, 0, 1],
                                    targetVelocity=[0, 0, 0], positionGain=0, velocityGain=1,
                                    force=[cap_n_m] * 3, physicsClientId=cid)


def principal(inertia: np.ndarray) -> tuple[list[float], list[float]]:
    """(principal moments, quaternion (x, y, z, w) of the principal axes) of a symmetric tensor."""
    vals, vecs = np.linalg.eigh(inertia)
    if np.linalg.det(vecs) < 0:
        vecs[:, 2] = -vecs[:, 2]
    rows = tuple(tuple(float(v) for v in row) for row in vecs)
    return [float(max(v, 0.0)) for v in vals], list(matrix_to_quat(rows))


def _to_principal(p, q_joint, v_world) -> tuple[float, float, float]:
    """A world-frame vector in the body's principal axes: P^T R_wb^T v, with q_wb = (P v_q, w) from the
    ball joint's quaternion q_joint = (v_q, w) (pybullet's, in the principal axes)."""
    x, y, z = _mat_vec(p, q_joint[:3])
    return _mat_vec(transpose(p), _mat_vec(transpose(quat_to_matrix((x, y, z, q_joint[3]))), v_world))


def _mat_vec(m, v) -> tuple[float, float, float]:
    return (m[0][0] * v[0] + m[0][1] * v[1] + m[0][2] * v[2],
            m[1][0] * v[0] + m[1][1] * v[1] + m[1][2] * v[2],
            m[2][0] * v[0] + m[2][1] * v[1] + m[2][2] * v[2])


