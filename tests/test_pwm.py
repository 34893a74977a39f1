"""The PWM model (`sim.physics.pwm`) against the average model and the dead-time effect."""

from __future__ import annotations

import numpy as np
from numpy.testing import assert_allclose

from sim.physics.pwm import Pwm


def test_quantisation_error_is_at_most_half_a_count():
    # rounding to the nearest of 2^bits - 1 counts: |error| <= 1/2 count (uniform quantiser, common
    # practice, no source)
    for bits in (4, 8, 10):
        pwm = Pwm(resolution_bits=bits, frequency_hz=20e3, dead_time_s=0.0, min_duty=0.0)
        duties = np.random.default_rng(bits).uniform(-1.0, 1.0, 5000)
        bus = 12.0
        applied = np.array([pwm.applied(d, bus, 0.0) for d in duties])
        step_v = bus / (2**bits - 1)
        err = np.abs(applied - duties * bus)
        assert err.max() <= 0.5 * step_v * (1 + 1e-12)
        assert err.max() > 0.4 * step_v     # and quantisation does happen
        counts = applied / step_v
        assert_allclose(counts, np.round(counts), atol=1e-9)


def test_dead_band_swallows_commands_below_min_duty():
    pwm = Pwm(resolution_bits=10, frequency_hz=20e3, dead_time_s=0.0, min_duty=0.05)
    assert pwm.applied(0.049, 12.0, 0.0) == 0.0
    assert pwm.applied(-0.03, 12.0, 0.0) == 0.0
    assert pwm.dead_band_hits == 2
    assert pwm.applied(0.0, 12.0, 0.0) == 0.0          # a zero command is no dead-band hit
    assert pwm.dead_band_hits == 2
    assert_allclose(pwm.applied(0.2, 12.0, 0.0), round(0.2 * 1023) / 1023 * 12.0, rtol=1e-12)


def test_dead_time_lowers_the_mean_by_the_lost_volt_seconds():
    # 2 t_d f_s V_bus against the current's sign [pub: Mohan, Undeland & Robbins, Power Electronics,
    # dead-time effect; from memory, as references.md states it]
    t_d, f_s, bus = 1e-6, 20e3, 12.0
    pwm = Pwm(resolution_bits=16, frequency_hz=f_s, dead_time_s=t_d, min_duty=0.0)
    ideal = Pwm(resolution_bits=16, frequency_hz=f_s, dead_time_s=0.0, min_duty=0.0)
    lost = 2 * t_d * f_s * bus                           # 0.48 V
    for d in (0.3, -0.6, 0.9):
        sign = np.sign(d)
        assert_allclose(ideal.applied(d, bus, sign) - pwm.applied(d, bus, sign), sign * lost, rtol=1e-12)
    # a current against the duty gains the same amount instead
    assert_allclose(pwm.applied(0.3, bus, -1.0) - ideal.applied(0.3, bus, -1.0), lost, rtol=1e-12)
    # a pulse shorter than the loss gives nothing, never the opposite voltage
    assert pwm.applied(0.02, bus, 1.0) == 0.0
