"""Instructions per simulated step, counted by valgrind: a speed figure the machine's load cannot move.

    python benchmarks/instructions.py [--seconds 1 3] [--set KEY=VALUE ...]

Wall time on a shared machine drifts by 20-30% within minutes, more than most changes to the
per-step loop are worth. Instruction counts are exact and repeatable (to ~0.01% here), so they
judge such changes: run this before and after. Figures: (a) the bare engine loop (the yardstick
of bench_speed.py) and (c) the full-fidelity trial, each counted over two durations so that
set-up cancels out: per step = (count(T2) - count(T1)) / (steps(T2) - steps(T1)). Counting is
switched on around the measured call only (callgrind's client requests, from a tiny C helper
compiled here), so imports and start-up are not counted. `--set` adds overrides to the trial (c)
(e.g. the power chain's keys, as bench_power.py sets them), to count what they cost per step.

Needs valgrind with its headers (valgrind/callgrind.h) and a C compiler. No assertion.
"""

from __future__ import annotations

import argparse
import contextlib
import re
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
HELPER_C = """#include <valgrind/callgrind.h>
void count_start(void) { CALLGRIND_ZERO_STATS; CALLGRIND_START_INSTRUMENTATION; }
void count_stop(void) { CALLGRIND_STOP_INSTRUMENTATION; CALLGRIND_DUMP_STATS; }
"""
DRIVER = """
import ctypes, sys
sys.path[:0] = [{root!r}, {bench!r}]
helper = ctypes.CDLL({lib!r})
from sim.model.device import Device
from sim.model.scenario_yaml import load_scenario
from sim.run.trial import run_trial
from yardsticks import bare_engine_rtf
sc = load_scenario(None, overrides=["strategy={{kind: lqr}}", "trial.pushes=[]", "trial.start.angle=3 deg",
                                    "trial.duration={seconds}"] + {extra!r})
if {which!r} == "trial":
    run_trial(sc)                      # warm: imports, the LQR design, the engine client and body
    helper.count_start(); run_trial(sc); helper.count_stop()
else:
    device = Device.from_scenario(sc)
    bare_engine_rtf(device, step_s=sc.world.step, seconds=0.01)
    helper.count_start(); bare_engine_rtf(device, step_s=sc.world.step, seconds={seconds}); helper.count_stop()
"""


def count(which: str, seconds: float, lib: Path, tmp: Path, extra: list[str] = (), *, driver: str = DRIVER) -> int:
    """Instructions counted while `driver` (a Python source template) runs its measured call."""
    driver = driver.format(root=str(HERE.parent), bench=str(HERE), lib=str(lib), seconds=seconds, which=which,
                           extra=list(extra))
    proc = subprocess.run(["valgrind", "--tool=callgrind", "--instr-atstart=no",
                           f"--callgrind-out-file={tmp}/out.%p", sys.executable, "-c", driver],
                          capture_output=True, text=True)
    found = re.findall(r"Collected : (\d+)", proc.stderr)
    if proc.returncode or not found:
        raise SystemExit(f"valgrind run failed:\n{proc.stderr[-2000:]}")
    return int(found[0])


def per_step(names, driver: str, *, t1: float = 0.5, t2: float = 1.5, step_s: float = 1e-3) -> dict[str, float]:
    """Instructions per physics step of each of `names` (the driver's `which`), counted over two
    trial durations (s) so that set-up cancels out."""
    with counting_folder() as (tmp, lib):
        return {which: (count(which, t2, lib, tmp, driver=driver) - count(which, t1, lib, tmp, driver=driver))
                / ((t2 - t1) / step_s) for which in names}


def seconds_option(doc: str) -> tuple[float, float, list[str]]:
    """The two trial durations, s, from --seconds T1 T2, and the --set overrides (the script's
    docstring as its help)."""
    ap = argparse.ArgumentParser(description=doc.split("\n\n")[0])
    ap.add_argument("--seconds", type=float, nargs=2, default=[1.0, 3.0], metavar=("T1", "T2"))
    ap.add_argument("--set", action="append", default=[], metavar="KEY=VALUE", help="an override of trial (c)")
    args = ap.parse_args()
    t1, t2 = args.seconds
    return t1, t2, args.set


@contextlib.contextmanager
def counting_folder():
    """A temporary folder with the shared library that switches callgrind's counting on and off
    compiled in it: (folder, library)."""
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        (tmp / "helper.c").write_text(HELPER_C)
        lib = tmp / "libhelper.so"
        subprocess.run(["cc", "-shared", "-fPIC", "-O2", "-o", str(lib), str(tmp / "helper.c")], check=True)
        yield tmp, lib


def main() -> None:
    t1, t2, overrides = seconds_option(__doc__)
    with counting_folder() as (tmp, lib):
        steps = (t2 - t1) * 1000.0   # the demo's 1 ms physics step
        per_step = {which: (count(which, t2, lib, tmp, overrides) - count(which, t1, lib, tmp, overrides)) / steps
                    for which in ("bare", "trial")}
    a, c = per_step["bare"], per_step["trial"]
    print(f"(a) bare engine loop       {a:10,.0f} instructions per step")
    print(f"(c) full-fidelity trial    {c:10,.0f} instructions per step   a/c = {a / c:.2f} "
          "(by instructions; bench_speed.py's c/a by time)")


if __name__ == "__main__":
    main()
