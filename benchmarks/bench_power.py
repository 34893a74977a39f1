"""Speed of a trial driven through the power chain against the same trial on today's ideal source.

    python benchmarks/bench_power.py [--seconds 20] [--rounds 5]

The bundled demo with LQR balance from 3 deg (the full-fidelity trial of bench_speed.py: 1 kHz
physics, motor with friction and current limit, noisy delayed sensors, LQR at 500 Hz) runs three ways
in interleaved rounds (the order turned round every round, so other load on the machine hits all):
- plain: today's MotorDrive on the fixed supply (the yardstick);
- pack + PWM: a 3S LiPo with sag and a bus capacitance, an 8-bit 20 kHz PWM with dead time and a
  dead band, a reversal delay and an over-current trip (voltage mode);
- pack + PWM + current mode: the same with a current-mode driver (LQR designed on current input).
Printed: each round's real-time factors (simulated s / the trial loop's wall s) and the ratios to
plain (target >= 0.8 for pack + PWM + current mode), and the best of the rounds. No assertion.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from sim.model.scenario_yaml import load_scenario  # noqa: E402
from sim.run.trial import run_trial  # noqa: E402

PLAIN = ["strategy={kind: lqr}", "trial.pushes=[]", "trial.start.angle=3 deg"]
PACK = ["drive.supply=",     # an empty value clears the bench supply: the pack replaces it
        "battery={cells: 3, chemistry: lipo, capacity: 1300 mAh, internal_resistance: 0.15 ohm, state_of_charge: 0.8}",
        "drive.pwm={resolution_bits: 8, frequency: 20 kHz, dead_time: 0.5 us, min_duty: 0.01}",
        "drive.bus_capacitance=470 uF", "drive.reversal_delay=1 ms", "drive.trip={current: 8 A, time: 20 ms}"]
CURRENT = ["drive.mode=current", "drive.current_bandwidth=1 kHz"]


def loop_rtf(scenario) -> tuple[float, str]:
    result = run_trial(scenario)
    return result.ended_at_s / result.wall_s, result.outcome


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=20.0, help="simulated seconds per trial")
    ap.add_argument("--rounds", type=int, default=5)
    args = ap.parse_args()
    common = PLAIN + [f"trial.duration={args.seconds} s"]
    scenarios = {"plain": load_scenario(None, overrides=common),
                 "pack+pwm": load_scenario(None, overrides=common + PACK),
                 "pack+pwm+current": load_scenario(None, overrides=common + PACK + CURRENT)}
    for sc in scenarios.values():      # warm-up, not counted: imports, the engine's cached body, LQR designs
        run_trial(sc)
    best = dict.fromkeys(scenarios, 0.0)
    print(f"{args.seconds:g} s trials of the desk demo with LQR; real-time factors of the trial loop")
    print(f"{'round':>5} {'plain':>8} {'pack+pwm':>9} {'ratio':>6} {'+current':>9} {'ratio':>6}   outcomes")
    for r in range(args.rounds):
        order = list(scenarios) if r % 2 == 0 else list(reversed(scenarios))
        got = {name: loop_rtf(scenarios[name]) for name in order}
        for name, (rtf, _) in got.items():
            best[name] = max(best[name], rtf)
        p, v, c = (got[n][0] for n in scenarios)
        print(f"{r + 1:>5} {p:>8.1f} {v:>9.1f} {v / p:>6.2f} {c:>9.1f} {c / p:>6.2f}   "
              + ", ".join(got[n][1] for n in scenarios))
    p, v, c = (best[n] for n in scenarios)
    print(f"{'best':>5} {p:>8.1f} {v:>9.1f} {v / p:>6.2f} {c:>9.1f} {c / p:>6.2f}   target: +current ratio >= 0.8")


if __name__ == "__main__":
    main()
