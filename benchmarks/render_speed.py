"""How long a clip takes to render, against the clip's own duration, on one core.

Runs the bundled default scenario once (not timed), pins this process to one core (the ffmpeg
encoder it starts inherits the pin), writes the clip at the default size and rate into a
temporary folder, and prints the wall time, the CPU time (this process plus the encoder) and
their ratios to the clip's duration. A ratio at or below 1 means rendering keeps up with playback.

The wall time counts whatever else runs on that core; the CPU time does not, so on a busy
machine read the CPU ratio. Usage:

    python benchmarks/render_speed.py [--size 960x540] [--fps 30] [--scale S] [--format mp4] [--core 0]
"""

from __future__ import annotations

import argparse
import os
import resource
import sys
import tempfile
import time
from pathlib import Path


def _cpu_s() -> float:
    own = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime


def main(argv=None) -> int:
    from sim.model.scenario_yaml import load_scenario
    from sim.run.trial import run_trial
    from sim.media.video import DEFAULT_FPS, parse_size, render_scale_for, write_clip

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", default="960x540")
    ap.add_argument("--fps", type=int, default=DEFAULT_FPS)
    ap.add_argument("--scale", type=float, default=None, help="renderer's share of the frame size (default: automatic)")
    ap.add_argument("--format", choices=("mp4", "gif"), default="mp4")
    ap.add_argument("--core", type=int, default=0)
    args = ap.parse_args(argv)
    size = parse_size(args.size)
    scale = render_scale_for(*size) if args.scale is None else args.scale
    result = run_trial(load_scenario(None))
    os.sched_setaffinity(0, {args.core})
    load1 = os.getloadavg()[0]
    with tempfile.TemporaryDirectory() as tmp:
        cpu0, wall0 = _cpu_s(), time.perf_counter()
        info = write_clip(result, Path(tmp) / f"bench.{args.format}", fps=args.fps, size=size, progress=False,
                          render_scale=scale)
        wall, cpu = time.perf_counter() - wall0, _cpu_s() - cpu0
    print(f"scenario        : {result.scenario.name} ({result.outcome})")
    print(f"clip            : {info.frames} frames, {info.duration_s:.2f} s at {info.fps} fps, "
          f"{size[0]}x{size[1]} {args.format}, renderer at {scale:.2f} of the size")
    print(f"core            : {args.core} (load average before: {load1:.2f} on {os.cpu_count()} cores)")
    print(f"rendering wall  : {wall:.2f} s   ratio to clip {wall / info.duration_s:.2f}")
    print(f"rendering CPU   : {cpu:.2f} s   ratio to clip {cpu / info.duration_s:.2f}")
    print(f"per frame       : {1000 * wall / info.frames:.1f} ms wall, {1000 * cpu / info.frames:.1f} ms CPU, "
          f"budget {1000 / info.fps:.1f} ms")
    return 0


if __name__ == "__main__":
    sys.exit(main())
