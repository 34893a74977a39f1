"""Speed of a 3D trial against a bare pybullet loop stepping the same bodies and joints, printed as ratios.

    python benchmarks/bench_3d.py [--seconds 10] [--repeat 5] [--instructions] [--sensing]

(a) bare engine loop: the corner cube's body on its spherical joint and its three wheels, built by
    `sim.physics.engine3d`, stepped at 1 kHz with one state read of the ball joint and the wheels (one
    request, the cheapest pybullet offers and the one the trial makes) and one torque command for the
    ball joint and per wheel each step, nothing else -> real-time factor
(b) the full 3D trial of scenarios/cube_corner.yaml (three motors with friction and current limit,
    sensors with noise and delay per axis, the multi-input LQR at 500 Hz, trace recorded), pushes
    left out -> real-time factor, and its ratio to (a) (target >= 0.5)
(c) with `--sensing`: the same cube balancing from an IMU (scenarios/cube_imu.yaml: no attitude
    sensor, the IMU at 1 kHz, the two-axis Kalman filter) with loop jitter and compute time, pushes
    left out -> real-time factor, and its ratio to (b) (what the sensing models cost per step)
(a), (b) (and (c)) run in interleaved rounds; the figure is the best of each, and each round's ratio is
printed too. `--instructions` counts instructions per step of (a) and (b) with valgrind instead
(as benchmarks/instructions.py does; the machine's load cannot move it): (a)/(b) by instructions.
No assertion: this prints figures; benchmarks/README.md records them with the machine.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

SCENARIO = HERE.parent / "scenarios" / "cube_corner.yaml"
SENSING = HERE.parent / "scenarios" / "cube_imu.yaml"
SENSING_SET = ("sensors.estimator={kind: kalman, measurement_noise: 10 deg, process_noise: {rate: 0.005, bias: 0.0005}, "
               "initial_angle: 0.5 deg}", "timing={compute_time: 1 ms, jitter: 0.5 ms}")


def cube(seconds: float):
    from sim.model.scenario_yaml import load_scenario

    sc = load_scenario(SCENARIO, overrides=("trial.pushes=[]", f"trial.duration={seconds}"))
    assert sc.body.mount == "ball" and len(sc.wheels) == 3 and sc.world.step == 1e-3
    return sc


def imu_cube(seconds: float):
    from sim.model.scenario_yaml import load_scenario

    return load_scenario(SENSING, overrides=("trial.pushes=[]", f"trial.duration={seconds}", *SENSING_SET))


def bare_rtf(sc, seconds: float) -> float:
    """The engine's own pace for this device: one read and one command per joint per step."""
    from sim.model.device3d import Device3D
    from sim.physics.engine3d import BODY, Engine3D

    dev = Device3D.from_scenario(sc)
    with Engine3D(dev, step_s=sc.world.step) as eng:
        eng.reset(attitude=dev.upright())
        pb, cid, body = eng.pb, eng.client, eng.body_id
        read, multi_torque = pb.getJointStatesMultiDof, pb.setJointMotorControlMultiDof
        torques, step = pb.setJointMotorControlArray, pb.stepSimulation
        wheels, mode, unused = eng.wheel_joints, pb.TORQUE_CONTROL, (0.0, 0.0, 0.0)
        joints = (BODY,) + wheels
        n = int(round(seconds / sc.world.step))
        t0 = time.perf_counter()
        for _ in range(n):
            ss = read(body, joints, cid)      # the ball and the wheels in one request, as the trial reads them
            w = ss[0][1]
            # torques that depend on the reads, so no read can be skipped; small, so the body
            # stays near where it started (the figure must not depend on it falling over)
            multi_torque(body, BODY, mode, force=(-1e-3 * w[0], -1e-3 * w[1], -1e-3 * w[2]), physicsClientId=cid)
            torques(body, wheels, mode, unused, unused,
                    (-1e-5 * ss[1][1][0], -1e-5 * ss[2][1][0], -1e-5 * ss[3][1][0]), unused, unused, cid)
            step(cid)
        return seconds / (time.perf_counter() - t0)


