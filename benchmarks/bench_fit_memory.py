"""Memory of `wheelbench fit` on long, fast bench logs: peak resident memory against the log's size.

    python benchmarks/bench_fit_memory.py [--minutes 1 10] [--rate-hz 10000] [--tests free-swing coast-down]

Each log is invented here: a free swing (a damped swing of 0.3 rad about hanging, period 1 s,
damping ratio 0.002, noise 1e-4 rad) or a coast-down (a wheel from 300 rad/s, decay rate
2/duration 1/s, deceleration 30 rad/s / duration, noise 0.05 rad/s), two columns, written to a temporary CSV a
block at a time. `wheelbench fit` runs on it as a subprocess, as a user runs it; its peak
resident memory is its ru_maxrss (getrusage, in a fresh wrapper process), which includes Python, numpy, scipy and
matplotlib (the yardstick printed first is `wheelbench fit --help`'s own peak: start-up alone).
The log's arrays are rows x 2 x 8 bytes. For comparison, the feature search before it was
bounded allocated samples x (0.6 x samples per swing) x 8 bytes (a window per sample).
No assertion: figures are printed. Linux or macOS (ru_maxrss units differ: KiB on Linux).
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

BLOCK = 200_000


def write_log(path: Path, test: str, seconds: float, rate_hz: float) -> int:
    """Write an invented log of `seconds` at `rate_hz`; returns its rows."""
    rng = np.random.default_rng(7)
    n = int(seconds * rate_hz)
    with open(path, "w", encoding="utf-8") as fh:
        fh.write("t_s,angle_rad\n" if test == "free-swing" else "t_s,wheel_speed_rad_s\n")
        for start in range(0, n, BLOCK):
            t = np.arange(start, min(n, start + BLOCK)) / rate_hz
            if test == "free-swing":
                w0, zeta = 2.0 * np.pi, 0.002
                y = np.pi + 0.3 * np.exp(-zeta * w0 * t) * np.cos(w0 * np.sqrt(1 - zeta**2) * t)
                y += rng.normal(0.0, 1e-4, t.size)
            else:
                # w = w0 e^(-a t) - c (1 - e^(-a t)) / a, until it stops: most of the way down by the end
                w0 = 300.0
                a, c = 2.0 / seconds, 0.1 * w0 / seconds
                y = np.maximum(w0 * np.exp(-a * t) - c * (1 - np.exp(-a * t)) / a, 0.0)
                y += rng.normal(0.0, 0.05, t.size)
            np.savetxt(fh, np.column_stack([t, y]), fmt=("%.6f", "%.7g"), delimiter=",")
    return n


_WRAP = ("import resource, subprocess, sys; code = subprocess.run(sys.argv[1:], stdout=subprocess.DEVNULL).returncode; "
         "print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss, code)")


def peak_mb(argv: list[str]) -> tuple[float, float, int]:
    """(peak resident MB of the command, wall s, exit code). A fresh wrapper process runs it, so
    getrusage(RUSAGE_CHILDREN) sees this command alone."""
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-c", _WRAP, *argv], capture_output=True, text=True)
    wall = time.perf_counter() - t0
    if proc.stderr.strip():
        print(proc.stderr.strip()[-400:])
    peak, code = proc.stdout.split()[-2:]
    return int(peak) / (1024 if sys.platform.startswith("linux") else 1024 * 1024), wall, int(code)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, nargs="+", default=[1.0, 10.0])
    ap.add_argument("--rate-hz", type=float, default=10_000.0)
    ap.add_argument("--tests", nargs="+", default=["free-swing", "coast-down"])
    args = ap.parse_args()
    base, _, _ = peak_mb([sys.executable, "-m", "sim.cli", "fit", "--help"])
    print(f"yardstick: start-up alone (fit --help) peaks at {base:.0f} MB")
    with tempfile.TemporaryDirectory() as tmp:
        for test in args.tests:
            for minutes in args.minutes:
                log = Path(tmp) / f"{test}_{minutes:g}min.csv"
                rows = write_log(log, test, 60.0 * minutes, args.rate_hz)
                argv = [sys.executable, "-m", "sim.cli", "fit", str(log), "--test", test, "--out",
                        str(Path(tmp) / f"out_{test}_{minutes:g}"), "--force"]
                peak, wall, code = peak_mb(argv)
                arrays = rows * 2 * 8 / 2**20
                window = rows * 0.6 * args.rate_hz * 8 / 2**30 if test == "free-swing" else 0.0
                print(f"{test}: {minutes:g} min at {args.rate_hz:g} Hz = {rows:,} rows, "
                      f"{log.stat().st_size / 2**20:.0f} MB file, arrays {arrays:.0f} MB; "
                      f"peak resident {peak:.0f} MB, "
                      f"{wall:.0f} s, exit {code}"
                      + (f"; a window per sample would have taken {window:,.0f} GiB" if window else ""))
                log.unlink()


if __name__ == "__main__":
    main()
