"""Memory of one long trial: `wheelbench run` sampled while it runs, for a short and a long trial.

    python benchmarks/bench_memory.py [--steps 300000 3000000]

Each run is the bundled demo balancing with LQR (no pushes) for the given number of 1 ms physics
steps, run as a user runs it (subprocess, trace.csv, metrics.json and the summary plot written).
The sampler reads /proc/<pid>/status (and its children's) every 50 ms: RssAnon (anonymous memory: heap and arrays,
which only swap can take back) and RssFile (mapped files, which the kernel can write out and drop
under memory pressure; long traces live there, see sim/run/trace.py). The yardstick is the trace's
own size, 90 bytes a row. Linux only. No assertion: figures are printed for the README.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROW_BYTES = 11 * 8 + 2   # sim.run.trace.Trace: eleven float64 columns and an int16 phase code


def _status_mb(pid: int) -> dict[str, float]:
    """RssAnon, RssFile and VmRSS of `pid` and its children (the summary plot is drawn in a forked
    child), MB. Pages a child shares with its parent count twice: an upper bound."""
    out: dict[str, float] = {}
    for p in [pid, *_children(pid)]:
        try:
            for line in Path(f"/proc/{p}/status").read_text().splitlines():
                key, _, value = line.partition(":")
                if key in ("RssAnon", "RssFile", "VmRSS"):
                    out[key] = out.get(key, 0.0) + int(value.split()[0]) / 1024
        except (OSError, ValueError):
            pass
    return out


def _children(pid: int) -> list[int]:
    try:
        return [int(c) for c in Path(f"/proc/{pid}/task/{pid}/children").read_text().split()]
    except (OSError, ValueError):
        return []


def run_and_sample(steps: int, out: Path) -> dict:
    argv = [sys.executable, "-m", "sim.cli", "run", "--out", str(out), "--set", "strategy={kind: lqr}",
            "--set", "trial.pushes=[]", "--set", "trial.start.angle=3 deg", "--set", f"trial.duration={steps / 1000}"]
    peak: dict[str, float] = {}
    t0 = time.perf_counter()
    proc = subprocess.Popen(argv, cwd=HERE.parent, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    while proc.poll() is None:
        for key, mb in _status_mb(proc.pid).items():
            peak[key] = max(peak.get(key, 0.0), mb)
        time.sleep(0.05)
    if proc.returncode:
        raise SystemExit(f"wheelbench run failed: {proc.stderr.read().decode()[-500:]}")
    return {"wall_s": time.perf_counter() - t0, **peak}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--steps", type=int, nargs="+", default=[300_000, 3_000_000])
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        for steps in args.steps:
            r = run_and_sample(steps, Path(tmp) / f"run{steps}")
            trace_mb = steps * ROW_BYTES / 2**20
            print(f"{steps:>9,} steps ({steps / 1000:,.0f} s simulated, {r['wall_s']:.0f} s wall): trace {trace_mb:.0f} MB; "
                  f"peak RssAnon {r.get('RssAnon', float('nan')):.0f} MB, RssFile {r.get('RssFile', float('nan')):.0f} MB, "
                  f"VmRSS {r.get('VmRSS', float('nan')):.0f} MB")


if __name__ == "__main__":
    main()
