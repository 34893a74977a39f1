"""Speed of a trial with an IMU, a Kalman estimator and loop jitter against the same trial with
today's ideal sensors.

    python benchmarks/bench_sensing.py [--seconds 20] [--rounds 5]

The IMU demo (scenarios/imu_pendulum.yaml, its duration set by --seconds, the law switched to
`lqr`) runs twice per round, in alternating order (swapped every round) so that other load on the
machine hits both:
- sensing: its IMU (noise, bias drift, range, resolution, the mount point's kinematics) read at
  1 kHz, a Kalman tilt-and-gyro-bias filter making the law's angle and rate, and
  `timing: {compute_time: 1 ms, jitter: 0.8 ms}`;
- ideal: the same device and law with the IMU, estimator and timing removed and a noiseless
  pivot encoder in their place (`sensors.angle: {}`), as every scenario had before.
Printed: each round's loop real-time factors (`TrialResult.wall_s`: the loop alone) and their ratio
(sensing / ideal; target >= 0.7), and the ratio of the best of each. Each trial runs once
uncounted first. With `--instructions` (needs valgrind and a C compiler, as instructions.py): the
instructions per simulated step of each trial instead, counted by callgrind over 1 s and 3 s
trials so that set-up cancels out; their ratio (ideal / sensing) is the speed ratio the machine's
load cannot move. No assertion.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from sim.model.scenario_yaml import load_scenario  # noqa: E402
from sim.run.trial import run_trial  # noqa: E402

EXAMPLE = HERE.parent / "scenarios" / "imu_pendulum.yaml"
KALMAN = ("sensors.estimator={kind: kalman, measurement_noise: 3 deg, "
          "process_noise: {rate: 0.01 deg/s/Hz^0.5, bias: 0.002 deg/s/s^0.5}}")


def scenarios(seconds: float, *extra: str) -> dict:
    common = [f"trial.duration={seconds} s", "strategy={kind: lqr}", *extra]
    sensing = load_scenario(EXAMPLE, overrides=common + [KALMAN, "timing={compute_time: 1 ms, jitter: 0.8 ms}"])
    ideal = load_scenario(EXAMPLE, overrides=common + ["sensors.angle={}"])
    ideal = ideal.model_copy(update={"sensors": ideal.sensors.model_copy(update={"imu": None, "estimator": None})})
    return {"sensing": sensing, "ideal": ideal}


def loop_rtf(scenario) -> tuple[float, str]:
    result = run_trial(scenario)
    return result.ended_at_s / result.wall_s, result.outcome


DRIVER = """
import ctypes, sys
sys.path[:0] = [{root!r}, {bench!r}]
helper = ctypes.CDLL({lib!r})
from bench_sensing import scenarios
from sim.run.trial import run_trial
sc = scenarios({seconds}, "trial.pushes=[]")[{which!r}]
run_trial(sc)
helper.count_start(); run_trial(sc); helper.count_stop()
"""


def instructions_per_step() -> None:
    """Callgrind's instruction counts per simulated step of both trials (see the docstring)."""
    import subprocess
    import tempfile

    from instructions import HELPER_C, count
    import instructions
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        (tmp / "helper.c").write_text(HELPER_C)
        lib = tmp / "libhelper.so"
        subprocess.run(["cc", "-shared", "-fPIC", "-O2", "-o", str(lib), str(tmp / "helper.c")], check=True)
        instructions.DRIVER = DRIVER            # the counting run of instructions.py, with our driver
        per_step = {which: (count(which, 3.0, lib, tmp) - count(which, 1.0, lib, tmp)) / 2000.0
                    for which in ("ideal", "sensing")}
    print(f"ideal   {per_step['ideal']:10,.0f} instructions per step")
    print(f"sensing {per_step['sensing']:10,.0f} instructions per step   "
          f"ideal/sensing = {per_step['ideal'] / per_step['sensing']:.2f} (target >= 0.7)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=20.0, help="simulated seconds per trial")
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--instructions", action="store_true", help="count instructions per step (valgrind)")
    args = ap.parse_args()
    if args.instructions:
        instructions_per_step()
        return
    runs = scenarios(args.seconds)
    for sc in runs.values():     # warm-up, not counted
        loop_rtf(sc)
    best = {name: 0.0 for name in runs}
    print(f"{args.seconds:g} s trials of {EXAMPLE.name} (lqr); loop real-time factors (simulated s / wall s)")
    print(f"{'round':>5} {'sensing':>9} {'ideal':>9} {'ratio':>6}")
    for r in range(args.rounds):
        order = list(runs) if r % 2 == 0 else list(runs)[::-1]
        rtf = {}
        for name in order:
            rtf[name], outcome = loop_rtf(runs[name])
            best[name] = max(best[name], rtf[name])
            if outcome != "balanced":
                print(f"  note: the {name} trial ended {outcome}")
        print(f"{r + 1:>5} {rtf['sensing']:>8.1f}x {rtf['ideal']:>8.1f}x {rtf['sensing'] / rtf['ideal']:>6.2f}", flush=True)
    print(f"best of each: sensing {best['sensing']:.1f}x, ideal {best['ideal']:.1f}x, "
          f"ratio {best['sensing'] / best['ideal']:.2f} (target >= 0.7)")


if __name__ == "__main__":
    main()
