"""`check` of the bundled default scenario: wall time now against an earlier version, same machine.

    python benchmarks/bench_check.py [--baseline REF] [--rounds 3] [--trials 20]

The earlier version (a git ref, default the commit before the verdict work: 1ff1309) is checked
out into a temporary git worktree; each round runs `python -m sim.cli check --out TMP --trials N`
once from that tree and once from this one (the order swapped every round), each in a fresh
process with this environment's packages. Printed: each round's times and ratio (now / then;
target < 3), and the median. No assertion.
"""

from __future__ import annotations

import argparse
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent


def timed_check(tree: Path, out: Path, trials: int) -> float:
    t0 = time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "sim.cli", "check", "--out", str(out), "--trials", str(trials),
                           "--force"], cwd=tree, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    if done.returncode not in (0, 1):
        raise SystemExit(f"check failed in {tree}: {done.stderr.strip().splitlines()[-1:]}")
    return wall


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--baseline", default="1ff1309")
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--trials", type=int, default=20)
    args = ap.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="bench_check_"))
    old = tmp / "baseline"
    subprocess.run(["git", "worktree", "add", "--detach", str(old), args.baseline], cwd=ROOT, check=True,
                   capture_output=True)
    ratios = []
    try:
        for r in range(args.rounds):
            order = [("then", old), ("now", ROOT)] if r % 2 == 0 else [("now", ROOT), ("then", old)]
            times = {name: timed_check(tree, tmp / f"out_{name}", args.trials) for name, tree in order}
            ratios.append(times["now"] / times["then"])
            print(f"round {r + 1}: then {times['then']:.1f} s, now {times['now']:.1f} s, ratio {ratios[-1]:.2f}",
                  flush=True)
    finally:
        subprocess.run(["git", "worktree", "remove", "--force", str(old)], cwd=ROOT, capture_output=True)
        shutil.rmtree(tmp, ignore_errors=True)
    print(f"check of the bundled default, now / {args.baseline}: median {statistics.median(ratios):.2f} "
          f"(target < 3), {args.trials} Monte Carlo trials")


if __name__ == "__main__":
    main()
