"""Loop timing (sim.physics.timing): where ticks sample and when their commands reach the drive,
on constructed sequences and in trials. The rules are ours, stated in sim.physics.timing (common
practice for a microcontroller's control loop, no source): a tick samples at the step nearest its
jittered instant, its command applies round(compute_time / step) steps later, and an overrun
either skips the ticks due meanwhile or drops the late command."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from conftest import make_scenario
from sim.core.errors import ScenarioError
from sim.model.sensing import Timing
from sim.physics.imu_sensing import TIMING_STREAM, stream
from sim.physics.timing import TickSchedule
from sim.run.metrics import trial_metrics
from sim.run.trial import run_trial

COUNTING = {"plugin": f"{Path(__file__).resolve().parent / 'plugins' / 'simple_laws.py'}:CountingVolts"}


class _Draws:
    """A stand-in generator whose uniform draws are given (the schedule asks for a chunk at a time)."""

    def __init__(self, values):
        self.values = list(values)

    def uniform(self, lo, hi, n):
        out, self.values = self.values[:n], self.values[n:]
        return np.array(out + [0.0] * (n - len(out)))


def _run(schedule: TickSchedule, steps: int) -> tuple[list, list]:
    ticks, applies = [], []
    k = schedule.first()
    while k < steps:
        ticks.append(k)
        apply_k, k = schedule.after(ticks[-1])
        applies.append(apply_k)
    return ticks, applies


def test_jittered_ticks_land_on_the_nearest_step_and_commands_after_the_compute_time():
    # control every 4 steps of 1 ms; lateness 0.2, 0.6, 2.4, 1.5 ms -> 0, 1, 2, 2 steps (nearest)
    t = Timing(compute_time=0.0011, jitter=0.003)
    s = TickSchedule(t, control_steps=4, step_s=1e-3, rng=_Draws([0.0002, 0.0006, 0.0024, 0.0015, 0.0]))
    ticks, applies = _run(s, 20)
    assert ticks == [0, 5, 10, 14, 16]
    assert applies == [1, 6, 11, 15, 17]
    assert s.overruns == 0


def test_overrun_skip_and_hold():
    t = Timing(compute_time=0.003, overrun="skip")                 # 3 steps of a 2-step period
    s = TickSchedule(t, control_steps=2, step_s=1e-3, rng=None)
    assert _run(s, 12) == ([0, 4, 8], [3, 7, 11])                  # ticks at 2, 6, 10 skipped
    assert s.overruns == 3
    s = TickSchedule(t.model_copy(update={"overrun": "hold"}), control_steps=2, step_s=1e-3, rng=None)
    assert _run(s, 8) == ([0, 2, 4, 6], [-1, -1, -1, -1])          # every command dropped
    assert s.overruns == 4
    s = TickSchedule(Timing(compute_time=0.002), control_steps=2, step_s=1e-3, rng=None)
    assert _run(s, 6) == ([0, 2, 4], [2, 4, 6]) and s.overruns == 0  # ready exactly as the next tick starts


def _trial(timing: dict | None, rate: float = 500, **trial):
    sc = make_scenario(strategy=COUNTING, sensors={"rate": rate}, body={"locked": True},
                       trial={"duration": 0.05, "seed": 4, **trial}, **({"timing": timing} if timing else {}))
    return sc, run_trial(sc, isolate=False)


def _expected_volts(sample_steps, apply_steps, n_rows) -> np.ndarray:
    volts, v = np.zeros(n_rows), 0.0
    events = dict(zip(apply_steps, range(1, len(apply_steps) + 1)))
    for k in range(n_rows):
        if k in events:
            v = 1e-3 * events[k]
        volts[k] = v
    return volts


def test_commands_reach_the_drive_at_the_stated_instants_in_a_trial():
    sc, res = _trial({"compute_time": "1 ms", "jitter": "2.9 ms"}, rate=250)     # 4-step period: no overruns
    dt, cs = sc.world.step, sc.control_steps
    e = stream(4, TIMING_STREAM).uniform(0.0, 0.0029, 4096)       # the schedule's own draws
    sample = [n * cs + int(np.rint(e[n] / dt)) for n in range(len(res.strategy.times_s))]
    assert np.rint(np.array(res.strategy.times_s) / dt).astype(int).tolist() == sample
    assert len({s - n * cs for n, s in enumerate(sample)}) >= 3   # the jitter did move ticks, by various steps
    assert trial_metrics(res)["loop_overruns"] == 0
    apply = [s + 1 for s in sample]
    np.testing.assert_array_equal(res.trace.view("voltage"), _expected_volts(sample, apply, res.trace.n))


def test_skip_rule_in_a_trial_counts_overruns():
    sc, res = _trial({"compute_time": "5 ms", "overrun": "skip"})
    times = np.rint(np.array(res.strategy.times_s) / sc.world.step).astype(int)
    assert times.tolist() == list(range(0, 50, 6))               # a 5-step job in a 2-step period: every third
    m = trial_metrics(res)
    # two skipped per job, except after the last one (tick 48: its skips fall due at 50 and 52, past the end)
    assert m["loop_overruns"] == 2 * (len(times) - 1)
    np.testing.assert_array_equal(res.trace.view("voltage"), _expected_volts(times, times + 5, res.trace.n))


def test_hold_rule_in_a_trial_drops_late_commands():
    _, res = _trial({"compute_time": "3 ms", "overrun": "hold"})
    assert not res.trace.view("voltage").any()
    # every tick but the last overran (the last one's deadline, the next tick at 50, is past the end)
    assert trial_metrics(res)["loop_overruns"] == res.control_ticks - 1 == 24


def test_no_timing_section_is_todays_loop():
    _, a = _trial(None)
    _, b = _trial({"compute_time": 0.0, "jitter": 0.0})
    np.testing.assert_array_equal(a.trace.view("voltage"), b.trace.view("voltage"))
    assert a.loop_overruns is None and b.loop_overruns == 0


def test_jitter_must_stay_under_the_control_period():
    with pytest.raises(ScenarioError, match=r"timing\.jitter"):
        make_scenario(sensors={"rate": 500}, timing={"jitter": "2 ms"})


def test_the_laws_delay_predictor_bridges_the_compute_time_too():
    # a command acts compute_time after its sample (in whole physics steps, as the runner applies
    # it), on top of sensors.delay: the LQR's predictor (sim.strategies.lqr_design.DelayPredictor)
    # is built for the sum; without timing, as today
    from sim.model.device import Device
    from sim.strategies.lqr import LqrBalance
    sc = make_scenario(strategy={"kind": "lqr"}, sensors={"rate": 500, "delay": 0.002},
                       timing={"compute_time": 0.0034})
    dev = Device.from_scenario(sc)
    assert dev.delay_s == pytest.approx(0.005, abs=1e-15)    # 3.4 ms acts as 3 steps of 1 ms
    law = LqrBalance(device=dev, params=sc.strategy.params, rng=np.random.default_rng(0))
    assert law.predictor.n == 2 and law.predictor.active      # 5 ms = 2 whole 2 ms periods + 1 ms
    plain = make_scenario(strategy={"kind": "lqr"}, sensors={"rate": 500, "delay": 0.002})
    assert Device.from_scenario(plain).delay_s == 0.002
