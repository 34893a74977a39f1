"""Instructions per simulated step of the firmware example against its Python `lqr` twin (valgrind).

    python benchmarks/instructions_firmware.py [--seconds 1 3]

The wall-time ratio of bench_firmware.py moves by 10-30% with the machine's load; instruction
counts do not, so they judge changes to the firmware bridge and to the isolation child's per-tick
work. Four trials of scenarios/firmware/desk_firmware.yaml (its push left out): the Python `lqr`
law in this process (the yardstick), the firmware in this process, the firmware in its isolation
child (as `run_trial` runs it), and the `lqr` law forced into the child. Each is counted over two
durations, so that set-up cancels: per step = (count(T2) - count(T1)) / (steps(T2) - steps(T1));
"fixed" is what is left of the shorter trial's count. Every process's count is added up (the
child's too; callgrind follows the fork), except that an isolated trial's per-step figure is the
child's alone: the parent's watchdog wakes every 0.1 s of wall time, and under valgrind a trial
takes some fifty times longer, so its polls would count as if they were per step (they stay in
an isolated trial's "fixed" figure, which is therefore larger than it is outside valgrind). The kernel's share (the fork, copied pages) is not an
instruction count and shows only in bench_firmware.py. Needs valgrind with its headers and a C
compiler. No assertion.
"""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from instructions import counting_folder, seconds_option  # noqa: E402

DRIVER = """
import ctypes, sys
sys.path[:0] = [{root!r}]
helper = ctypes.CDLL({lib!r})
from sim.model.scenario_yaml import load_scenario
from sim.run.trial import run_trial
overrides = ["trial.pushes=[]", "trial.duration={seconds}"]
if {which!r}.startswith("lqr"):
    overrides.append("strategy={{kind: lqr, release_angle: 30 deg}}")
sc = load_scenario({example!r}, overrides=overrides)
isolate = {which!r}.endswith("isolated")
run_trial(sc, isolate=isolate)          # warm: imports, builds, the engine client and body
helper.count_start(); result = run_trial(sc, isolate=isolate); helper.count_stop()
assert result.outcome == "balanced", result.outcome
"""
CASES = {"lqr": "lqr, in process", "firmware": "firmware, in process", "firmware isolated": "firmware, isolated",
         "lqr isolated": "lqr, isolated"}


def count(which: str, seconds: float, lib: Path, tmp: Path) -> tuple[int, int]:
    """(instructions of every process, instructions of the processes forked from the first)."""
    driver = DRIVER.format(root=str(HERE.parent), lib=str(lib), seconds=seconds, which=which,
                           example=str(HERE.parent / "scenarios" / "firmware" / "desk_firmware.yaml"))
    proc = subprocess.run(["valgrind", "--tool=callgrind", "--instr-atstart=no",
                           f"--callgrind-out-file={tmp}/out.%p", sys.executable, "-c", driver],
                          capture_output=True, text=True)
    found = [(int(pid), int(n)) for pid, n in re.findall(r"==(\d+)== Collected : (\d+)", proc.stderr)]
    first = re.search(r"==(\d+)==", proc.stderr)
    if proc.returncode or not found or first is None:
        raise SystemExit(f"valgrind run failed:\n{proc.stderr[-2000:]}")
    return sum(n for _, n in found), sum(n for pid, n in found if pid != int(first.group(1)))


def main() -> None:
    t1, t2, _ = seconds_option(__doc__)
    with counting_folder() as (tmp, lib):
        steps = (t2 - t1) * 1000.0   # the example's 1 ms physics step
        yardstick = None
        for which, label in CASES.items():
            (c1, child1), (c2, child2) = count(which, t1, lib, tmp), count(which, t2, lib, tmp)
            per_step = ((child2 - child1) if which.endswith("isolated") else (c2 - c1)) / steps
            yardstick = yardstick or per_step
            print(f"{label:22s} {per_step:10,.0f} instructions per step ({yardstick / per_step:.3f} of lqr's rate)"
                  f"   fixed {c1 - per_step * t1 * 1000.0:14,.0f}", flush=True)


if __name__ == "__main__":
    main()