def trial_rtf(sc) -> float:
    from sim.run.trial import run_trial

    r = run_trial(sc)
    assert r.outcome == "balanced", r.outcome   # a fallen body would measure a different loop
    return r.ended_at_s / r.wall_s


DRIVER = """
import ctypes, sys
sys.path[:0] = [{root!r}, {bench!r}]
helper = ctypes.CDLL({lib!r})
from bench_3d import bare_rtf, cube, imu_cube, trial_rtf
sc = cube({seconds})
if {which!r} == "trial":
    trial_rtf(cube(0.2))
    helper.count_start(); trial_rtf(sc); helper.count_stop()
elif {which!r} == "sensing":
    trial_rtf(imu_cube(0.2))
    sc = imu_cube({seconds})
    helper.count_start(); trial_rtf(sc); helper.count_stop()
else:
    bare_rtf(sc, 0.01)
    helper.count_start(); bare_rtf(sc, {seconds}); helper.count_stop()
"""


def instructions(t1: float = 0.5, t2: float = 1.5, *, sensing: bool = False) -> None:
    """Instructions per step of (a) and (b) (and (c)), counted over two durations so that set-up cancels out."""
    sys.path.insert(0, str(HERE))
    from instructions import count, counting_folder

    kinds = ("bare", "trial") + (("sensing",) if sensing else ())
    with counting_folder() as (tmp, lib):
        per_step = {which: (count(which, t2, lib, tmp, driver=DRIVER) - count(which, t1, lib, tmp, driver=DRIVER))
                    / ((t2 - t1) * 1000.0) for which in kinds}
    a, b = per_step["bare"], per_step["trial"]
    print(f"(a) bare 3D engine loop    {a:10,.0f} instructions per step")
    print(f"(b) 3D trial               {b:10,.0f} instructions per step   (a)/(b) = {a / b:.2f} (by instructions)")
    if sensing:
        c = per_step["sensing"]
        print(f"(c) 3D trial from an IMU   {c:10,.0f} instructions per step   (b)/(c) = {b / c:.2f} (by instructions)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=10.0, help="simulated seconds per measurement")
    ap.add_argument("--repeat", type=int, default=5, help="interleaved rounds")
    ap.add_argument("--instructions", action="store_true", help="count instructions per step (valgrind)")
    ap.add_argument("--sensing", action="store_true", help="also (c): the cube balancing from an IMU, with jitter")
    args = ap.parse_args()
    if args.instructions:
        instructions(sensing=args.sensing)
    else:
        wall_time_rounds(args.seconds, args.repeat, sensing=args.sensing)


def wall_time_rounds(seconds: float, repeat: int, *, sensing: bool = False) -> None:
    """(a) and (b) (and (c)) in interleaved rounds; each round's ratio, then the best of each."""
    sc, sc_imu = cube(seconds), imu_cube(seconds) if sensing else None
    trial_rtf(cube(0.2))        # imports and first-use costs out of the rounds
    bare, full, imu = [], [], []
    for i in range(repeat):
        bare.append(bare_rtf(sc, seconds))
        full.append(trial_rtf(sc))
        line = f"round {i + 1}: (a) bare {bare[-1]:.1f}x  (b) trial {full[-1]:.1f}x  (b)/(a) {full[-1] / bare[-1]:.2f}"
        if sensing:
            imu.append(trial_rtf(sc_imu))
            line += f"  (c) IMU trial {imu[-1]:.1f}x  (c)/(b) {imu[-1] / full[-1]:.2f}"
        print(line, flush=True)
    print(f"(a) bare 3D engine loop, best real-time factor: {max(bare):.1f}x")
    print(f"(b) 3D trial (corner cube, three wheels, ball mount), best real-time factor: {max(full):.1f}x")
    print(f"(b)/(a), best of each: {max(full) / max(bare):.2f}  (target >= 0.5)")
    if sensing:
        print(f"(c) the cube from an IMU (Kalman, jitter, compute time), best real-time factor: {max(imu):.1f}x")
        print(f"(c)/(b), best of each: {max(imu) / max(full):.2f}")


if __name__ == "__main__":
    main()
