"""The 3D rigid-body model in pybullet (DIRECT mode, no display, CPU only).

A fixed base; link 0 is the body on a revolute pivot joint about the world x axis through the
origin; link 1 is the wheel on a revolute joint about x at `wheel_at` along the body axis. The
body axis points along +z when the angle is 0 (upright). Masses, centres of mass and inertias are
set from our own mass properties; pybullet's defaults that distort a fast wheel are switched off:
the 100 rad/s joint-velocity clamp, link damping and the default joint velocity motors.

Coulomb friction at both joints uses pybullet's velocity motors with a zero target and a force
cap equal to the friction torque (sticks exactly below it, slides at it). Viscous friction and the
motor's torque are applied by the caller as joint torques each step.
"""

from __future__ import annotations

from ..model.device import Device

PIVOT, WHEEL = 0, 1
MAX_JOINT_SPEED = 1e5  # rad/s: well beyond any motor we model; pybullet's default is 100


class EngineModel:
    """One pybullet client holding one device. Not thread-safe; one per trial."""

    def __init__(self, device: Device, *, step_s: float, start_angle_rad: float = 0.0, visual=None):
        pb = import_pybullet()
        self.pb = pb
        self.device = device
        self.step_s = step_s
        self.locked = device.locked
        self.locked_angle = start_angle_rad
        # the same device on an idle client is reused as it is: only its joints and friction are
        # reset (rebuilding costs ~4 ms, a fifth of a short catch-map cell); a body drawn for video
        # carries visual shapes and is always built anew
        self.body_key = None if visual is not None else _body_key(device, step_s, start_angle_rad if self.locked else None)
        self.client, self.body_id = take_client(pb, self.body_key)
        if self.body_id is None:
            self.body_id = self._build(visual)
        else:
            for joint in ([WHEEL] if self.locked else [PIVOT, WHEEL]):
                pb.resetJointState(self.body_id, joint, 0.0, 0.0, physicsClientId=self.client)
        # hoisted for the per-step loop; a locked body's pivot is a fixed joint and takes no commands
        self._joints = [PIVOT, WHEEL]
        self._driven = [WHEEL] if self.locked else [PIVOT, WHEEL]
        self._states = pb.getJointStates
        self._torques = pb.setJointMotorControlArray
        self._step = pb.stepSimulation
        self._torque_mode = pb.TORQUE_CONTROL
        self._io = None
        self.set_dry_friction(pivot_n_m=device.pivot_coulomb_n_m, wheel_n_m=device.wheel_coulomb_n_m)

    def _build(self, visual) -> int:
        """Empty the client and build the device in it; returns the multibody's id."""
        pb, device, start_angle_rad = self.pb, self.device, self.locked_angle
        cid = self.client
        pb.resetSimulation(physicsClientId=cid)
        pb.setGravity(0, 0, -device.gravity_m_s2, physicsClientId=cid)
        pb.setTimeStep(self.step_s, physicsClientId=cid)
        pb.setPhysicsEngineParameter(numSubSteps=0, physicsClientId=cid)
        vis = visual.shapes(pb, cid) if visual is not None else (-1, -1, -1)
        q_lock = pb.getQuaternionFromEuler([start_angle_rad, 0, 0]) if self.locked else [0, 0, 0, 1]
        body_id = pb.createMultiBody(
            baseMass=0.0, baseCollisionShapeIndex=-1, baseVisualShapeIndex=vis[0], basePosition=[0, 0, 0],
            linkMasses=[device.body.mass_kg, device.wheel.mass_kg],
            linkCollisionShapeIndices=[-1, -1], linkVisualShapeIndices=[vis[1], vis[2]],
            linkPositions=[[0, 0, 0], [0, 0, device.wheel_at_m]],
            linkOrientations=[q_lock, [0, 0, 0, 1]],
            linkInertialFramePositions=[[0, 0, device.body.com_m], [0, 0, 0]],
            linkInertialFrameOrientations=[[0, 0, 0, 1]] * 2,
            linkParentIndices=[0, 1],
            linkJointTypes=[pb.JOINT_FIXED if self.locked else pb.JOINT_REVOLUTE, pb.JOINT_REVOLUTE],
            linkJointAxis=[[1, 0, 0], [1, 0, 0]],
            physicsClientId=cid,
        )
        for link, props in ((PIVOT, device.body), (WHEEL, device.wheel)):
            # inertia must be set in its own call: passing mass in the same call drops it (pybullet 3.2.7)
            pb.changeDynamics(body_id, link, localInertiaDiagonal=list(props.inertia_com), physicsClientId=cid)
            pb.changeDynamics(body_id, link, linearDamping=0.0, angularDamping=0.0, jointDamping=0.0,
                              maxJointVelocity=MAX_JOINT_SPEED, physicsClientId=cid)
        return body_id

    def set_dry_friction(self, *, pivot_n_m: float, wheel_n_m: float) -> None:
        """Coulomb friction (or a brake) as zero-target velocity motors with a force cap, N m."""
        pb = self.pb
        forces = [wheel_n_m] if self.locked else [pivot_n_m, wheel_n_m]
        pb.setJointMotorControlArray(self.body_id, self._driven, pb.VELOCITY_CONTROL,
                                     targetVelocities=[0.0] * len(forces), forces=forces, physicsClientId=self.client)

    def reset(self, *, angle_rad: float, rate_rad_s: float, wheel_angle_rad: float = 0.0,
              wheel_speed_rad_s: float = 0.0) -> None:
        """Set the joint states. Wheel speed is relative to the body."""
        pb = self.pb
        if not self.locked:
            pb.resetJointState(self.body_id, PIVOT, angle_rad, rate_rad_s, physicsClientId=self.client)
        pb.resetJointState(self.body_id, WHEEL, wheel_angle_rad, wheel_speed_rad_s, physicsClientId=self.client)

    def read(self) -> tuple[float, float, float, float]:
        """(angle rad, body rate rad/s, wheel angle rad, wheel speed rad/s), the angle unwrapped."""
        return self.io()[0]()

    def advance(self, pivot_torque_n_m: float, wheel_torque_n_m: float) -> None:
        """Apply joint torques for one step and step the world. The wheel torque's reaction acts on the body."""
        self.io()[1](pivot_torque_n_m, wheel_torque_n_m)

    def io(self):
        """(read, advance) as closures with every lookup bound once (built on first use).

        For the per-step loop, where each attribute lookup and keyword parse is paid 1000 times
        per simulated second (pybullet parses a positional client id faster than a keyword).
        A locked body's pivot is a fixed joint: it reads as the clamp angle and takes no torque.
        """
        if self._io is None:
            self._io = self._bind_io()
        return self._io

    def _bind_io(self):
        states, torques, step = self._states, self._torques, self._step
        body, cid, joints, mode = self.body_id, self.client, tuple(self._joints), self._torque_mode
        # setJointMotorControlArray all positional: keyword parsing costs more than the call's own
        # work (1.6 against 2.9 us here). Positional order (pybullet 3.2.x): body, joints, mode,
        # targetPositions, targetVelocities, forces, positionGains, velocityGains, physicsClientId;
        # in torque mode only the forces act (targets and gains are ignored; a test holds the
        # numbers to those of the keyword form).
        if self.locked:
            clamp, wheel_only, unused = self.locked_angle, (WHEEL,), (0.0,)

            def read() -> tuple[float, float, float, float]:
                wheel = states(body, joints, cid)[1]
                return clamp, 0.0, wheel[0], wheel[1]

            def advance(pivot_torque_n_m: float, wheel_torque_n_m: float) -> None:
                torques(body, wheel_only, mode, unused, unused, (wheel_torque_n_m,), unused, unused, cid)
                step(cid)
        else:
            unused = (0.0, 0.0)

            def read() -> tuple[float, float, float, float]:
                pivot, wheel = states(body, joints, cid)
                return pivot[0], pivot[1], wheel[0], wheel[1]

            def advance(pivot_torque_n_m: float, wheel_torque_n_m: float) -> None:
                torques(body, joints, mode, unused, unused, (pivot_torque_n_m, wheel_torque_n_m), unused, unused, cid)
                step(cid)
        return read, advance

    def close(self) -> None:
        """Hand the client (and the body in it) back for the next trial in this process."""
        client, self.client = self.client, None
        if client is not None:
            give_back_client(self.pb, client, self.body_key, self.body_id)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


