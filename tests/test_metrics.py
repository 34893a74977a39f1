"""Metrics of one trial (sim.run.metrics): totals up to the fall, the saturation count, caught_at_s for
a trial held from the start, and pushes judged over their recovery window. Devices as in
trial_cases.py (invented)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from conftest import make_scenario
from sim.run.metrics import PUSH_RECOVER_S, trial_metrics
from sim.run.trial import run_trial
from trial_cases import BIG_WHEEL, bias_pid, plugin_scenario


def test_totals_stop_at_the_fall():
    result = run_trial(bias_pid(3.0, 8.0), stop_early=False)
    m = trial_metrics(result)
    tr, dt = result.trace, result.trace.step_s
    k = int(round(m["fell_at_s"] / dt))
    assert tr.n > k + 1000 and m["totals_until_s"] == pytest.approx(m["fell_at_s"])
    v, i = tr.voltage[:k], tr.current[:k]
    # energy from the supply = integral of V i dt, RMS = sqrt(mean i^2) (common practice, no source)
    assert_allclose(m["energy_from_supply_j"], np.sum(v * i) * dt, rtol=1e-12)
    assert_allclose(m["rms_current_a"], np.sqrt(np.mean(i**2)), rtol=1e-12)
    assert_allclose(m["peak_wheel_speed_rad_s"], np.max(np.abs(tr.wheel_speed[:k])), rtol=1e-12)
    # the flailing after the fall is left out: over the whole trace the figures differ
    assert not np.isclose(m["energy_from_supply_j"], np.sum(tr.view("voltage") * tr.view("current")) * dt)


def test_caught_at_is_null_for_a_trial_held_from_the_start():
    m = trial_metrics(run_trial(make_scenario(wheel=BIG_WHEEL, strategy={"kind": "lqr"},
                                              trial={"duration": 0.5, "start": {"angle": "2 deg"}})))
    assert m["outcome"] == "balanced" and m["caught_at_s"] is None
    # the margins still count from the start: the largest angle is the 2 deg it started at
    assert_allclose(m["max_angle_after_catch_rad"], math.radians(2.0), rtol=1e-9)


def test_a_law_asking_for_exactly_the_supply_counts_as_saturated():
    # the built-in bench law at exactly the 12 V supply, every tick
    m = trial_metrics(run_trial(make_scenario(body={"locked": True}, trial={"duration": 0.2},
                                              strategy={"kind": "fixed_voltage", "volts": 12.0})))
    assert m["voltage_saturated_fraction"] == 1.0


def test_saturated_fraction_is_the_share_of_ticks_at_the_supply(tmp_path):
    # every 4th tick exactly at the supply, the others just under it: a quarter of the ticks
    sc = plugin_scenario(tmp_path, """
    class Quarter(Base):
        n = 0
        def decide(self, reading):
            self.n += 1
            return 12.0 if self.n % 4 == 1 else 11.99
    """, "Quarter", body={"locked": True}, trial={"duration": 0.4})
    m = trial_metrics(run_trial(sc))
    assert m["voltage_saturated_fraction"] == 0.25  # 200 ticks at 500 Hz, 50 of them at the supply


def test_a_fall_long_after_a_push_is_its_own_event():
    # a small push at 0.5 s, then the bias drift loses the body seconds after the push's window
    result = run_trial(bias_pid(3.0, 10.0, pushes=[{"at": 0.5, "impulse": 0.005}]))
    m = trial_metrics(result)
    assert m["outcome"] == "fell" and m["fell_at_s"] > 0.5 + PUSH_RECOVER_S
    assert m["pushes"][0]["survived"] and m["pushes"][0]["recovery_window_s"] == pytest.approx(PUSH_RECOVER_S)
    assert m["cause"] == "bias_drift"


def test_a_fall_inside_the_recovery_window_loses_the_push():
    # LQR on the heavy-wheel device: 50 mN m s at 0.3 s throws the body over within half a second
    m = trial_metrics(run_trial(make_scenario(wheel=BIG_WHEEL, strategy={"kind": "lqr"},
                                              trial={"duration": 2.0, "pushes": [{"at": 0.3, "impulse": 0.05}]})))
    assert m["fell_at_s"] < 0.3 + PUSH_RECOVER_S and not m["pushes"][0]["survived"]
