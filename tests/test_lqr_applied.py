"""The voltages the LQR strategy actually applies, against an independent design.

The references are built here from the published linear model (references.md, "Linear model":
Spong, Corke & Lozano 2001; Astrom, Block & Spong 2007) with python-control's `c2d` (zero-order
hold) and `dlqr`, never from `sim.strategies.lqr_design`: a strategy that applied the continuous-time gains
(4-7% off at 500 Hz) or a predictor that skipped whole periods of delay fails here.
"""

from __future__ import annotations

import control
import numpy as np
import pytest
from numpy.testing import assert_allclose

from conftest import make_scenario
from sim.model.device import Device
from sim.run.trial import run_trial
from sim.strategies.base import Reading
from test_lqr import references_model as published_model   # references.md "Linear model", no friction

GYRO = {"rate_gyro": {"noise": 0.0, "bias": 0.0}}


def zoh(A, B, T):
    """python-control's zero-order-hold discretisation over T seconds: (Ad, Bd)."""
    sysd = control.c2d(control.ss(A, B, np.eye(3), np.zeros((3, 1))), T, method="zoh")
    return np.asarray(sysd.A), np.asarray(sysd.B)


def reference_gain(d: Device, strategy) -> np.ndarray:
    """dlqr of the ZOH model at the loop period, with the strategy's own weights (Q, R are inputs)."""
    A, B = published_model(d)
    Ad, Bd = zoh(A, B, 1.0 / d.control_rate_hz)
    K, _, _ = control.dlqr(Ad, Bd, strategy.design.Q, strategy.design.R)
    return np.ravel(K)


@pytest.mark.parametrize("weights", [None, [400.0, 4.0, 1e-4]], ids=["bryson", "given"])
def test_lqr_strategy_applies_the_discrete_gains(weights):
    # Each tick's volts = -K x with K from python-control's dlqr of the ZOH model (no delay).
    # The continuous gains differ by 4-7% here; tolerance rtol 1e-6 (two Riccati solvers).
    params = {"kind": "lqr"} | ({"weights": weights} if weights else {})
    sc = make_scenario(strategy=params, sensors=GYRO)
    d = Device.from_scenario(sc)
    strat = sc.strategy.build(d, rng=np.random.default_rng(0))
    K = reference_gain(d, strat)
    A, B = published_model(d)
    Kc = np.ravel(control.lqr(A, B, strat.design.Q, strat.design.R)[0])
    assert np.max(np.abs(Kc / K - 1)) > 0.01      # the two designs are told apart at this rate
    reading = Reading()
    for x in ([0.01, 0.0, 0.0], [0.0, 0.05, 0.0], [0.0, 0.0, 20.0], [-0.004, 0.03, -35.0]):
        reading.angle_rad, reading.rate_rad_s, reading.wheel_speed_rad_s = x
        assert_allclose(strat.command(reading), -K @ np.array(x), rtol=1e-6, atol=1e-12)


def test_first_tick_of_a_real_trial_applies_the_discrete_gains():
    # Through run_trial: ideal sensors, start at 0.01 rad, 0.05 rad/s, wheel at 15 rad/s; row 0 of
    # the trace holds the first tick's volts = -K x0 (K from python-control dlqr; rtol 1e-6).
    sc = make_scenario(strategy={"kind": "lqr"}, sensors=GYRO,
                       trial={"duration": 0.01, "start": {"angle": 0.01, "rate": 0.05, "wheel_speed": 15.0}})
    r = run_trial(sc)
    K = reference_gain(r.device, r.strategy)
    expected = -K @ np.array([0.01, 0.05, 15.0])
    assert abs(expected) < r.device.supply_v          # not clamped: the gains are what is seen
    assert_allclose(r.trace.view("voltage")[0], expected, rtol=1e-6)


@pytest.mark.parametrize("delay_s", [0.0045, 0.006], ids=["2.25-periods", "3-periods"])
def test_delay_predictor_folded_into_the_law_matches_an_explicit_predictor(delay_s):
    # With a measurement delay of n whole loop periods T plus a fraction f, the present state is the
    # measured one carried forward by the model: over f with the command held then (the one sent
    # n+1 ticks ago), then over each whole period with each command sent since (ZOH discretisation,
    # common practice, no source; the delay-augmented model of any digital-control text). Each
    # tick's volts = -K x_now (K, the ZOH maps over T and over f: python-control c2d/dlqr).
    # Fed 40 random readings through the strategy's real command path; tolerance rtol 1e-7.
    sc = make_scenario(strategy={"kind": "lqr"}, sensors={**GYRO, "delay": delay_s})
    d = Device.from_scenario(sc)
    strat = sc.strategy.build(d, rng=np.random.default_rng(0))
    T = 1.0 / d.control_rate_hz
    n = int(np.floor(delay_s / T + 1e-9))
    f = delay_s - n * T
    assert n >= 2
    A, B = published_model(d)
    Ad, Bd = zoh(A, B, T)
    Af, Bf = zoh(A, B, f) if f > 0 else (np.eye(3), np.zeros((3, 1)))
    K = reference_gain(d, strat)
    sent = [0.0] * (n + 1)              # commands sent at ticks k-n-1 .. k-1 (none yet: 0 V)
    rng = np.random.default_rng(7)
    reading = Reading()
    for _ in range(40):
        x_meas = rng.normal(size=3) * [0.01, 0.1, 30.0]
        reading.angle_rad, reading.rate_rad_s, reading.wheel_speed_rad_s = x_meas
        x = Af @ x_meas + Bf.ravel() * sent[0]
        for u in sent[1:]:
            x = Ad @ x + Bd.ravel() * u
        expected = float(np.clip(-K @ x, -d.supply_v, d.supply_v))
        # what the drive applies: the command clamped to the supply (sim/run/trial.py; the law itself
        # returns its unclamped request and records the clamped one for its predictor)
        got = float(np.clip(strat.command(reading), -d.supply_v, d.supply_v))
        assert_allclose(got, expected, rtol=1e-7, atol=1e-9)
        sent = sent[1:] + [got]
