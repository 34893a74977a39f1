"""Speed of Wheelbench against yardsticks measured in the same run, printed as ratios.

    python benchmarks/bench_speed.py [--seconds 20] [--repeat 3] [--skip-sweep] [--sweep-points 10000]

(a) bare engine loop (pybullet only) -> real-time factor (RTF)
(b) hand-written alternative: solve_ivp between 500 Hz LQR updates -> RTF
(c) full-fidelity trial (1 kHz physics, motor with friction, noisy delayed sensors, LQR at
    500 Hz, trace recorded) -> RTF, and its ratio to (a) (target >= 0.5) and to (b) (target >= 4)
(d) `wheelbench run` of a 60 s trial as a subprocess (start-up, simulation, files) -> wall time
    against the time of its simulation loop (target: within 4x)
(e) sweeps: 2 workers against 1 (target >= 1.8x), and peak memory over a long sweep (flat)
Start-up: `wheelbench --help` and `validate` wall times, and whether pint/matplotlib were imported.

Each figure is the best of --repeat runs (the least disturbed by other load on the machine);
(a), (b) and (c) are measured in interleaved rounds, and the ratios of each round are printed too.
No assertion: this prints figures; the README records them with the machine.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))

from yardsticks import bare_engine_rtf, solve_ivp_rtf  # noqa: E402

FULL_FIDELITY = ["strategy={kind: lqr}", "trial.pushes=[]", "trial.start.angle=3 deg"]
WHEELBENCH = [sys.executable, "-m", "sim.cli"]


def machine() -> str:
    model = "unknown CPU"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    return f"{os.cpu_count()} cores (nproc), {model}, Python {platform.python_version()}, {platform.system()}"


def full_fidelity_scenario(seconds: float):
    """The bundled demo (motor with friction, encoders, gyro, 2 ms delay) with LQR at 500 Hz."""
    from sim.model.scenario_yaml import load_scenario

    sc = load_scenario(None, overrides=FULL_FIDELITY + [f"trial.duration={seconds}"])
    assert sc.sensors.rate == 500 and sc.world.step == 1e-3 and sc.sensors.delay > 0
    assert sc.motor.current_limit and sc.wheel.bearing_friction.coulomb > 0
    return sc


def trial_rtf(sc) -> float:
    from sim.run.trial import run_trial

    r = run_trial(sc)
    assert r.outcome == "balanced", r.outcome  # a fallen body would measure a different loop
    return r.ended_at_s / r.wall_s


def end_to_end(seconds: float, repeat: int) -> tuple[float, float]:
    """(best wall time of `wheelbench run` as a subprocess, its simulation loop's wall time), s."""
    walls, loops = [], []
    with tempfile.TemporaryDirectory() as tmp:
        for i in range(repeat):
            out = Path(tmp) / f"r{i}"
            argv = WHEELBENCH + ["run", "--out", str(out), "--set", f"trial.duration={seconds}"]
            for s in FULL_FIDELITY:
                argv += ["--set", s]
            t0 = time.perf_counter()
            subprocess.run(argv, check=True, capture_output=True)
            walls.append(time.perf_counter() - t0)
            m = json.loads((out / "metrics.json").read_text())
            loops.append(m["simulated_s"] / m["real_time_factor"])
    i = min(range(repeat), key=walls.__getitem__)
    return walls[i], loops[i]


def start_up(repeat: int) -> dict:
    scenario = str(HERE.parent / "sim" / "data" / "desk_pendulum.yaml")
    probe = ("import sys, time; t=time.perf_counter(); from sim.cli import main; "
             "rc = main(sys.argv[1:]); print('\\n@@', time.perf_counter()-t, "
             "'pint' in sys.modules, 'matplotlib' in sys.modules, 'pybullet' in sys.modules, file=sys.stderr)")
    out = {}
    for name, argv in (("--help", ["--help"]), ("validate", ["validate", scenario])):
        walls = []
        for _ in range(repeat):
            t0 = time.perf_counter()
            p = subprocess.run([sys.executable, "-c", probe, *argv], capture_output=True, text=True)
            walls.append(time.perf_counter() - t0)
        flags = p.stderr.strip().splitlines()[-1].split()[2:]
        out[name] = (min(walls), dict(zip(("pint", "matplotlib", "pybullet"), flags)))
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--seconds", type=float, default=20.0, help="simulated seconds per loop measurement")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--skip-sweep", action="store_true")
    ap.add_argument("--sweep-points", type=int, default=10_000)
    args = ap.parse_args()
    from sim.model.device import Device

    print(f"machine: {machine()}")
    sc = full_fidelity_scenario(args.seconds)
    device = Device.from_scenario(sc)
    # interleaved rounds: a change in the machine's other load hits all three figures of a round
    rounds = [(bare_engine_rtf(device, step_s=sc.world.step, seconds=args.seconds),
               solve_ivp_rtf(device, seconds=min(args.seconds, 5.0))[0],
               trial_rtf(sc)) for _ in range(args.repeat)]
    a, b, c = (max(r[i] for r in rounds) for i in range(3))
    print(f"(a) bare engine loop           RTF {a:8.1f}")
    print(f"(b) solve_ivp + LQR, 500 Hz    RTF {b:8.1f}")
    print(f"(c) full-fidelity trial        RTF {c:8.1f}   c/a = {c / a:.2f} (target >= 0.5)   "
          f"c/b = {c / b:.1f} (target >= 4)   (best of each over {args.repeat} interleaved rounds)")
    print("    per round c/a, c/b: " + ", ".join(f"{rc / ra:.2f}, {rc / rb:.1f}" for ra, rb, rc in rounds))
    wall, loop = end_to_end(60.0, args.repeat)
    print(f"(d) wheelbench run, 60 s trial  wall {wall:.2f} s, of which the simulation loop {loop:.2f} s: "
          f"{wall / loop:.1f}x (target <= 4x); {60.0 / wall:.1f}x faster than real time end to end")
    for name, (t, flags) in start_up(args.repeat).items():
        print(f"    start-up `wheelbench {name}` {t:.2f} s; imported: {flags}")
    if not args.skip_sweep:
        from bench_sweep import sweep_report
        sweep_report(points_speed=24, points_memory=args.sweep_points)


if __name__ == "__main__":
    main()
