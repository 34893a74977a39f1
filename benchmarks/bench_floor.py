"""Speed of a floor balancing trial against a bare pybullet loop with the same bodies and contact, as ratios.

    python benchmarks/bench_floor.py [--seconds 10] [--repeat 5] [--instructions]

(a) bare engine loop: the floor cube's floating body with its wheel and the floor plane, built by
    `sim.physics.engine_floor`, stepped at 1 kHz with one read of the body's pose and velocity, one read
    of the wheel's state and of the body's floor contacts, and one torque command per wheel each
    step, nothing else -> real-time factor
(b) the full trial of scenarios/floor_cube.yaml (motor with friction and current limit, sensors with
    noise and delay, LQR at 500 Hz, trace recorded with the contact columns), push left out ->
    real-time factor, and its ratio to (a) (target >= 0.5)
(a) and (b) run in interleaved rounds (the machine is shared and noisy); the figure is the best of
each, and each round's ratio is printed too. `--instructions` counts instructions per step of (a) and
(b) with valgrind instead (0.5 s and 1.5 s runs, set-up cancelled; the machine's load cannot move it).
No assertion: this prints figures.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

SCENARIO = HERE.parent / "scenarios" / "floor_cube.yaml"


def cube(seconds: float):
    from sim.model.scenario_yaml import load_scenario

    sc = load_scenario(SCENARIO, overrides=("trial.pushes=[]", f"trial.duration={seconds}"))
    assert sc.body.mount == "floor" and sc.world.step == 1e-3
    return sc


def bare_rtf(sc, seconds: float) -> float:
    """The engine's own pace for this device: one read and one command per body and wheel per step."""
    from sim.model.device3d import Device3D
    from sim.model.floor import start_attitude
    from sim.physics.engine_floor import FloorEngine

    dev = Device3D.from_scenario(sc)
    with FloorEngine(dev, step_s=sc.world.step) as eng:
        pb, cid, body, plane = eng.pb, eng.client, eng.body_id, eng.plane_id
        eng.reset(attitude=dev.upright())
        y_up = pb.getBasePositionAndOrientation(body, cid)[0][1]   # the body's centre of mass when balanced
        eng.reset(attitude=start_attitude(sc, dev)[0])
        pose, vel, states, contacts = pb.getBasePositionAndOrientation, pb.getBaseVelocity, pb.getJointStates, pb.getContactPoints
        torques, step = pb.setJointMotorControlArray, pb.stepSimulation
        wheels, mode, unused = eng.wheel_joints, pb.TORQUE_CONTROL, (0.0,) * len(eng.wheel_joints)
        n = int(round(seconds / sc.world.step))
        t0 = time.perf_counter()
        for _ in range(n):
            p, q = pose(body, cid)
            v, w = vel(body, cid)
            ws = states(body, wheels, cid)
            touching = contacts(body, plane, -1, -1, cid)
            # torques that depend on the reads, so no read can be skipped, and that hold the body up on
            # its edge as the trial does (a fallen body would be a different loop): a PD on the centre
            # of mass's sideways offset from where it is when balanced (tilt ~ -y / d), a little wheel-speed
            # feedback (both checked to hold the demo cube up from its 3 deg start)
            cmd = (-60.0 * (p[1] - y_up) - 4.0 * v[1] + 2e-3 * ws[0][1]) if touching else 0.0
            torques(body, wheels, mode, unused, unused, (cmd,), unused, unused, cid)
            step(cid)
        return seconds / (time.perf_counter() - t0)


def trial_rtf(sc) -> float:
    from sim.run.trial import run_trial

    r = run_trial(sc)
    assert r.outcome == "balanced", r.outcome   # a fallen body would measure a different loop
    return r.ended_at_s / r.wall_s


def _driver() -> str:
    """bench_3d's valgrind driver, calling this file's (a) and (b)."""
    sys.path.insert(0, str(HERE))
    from bench_3d import DRIVER
    line = "from bench_3d import bare_rtf, cube, imu_cube, trial_rtf"
    if line not in DRIVER:
        raise SystemExit("bench_3d's DRIVER changed its import line: update bench_floor._driver")
    # this file has no IMU variant: the driver's "sensing" branch is never taken here
    return DRIVER.replace(line, "from bench_floor import bare_rtf, cube, trial_rtf")


def instructions(t1: float = 0.5, t2: float = 1.5) -> None:
    """Instructions per step of (a) and (b), counted over two durations so that set-up cancels out."""
    sys.path.insert(0, str(HERE))
    from instructions import count, counting_folder

    driver = _driver()
    with counting_folder() as (tmp, lib):
        per_step = {which: (count(which, t2, lib, tmp, driver=driver) - count(which, t1, lib, tmp, driver=driver))
                    / ((t2 - t1) * 1000.0) for which in ("bare", "trial")}
    a, b = per_step["bare"], per_step["trial"]
    print(f"(a) bare floor engine loop {a:10,.0f} instructions per step")
    print(f"(b) floor trial            {b:10,.0f} instructions per step   (a)/(b) = {a / b:.2f} (by instructions)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=10.0, help="simulated seconds per measurement")
    ap.add_argument("--repeat", type=int, default=5, help="interleaved rounds")
    ap.add_argument("--instructions", action="store_true", help="count instructions per step (valgrind)")
    args = ap.parse_args()
    if args.instructions:
        instructions()
        return
    sc = cube(args.seconds)
    trial_rtf(cube(0.2))        # imports and first-use costs out of the rounds
    bare, full = [], []
    for i in range(args.repeat):
        bare.append(bare_rtf(sc, args.seconds))
        full.append(trial_rtf(sc))
        print(f"round {i + 1}: (a) bare {bare[-1]:.1f}x  (b) trial {full[-1]:.1f}x  (b)/(a) {full[-1] / bare[-1]:.2f}",
              flush=True)
    print(f"(a) bare floor engine loop, best real-time factor: {max(bare):.1f}x")
    print(f"(b) floor trial (edge cube on a table, one wheel), best real-time factor: {max(full):.1f}x")
    print(f"(b)/(a), best of each: {max(full) / max(bare):.2f}  (target >= 0.5)")


if __name__ == "__main__":
    main()
