"""`sim.physics.sensors.axes_reader`: the 3D runner's one call per control tick for its suites (one per
axis) gives exactly the numbers each suite's own `read` gives, tick by tick, from the same noise streams.

No outside reference applies: this pins a speed path to the plain path it stands in for, bit for bit
(the plain path's own physics is checked against its references in tests/test_physics.py).
"""

from __future__ import annotations


import numpy as np
import pytest

from sim.model.scenario import Sensors
from sim.physics.sensors import NOISE_CHUNK, SensorSuite, axes_reader

CONFIGS = {
    "gyro, wheel counts, delay": {"rate": 500, "delay": 0.002, "angle": {"noise": 0.001},
                                  "rate_gyro": {"noise": 0.02, "bias": 0.005}, "wheel": {"counts_per_rev": 2048}},
    "no gyro, angle counts": {"rate": 250, "angle": {"noise": 0.002, "counts_per_rev": 4096, "bias": 0.01},
                              "wheel": {"noise": 0.5}},
    "noise-free, no delay": {"rate": 1000},
    "encoder bus (per-suite path)": {"rate": 500, "angle": {"noise": 0.001, "latency": 0.001, "update_rate": 250},
                                     "rate_gyro": {"noise": 0.01}, "wheel": {"counts_per_rev": 1024, "max_speed": 150}},
}


def _suites(sensors: Sensors, n_ticks: int, biases):
    rng = np.random.default_rng(7)
    suites = [SensorSuite(sensors, step_s=1e-3, n_ticks=n_ticks, rng=rng) for _ in biases]
    for s, b in zip(suites, biases):
        s.angle_bias = b
    return suites, rng


@pytest.mark.parametrize("used", [None, (2, 3, 3), (1, 1, 2)])
@pytest.mark.parametrize("name", CONFIGS)
def test_fused_reads_equal_the_suites_own_reads(name, used):
    sensors = Sensors.model_validate(CONFIGS[name])
    cs = max(1, round(1.0 / (sensors.rate * 1e-3)))
    n_ticks = NOISE_CHUNK + 300          # across a chunk boundary of the noise streams
    ticks = n_ticks + 20                  # and past the streams' end (the last row again)
    n = ticks * cs + 1
    t = np.arange(n) * 1e-3
    hist = rng_hist = np.random.default_rng(3)
    columns = []
    for j in range(3):      # per axis: a wandering angle crossing +-pi, its rate, a wheel speeding up past 150 rad/s
        angle = 3.0 * np.sin(0.7 * t + j) + 0.01 * hist.standard_normal(n)
        speed = 40.0 * t * (j + 1) + rng_hist.standard_normal(n)
        columns.append((memoryview(angle), memoryview(np.gradient(angle, 1e-3)), memoryview(np.cumsum(speed) * 1e-3),
                        memoryview(speed)))
    biases = (0.003, -0.002, 0.0)
    plain, rng_a = _suites(sensors, n_ticks, biases)
    fused_suites, rng_b = _suites(sensors, n_ticks, biases)
    n_used = used if used is not None else (3, 3, 3)
    recorded = [np.full(n, np.nan) for _ in range(sum(n_used))]   # the measured columns it writes as it reads
    read_all = axes_reader(fused_suites, columns, used=used, record=[memoryview(r) for r in recorded])
    for tick in range(ticks):
        k = tick * cs
        expected = [s.read(k, *c) for s, c in zip(plain, columns)]
        got = read_all(k)
        # what the caller reads (the leading suites' angles, rates, wheel speeds): exactly each suite's own number
        assert [len(g) for g in got] == list(n_used), (name, tick)
        for q, values in enumerate(got):
            for i, x in enumerate(values):
                assert x == expected[i][q] and isinstance(x, float), (name, tick, i, q)
        assert [r[k] for r in recorded] == [x for values in got for x in values], (name, tick)
    # the trial's generator is moved past the same draws either way
    assert rng_a.standard_normal() == rng_b.standard_normal()


def test_record_needs_a_column_per_number_read():
    suites, _ = _suites(Sensors.model_validate(CONFIGS["noise-free, no delay"]), 10, (0.0, 0.0))
    columns = [tuple(memoryview(np.zeros(20)) for _ in range(4))] * 2
    with pytest.raises(ValueError, match="3 columns for 6 numbers"):
        axes_reader(suites, columns, record=[memoryview(np.zeros(20))] * 3)