# One idle DIRECT client kept per process, with the body it last held: connecting costs ~20 ms and
# building a body ~4 ms, most of a short catch-map trial. A reused client whose body is a different
# device is emptied with resetSimulation and built exactly as a new one; the same device is only
# reset (joint states, friction motors). The determinism tests compare runs on fresh and reused
# clients and bodies across worker counts, byte for byte.
_IDLE_CLIENTS: list[tuple[int, tuple | None, int]] = []   # (client id, body key, body id)


def _body_key(device: Device, step_s: float, locked_angle_rad: float | None) -> tuple:
    """Everything the engine's body is built from (equal keys build identical bodies)."""
    return (step_s, device.gravity_m_s2, device.wheel_at_m, device.body, device.wheel, device.locked,
            locked_angle_rad)


def take_client(pb, key: tuple | None) -> tuple[int, int | None]:
    """(client id, body id to reuse or None)."""
    while _IDLE_CLIENTS:
        cid, held, body = _IDLE_CLIENTS.pop()
        if pb.isConnected(physicsClientId=cid):
            return cid, (body if key is not None and held == key else None)
    return pb.connect(pb.DIRECT), None


def give_back_client(pb, cid: int, key: tuple | None, body: int) -> None:
    try:
        if not _IDLE_CLIENTS and pb.isConnected(physicsClientId=cid):
            _IDLE_CLIENTS.append((cid, key, body))
        else:
            pb.disconnect(physicsClientId=cid)
    except Exception:  # already gone: nothing to free
        pass


def import_pybullet():
    """Import pybullet without its start-up banner (stdout may carry JSON or C output; stderr carries
    our one-line error messages). pybullet 3.2.x writes the banner to stderr."""
    import sys

    if "pybullet" in sys.modules:
        return sys.modules["pybullet"]
    import os

    sys.stdout.flush()
    sys.stderr.flush()
    saved = {fd: os.dup(fd) for fd in (1, 2)}
    try:
        with open(os.devnull, "w") as null:
            for fd in saved:
                os.dup2(null.fileno(), fd)
            import pybullet
            try:  # the banner sits in C's stdio buffer: flush it into /dev/null, not into our output
                import ctypes
                ctypes.CDLL(None).fflush(None)
            except (OSError, AttributeError):
                pass
    finally:
        for fd, copy in saved.items():
            os.dup2(copy, fd)
            os.close(copy)
    return pybullet
