"""Speed of a 3D trial through the shared power chain against the same trial on the ideal source.

    python benchmarks/bench_power3d.py [--seconds 5] [--repeat 3] [--instructions]

scenarios/cube_pack.yaml (the corner cube with three wheels on one 3S pack: battery with sag and bus
capacitance, three 8-bit PWM bridges with dead time and dead band, over-current trips), pushes left
out, runs two ways in interleaved rounds:
- ideal: the same device on a bench supply at the pack's starting voltage with no other power key
  (each wheel's MotorDrive alone, the 3D runner's ideal path);
- pack: through the chain (one bus, a bridge per wheel).
Printed: each round's real-time factors and pack/ideal, then the best of each. `--instructions`
counts instructions per step of both with valgrind instead (benchmarks/instructions.py), which the
machine's load cannot move. No assertion: this prints figures.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

SCENARIO = HERE.parent / "scenarios" / "cube_pack.yaml"


def cube(seconds: float, which: str):
    from sim.model.scenario_yaml import load_raw
    from sim.model.scenario import validate_scenario

    raw, _ = load_raw(SCENARIO)
    raw["trial"].update(pushes=[], duration=seconds)
    if which == "ideal":
        supply = validate_scenario(load_raw(SCENARIO)[0], where=str(SCENARIO)).drive.supply
        raw.pop("battery")
        raw["drive"] = {"supply": supply}
    sc = validate_scenario(raw, where=str(SCENARIO))
    assert sc.power_model == (which == "pack")
    return sc


def trial_rtf(sc) -> float:
    from sim.run.trial import run_trial

    r = run_trial(sc)
    assert r.outcome == "balanced", r.outcome
    return r.ended_at_s / r.wall_s


DRIVER = """
import ctypes, sys
sys.path[:0] = [{root!r}, {bench!r}]
helper = ctypes.CDLL({lib!r})
from bench_power3d import cube, trial_rtf
sc = cube({seconds}, {which!r})
trial_rtf(cube(0.2, {which!r}))
helper.count_start(); trial_rtf(sc); helper.count_stop()
"""


def instructions() -> None:
    """Instructions per step of both (`instructions.per_step`)."""
    sys.path.insert(0, str(HERE))
    from instructions import per_step

    counts = per_step(("ideal", "pack"), DRIVER)
    a, b = counts["ideal"], counts["pack"]
    print(f"ideal source             {a:10,.0f} instructions per step")
    print(f"shared pack, 3 bridges   {b:10,.0f} instructions per step   ideal/pack = {a / b:.2f} (by instructions)")


def wall_time_rounds(seconds: float, repeat: int) -> None:
    scs = {which: cube(seconds, which) for which in ("ideal", "pack")}
    for which in scs:
        trial_rtf(cube(0.2, which))     # imports and first-use costs out of the rounds
    best = {"ideal": 0.0, "pack": 0.0}
    for i in range(repeat):
        order = ("ideal", "pack") if i % 2 == 0 else ("pack", "ideal")
        rtf = {which: trial_rtf(scs[which]) for which in order}
        for which, x in rtf.items():
            best[which] = max(best[which], x)
        print(f"round {i + 1}: ideal {rtf['ideal']:.1f}x  pack {rtf['pack']:.1f}x  pack/ideal {rtf['pack'] / rtf['ideal']:.2f}",
              flush=True)
    print(f"best real-time factor: ideal {best['ideal']:.1f}x, pack {best['pack']:.1f}x; "
          f"pack/ideal {best['pack'] / best['ideal']:.2f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=5.0, help="simulated seconds per measurement")
    ap.add_argument("--repeat", type=int, default=3, help="interleaved rounds")
    ap.add_argument("--instructions", action="store_true", help="count instructions per step (valgrind)")
    args = ap.parse_args()
    instructions() if args.instructions else wall_time_rounds(args.seconds, args.repeat)


if __name__ == "__main__":
    main()
