"""Sweeps and catch maps: 2 workers against 1, and memory over a long sweep.

    python benchmarks/bench_sweep.py [--points-speed 24] [--points-memory 10000] [--grid 9] [--rounds 3]

Speed: the same sweep (and catch map) run with workers=1 and workers=2 through the library
functions the CLI calls; the figure is the wall-time ratio (target >= 1.8x on 2 cores). Beside
it, a yardstick measured in the same rounds: the same tasks in one bare forked process, then in
two running half each, with no pool at all: what this machine gives two processes doing this work.
Memory: a sweep of --points-memory short trials on 2 workers; the resident memory of this
process and of its workers is sampled as points finish (target: flat, i.e. the last tenth no
higher than the first tenth plus a little). No assertion: figures are printed for the README.
The memory figures need psutil (`pip install psutil`; not a Wheelbench dependency).
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import threading
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

SPEED = ["strategy={kind: lqr}", "trial.pushes=[]", "trial.start.angle=3 deg", "trial.duration=10"]
MEMORY = ["strategy={kind: lqr}", "trial.pushes=[]", "trial.start.angle=3 deg", "trial.duration=0.05"]


def _raw(overrides):
    from sim.model.scenario_yaml import load_raw

    return load_raw(None, tuple(overrides))


def _sweep(overrides, vary: list[str], workers: int, out: Path, on_progress=None) -> float:
    from sim.core.outputs import prepare_out_dir
    from sim.studies.sweep import parse_vary, run_sweep

    raw, where = _raw(overrides)
    t0 = time.perf_counter()
    run_sweep(raw, where, [parse_vary(v) for v in vary], prepare_out_dir(out), workers=workers,
              on_progress=on_progress)
    return time.perf_counter() - t0


def _catch_map(workers: int, grid: int) -> float:
    from sim.studies.catchmap import catch_map

    raw, where = _raw(SPEED[:3])
    t0 = time.perf_counter()
    catch_map(raw, where, grid=grid, workers=workers)
    return time.perf_counter() - t0


def _captured(module, run) -> tuple:
    """(task function, payloads) that `run()` hands to `module.run_tasks`, captured without running them."""
    captured: list = []
    fns: list = []
    real = module.run_tasks

    def capture(fn, tasks, **kw):
        fns.append(fn)
        return ((i, captured.append(p) or {}) for i, p in tasks)

    module.run_tasks = capture
    try:
        run()
    finally:
        module.run_tasks = real
    return fns[0], captured


def _bare_processes(fn, payloads: list, n: int) -> float:
    """Yardstick: wall time for `n` forked processes to run 1/n of the tasks each, with no pool,
    no queues and no result traffic. One against two is what this machine gives two processes
    doing this work (what they slow each other by is the machine's, not ours)."""
    import os

    t0 = time.perf_counter()
    pids = []
    for part in range(n):
        pid = os.fork()
        if pid == 0:
            try:
                for p in payloads[part::n]:
                    fn(p)
            finally:
                os._exit(0)
        pids.append(pid)
    for pid in pids:
        os.waitpid(pid, 0)
    return time.perf_counter() - t0


def _compare(name: str, one_worker, two_workers, fn, payloads: list, rounds: int) -> None:
    """1 worker, 2 workers and the bare-process yardsticks, interleaved over `rounds` rounds
    (this machine is shared: interleaving spreads its load changes over all four); medians."""
    from statistics import median

    fn(payloads[0])  # warm this process as the workers are warmed: imports, first design
    one, two, bare1, bare2 = [], [], [], []
    for _ in range(rounds):
        one.append(one_worker())
        two.append(two_workers())
        bare1.append(_bare_processes(fn, payloads, 1))
        bare2.append(_bare_processes(fn, payloads, 2))
    m1, m2, b1, b2 = median(one), median(two), median(bare1), median(bare2)
    print(f"    {name}, median of {rounds} interleaved rounds: 1 worker {m1:.2f} s, "
          f"2 workers {m2:.2f} s: {m1 / m2:.2f}x (target >= 1.8x); best of each: "
          f"{min(one):.2f} s / {min(two):.2f} s: {min(one) / min(two):.2f}x")
    print(f"      yardstick, the same tasks in bare forked processes (no pool): 1 process {b1:.2f} s, "
          f"2 processes {b2:.2f} s: {b1 / b2:.2f}x is what this machine gives two processes for this work; "
          f"the pool reaches {(m1 / m2) / (b1 / b2):.0%} of it (best of each: {min(bare1) / min(bare2):.2f}x)")
    print("      rounds (1w / 2w / bare 1 / bare 2, s): "
          + ", ".join(f"{a:.2f}/{b:.2f}/{c:.2f}/{d:.2f}" for a, b, c, d in zip(one, two, bare1, bare2)))


def catch_map_report(grid: int, rounds: int) -> None:
    import sim.studies.catchmap as cm

    raw, where = _raw(SPEED[:3])
    fn, payloads = _captured(cm, lambda: cm.catch_map(raw, where, grid=grid, workers=1))
    _compare(f"catch map {grid}x{grid}", lambda: _catch_map(1, grid), lambda: _catch_map(2, grid), fn, payloads, rounds)


def sweep_speed_report(points: int, rounds: int, tmp: Path) -> None:
    import sim.studies.sweep as sw
    from sim.core.outputs import prepare_out_dir

    vary = [f"drive.supply=10..14:{points}"]
    raw, where = _raw(SPEED)
    fn, payloads = _captured(sw, lambda: sw.run_sweep(raw, where, [sw.parse_vary(v) for v in vary],
                                                       prepare_out_dir(tmp / "capture"), workers=1))
    runs = iter(range(10**6))
    _compare(f"sweep of {points} points x 10 s", lambda: _sweep(SPEED, vary, 1, tmp / f"s{next(runs)}"),
             lambda: _sweep(SPEED, vary, 2, tmp / f"s{next(runs)}"), fn, payloads, rounds)


def rss_mb() -> float:
    """Resident memory of this process and its children, MB."""
    import psutil

    me = psutil.Process()
    total = me.memory_info().rss
    for child in me.children(recursive=True):
        try:
            total += child.memory_info().rss
        except psutil.Error:
            pass
    return total / 2**20


def sweep_report(*, points_speed: int = 24, points_memory: int = 10_000, grid: int = 9, rounds: int = 3) -> None:
    """Print the speed figures, then (unless points_memory is 0) the memory figures."""
    with tempfile.TemporaryDirectory() as tmp:
        if points_speed:
            print("(e) 2 workers against 1")
            sweep_speed_report(points_speed, rounds, Path(tmp))
            catch_map_report(grid, rounds)
        if points_memory:
            side = int(round(points_memory ** 0.5))
            vary = [f"drive.supply=10..14:{side}", f"motor.resistance=1.5..2.5:{side}"]
            samples: list[tuple[int, float]] = []
            lock = threading.Lock()

            def progress(done, total):
                if done % max(1, total // 20) == 0:
                    with lock:
                        samples.append((done, rss_mb()))

            wall = _sweep(MEMORY, vary, 2, Path(tmp) / "mem", on_progress=progress)
            first = [m for d, m in samples if 0 < d <= side * side // 10] or [samples[0][1]]
            last = [m for d, m in samples if d >= side * side * 9 // 10]
            print(f"    memory over a {side * side}-point sweep on 2 workers ({wall:.0f} s): "
                  f"first tenth {max(first):.0f} MB, last tenth {max(last):.0f} MB, "
                  f"peak {max(m for _, m in samples):.0f} MB (this process + workers)")
            print("    samples (points done, MB): " + ", ".join(f"{d}:{m:.0f}" for d, m in samples))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--points-speed", type=int, default=24)
    ap.add_argument("--points-memory", type=int, default=10_000)
    ap.add_argument("--grid", type=int, default=9)
    ap.add_argument("--rounds", type=int, default=3, help="interleaved rounds of the 2-worker figures")
    args = ap.parse_args()
    sweep_report(points_speed=args.points_speed, points_memory=args.points_memory, grid=args.grid,
                 rounds=args.rounds)


if __name__ == "__main__":
    main()
