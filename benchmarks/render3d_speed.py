"""How long a 3D device's clip takes to render, against a planar clip of the same length rendered in
the same rounds (the yardstick), and against the clip's own duration; one core.

Runs the corner-cube demo (three wheels, ball mount) and the bundled desk pendulum once each (not
timed), cut to the same duration, pins this process to one core (the ffmpeg encoder inherits the
pin), then writes both clips at the same size and rate in interleaved rounds into a temporary
folder. Prints each round's wall and CPU times (this process plus the encoder), the 3D/planar
ratio, and each clip's CPU time against its duration (at or below 1: rendering keeps up with
playback). Read the CPU figures on a busy machine. Usage:

    python benchmarks/render3d_speed.py [--seconds 5] [--size 960x540] [--fps 30] [--rounds 3] [--core 0]
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _cpu_s() -> float:
    own = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime


def _timed(write) -> tuple[float, float, object]:
    cpu0, wall0 = _cpu_s(), time.perf_counter()
    info = write()
    return time.perf_counter() - wall0, _cpu_s() - cpu0, info


def main(argv=None) -> int:
    from sim.media.video import parse_size, write_clip
    from sim.model.scenario_yaml import load_scenario
    from sim.run.trial import run_trial

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=5.0)
    ap.add_argument("--size", default="960x540")
    ap.add_argument("--fps", type=int, default=30)
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--core", type=int, default=0)
    args = ap.parse_args(argv)
    size = parse_size(args.size)
    cut = (f"trial.duration={args.seconds}", "trial.pushes=[]")
    cube = run_trial(load_scenario(ROOT / "scenarios" / "cube_corner.yaml", overrides=cut))
    planar = run_trial(load_scenario(None, overrides=cut))
    os.sched_setaffinity(0, {args.core})
    print(f"3D     : {cube.scenario.name} ({cube.outcome}), {cube.device.n_wheels} wheels")
    print(f"planar : {planar.scenario.name} ({planar.outcome})")
    print(f"clips  : {args.seconds:g} s at {args.fps} fps, {size[0]}x{size[1]} mp4, one core "
          f"(load average before: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores)")
    ratios, cpu3d, cpu2d = [], [], []
    with tempfile.TemporaryDirectory() as tmp:
        for k in range(args.rounds):
            w3, c3, info = _timed(lambda: write_clip(cube, Path(tmp) / f"c{k}.mp4", fps=args.fps, size=size,
                                                     progress=False))
            w2, c2, _ = _timed(lambda: write_clip(planar, Path(tmp) / f"p{k}.mp4", fps=args.fps, size=size,
                                                  progress=False))
            ratios.append(c3 / c2)
            cpu3d.append(c3)
            cpu2d.append(c2)
            print(f"round {k + 1}: 3D {w3:.2f} s wall {c3:.2f} s CPU | planar {w2:.2f} s wall {c2:.2f} s CPU | "
                  f"3D/planar CPU {c3 / c2:.2f}")
    d = info.duration_s
    print(f"median 3D/planar CPU ratio : {statistics.median(ratios):.2f}")
    print(f"3D clip CPU / clip length  : {statistics.median(cpu3d) / d:.2f} "
          f"({1000 * statistics.median(cpu3d) / info.frames:.1f} ms a frame)")
    print(f"planar CPU / clip length   : {statistics.median(cpu2d) / d:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
