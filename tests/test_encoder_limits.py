"""Encoders read over a bus (sim.physics.sensors): latency, update rate and the tracking limit.

The behaviour is ours, stated in sim.physics.sensors (common practice, no source): a value is
`latency` older, refreshed only every update period, and beyond `max_speed` the sensor loses
track and its position stays at the last tracked value.
"""

from __future__ import annotations

import numpy as np
from numpy.testing import assert_allclose

from conftest import make_scenario
from sim.core.angles import wrap_angles
from sim.run.trial import run_trial


def test_latency_and_update_rate_pick_the_stated_rows():
    sc = make_scenario(trial={"duration": 0.3, "start": {"angle": 0.5}},
                       sensors={"rate": 1000, "delay": "2 ms", "angle": {"latency": "3 ms", "update_rate": "200 Hz"}})
    res = run_trial(sc)
    k = np.arange(res.trace.n)
    rows = (np.maximum(k - 2 - 3, 0) // 5) * 5          # delay 2 + latency 3 steps, refreshed every 5 steps
    assert_allclose(res.trace.view("meas_angle"), wrap_angles(res.trace.view("angle")[rows].copy()), atol=1e-15)
    assert len(np.unique(res.trace.view("meas_angle"))) < res.trace.n / 4      # held between refreshes


def _spin_up(wheel: dict):
    sc = make_scenario(body={"locked": True}, strategy={"kind": "fixed_voltage", "volts": 6.0},
                       sensors={"rate": 1000, "wheel": wheel}, trial={"duration": 0.5})
    return run_trial(sc).trace


def test_wheel_past_its_tracking_limit_stops_reading():
    limit = 60.0
    free = _spin_up({"counts_per_rev": 4096})
    tr = _spin_up({"counts_per_rev": 4096, "max_speed": limit})
    true, meas = tr.view("wheel_speed"), tr.view("meas_wheel")
    over = np.abs(true) > limit
    assert over.sum() > 50 and (~over).sum() > 50           # the wheel does cross the limit
    first = np.argmax(over)
    assert not meas[first + 2:][over[first + 2:]].any()    # frozen position: a speed of zero from counts
    np.testing.assert_array_equal(meas[:first], free.view("meas_wheel")[:first])
    direct = _spin_up({"max_speed": limit})                  # a direct speed reading holds its last tracked value
    held = direct.view("meas_wheel")[over]
    assert np.all(held == held[0]) and abs(held[0]) <= limit
