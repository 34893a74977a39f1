"""Speed of a firmware-strategy trial against the Python `lqr` trial of the same scenario.

    python benchmarks/bench_firmware.py [--seconds 20] [--rounds 3] [--example desk|cube|pack]

A bundled example (desk: scenarios/firmware/desk_firmware.yaml, one wheel on a hinge, Q16 firmware;
cube: scenarios/firmware/cube_firmware.yaml, three wheels on a ball mount, float32 firmware; pack:
scenarios/firmware/cube_pack_firmware.yaml, the same on a 3S pack through 10-bit bridges, Q16 firmware
writing duties; its duration set by --seconds) runs with its compiled firmware and, in the same rounds, with
`strategy: {kind: lqr}` (the cube: the multi-wheel design); the two alternate
within each round (the order swapped every round), so that other load on the machine hits both.
Two real-time factors (simulated s per wall s) for each:
- end to end: `run_trial` as a caller sees it (for the firmware: the fork of the isolation child,
  loading a fresh copy of the build, the trial, the result sent back);
- loop: the trial loop alone (`TrialResult.wall_s`).
Printed: each round's figures and ratios (firmware / lqr; target >= 0.9), the best of the rounds,
and the median of the rounds' own ratios (each round's two trials ran next to each other, so its
ratio saw the same load; the best of each column may come from different rounds).
A third trial, the Python `lqr` forced into the isolation child, splits the firmware's cost into
what isolation costs any strategy (the fork, the watched clock) and what the C bridge adds.
The build is compiled (or found in the cache), and each trial run once uncounted, before the first
round. No assertion.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from sim.model.scenario_yaml import load_scenario
from sim.run.trial import run_trial  # noqa: E402

EXAMPLES = {"desk": (HERE.parent / "scenarios" / "firmware" / "desk_firmware.yaml",
                     "strategy={kind: lqr, release_angle: 30 deg}"),
            "cube": (HERE.parent / "scenarios" / "firmware" / "cube_firmware.yaml", "strategy={kind: lqr}"),
            "pack": (HERE.parent / "scenarios" / "firmware" / "cube_pack_firmware.yaml", "strategy={kind: lqr}")}


def measure(scenario, isolate=None) -> tuple[float, float, str]:
    """(end-to-end RTF, loop RTF, outcome) of one trial."""
    t0 = time.perf_counter()
    result = run_trial(scenario, isolate=isolate)
    wall = time.perf_counter() - t0
    simulated = result.ended_at_s
    return simulated / wall, simulated / result.wall_s, result.outcome


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=20.0, help="simulated seconds per trial")
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--example", choices=sorted(EXAMPLES), default="desk")
    args = ap.parse_args()
    example, twin = EXAMPLES[args.example]
    common = [f"trial.duration={args.seconds} s"]
    scenarios = {"firmware": load_scenario(example, overrides=common),
                 "lqr": load_scenario(example, overrides=common + [twin])}
    scenarios["lqr isolated"] = scenarios["lqr"]
    best = {name: [0.0, 0.0] for name in scenarios}
    ratios = []
    # warm-up, not counted: the first imports, the first isolation child
    for sc in (scenarios["firmware"], scenarios["lqr"]):
        run_trial(sc, isolate=True)
    print(f"{args.seconds:g} s trials of {example.name}; real-time factors (simulated s / wall s)")
    print(f"{'round':>5} {'fw e2e':>9} {'lqr e2e':>9} {'ratio':>6} {'fw loop':>9} {'lqr loop':>9} {'ratio':>6}"
          f" {'lqr-iso e2e':>12} {'lqr-iso loop':>13}")
    for r in range(args.rounds):
        order = list(scenarios) if r % 2 == 0 else list(reversed(scenarios))
        got = {}
        for name in order:
            got[name] = measure(scenarios[name], isolate=True if name == "lqr isolated" else None)
            best[name] = [max(b, g) for b, g in zip(best[name], got[name][:2])]
        fw, lq, iso = got["firmware"], got["lqr"], got["lqr isolated"]
        ratios.append((fw[0] / lq[0], fw[1] / lq[1]))
        print(f"{r + 1:>5} {fw[0]:>9.1f} {lq[0]:>9.1f} {fw[0] / lq[0]:>6.2f} {fw[1]:>9.1f} {lq[1]:>9.1f} "
              f"{fw[1] / lq[1]:>6.2f} {iso[0]:>12.1f} {iso[1]:>13.1f}   ({fw[2]}, {lq[2]}, {iso[2]})")
    fw, lq, iso = best["firmware"], best["lqr"], best["lqr isolated"]
    print(f"{'best':>5} {fw[0]:>9.1f} {lq[0]:>9.1f} {fw[0] / lq[0]:>6.2f} {fw[1]:>9.1f} {lq[1]:>9.1f} "
          f"{fw[1] / lq[1]:>6.2f} {iso[0]:>12.1f} {iso[1]:>13.1f}   target: ratio >= 0.9")
    e2e, loop = (statistics.median(r[i] for r in ratios) for i in (0, 1))
    print(f"median of the rounds' ratios: end to end {e2e:.2f}, loop {loop:.2f}")


if __name__ == "__main__":
    main()
