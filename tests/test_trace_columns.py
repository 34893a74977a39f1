"""Every column of trace.csv against its definition, on a constructed trial.

The trial: the conftest device (k_t 3.7% above k_e) free on its pivot, no friction, ideal sensors
with a rate gyro, LQR at 500 Hz (two physics steps per tick), started 3 deg off upright with the
wheel at 40 rad/s, a push at 0.1 s. The CSV is written by the real writer and read back, so a
column that holds another quantity (measured rate vs measured wheel speed, torque vs power, a
shifted angle) fails here. Definitions: README "trace.csv".
"""

from __future__ import annotations

import csv
import math

import control
import numpy as np
import pytest
from numpy.testing import assert_allclose

from conftest import make_scenario
from sim.run.trace import CSV_COLUMNS, write_csv
from sim.run.trial import run_trial
from test_lqr import references_model

DT, RATE_HZ = 1e-3, 500.0
START_ANGLE, START_WHEEL = math.radians(3.0), 40.0


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    sc = make_scenario(world={"step": DT}, sensors={"rate": RATE_HZ, "rate_gyro": {"noise": 0.0, "bias": 0.0}},
                       strategy={"kind": "lqr"},
                       trial={"duration": 0.4, "start": {"angle": START_ANGLE, "wheel_speed": START_WHEEL},
                              "pushes": [{"at": 0.1, "impulse": 0.004}]})
    result = run_trial(sc)
    path = tmp_path_factory.mktemp("trace") / "trace.csv"
    write_csv(result.trace, path)
    with open(path, newline="") as fh:
        rows = list(csv.DictReader(fh))
    cols = {name: np.array([float(r[name]) for r in rows]) for name in CSV_COLUMNS if name != "mode"}
    cols["mode"] = [r["mode"] for r in rows]
    return result, cols


def _unwrap(a):
    return np.unwrap(a)


def test_header_and_time(run):
    result, cols = run
    assert list(cols) == list(CSV_COLUMNS)
    n = result.trace.n
    assert n == 400
    # t_s = k * step (README); 9 significant digits are written
    assert_allclose(cols["t_s"], np.arange(n) * DT, rtol=1e-9, atol=1e-12)


def test_angles_are_the_trapezoid_integral_of_their_rates(run):
    # README: angle_rad and wheel_angle_rad are the start angle plus the trapezoid integral of the
    # recorded rates (the same instant as the rates); angle_rad wrapped to (-pi, pi].
    # Tolerance: the CSV's 9 significant digits summed over 400 rows, atol 1e-7 rad.
    _, cols = run
    for angle, rate, start in (("angle_rad", "rate_rad_s", START_ANGLE), ("wheel_angle_rad", "wheel_speed_rad_s", 0.0)):
        a, w = _unwrap(cols[angle]), cols[rate]
        trapezoid = start + np.concatenate([[0.0], np.cumsum(0.5 * (w[1:] + w[:-1]) * DT)])
        assert_allclose(a, trapezoid, atol=1e-7)
    assert np.all(np.abs(cols["angle_rad"]) <= math.pi)


def test_rates_and_torque_follow_the_equations_of_motion(run):
    # Reaction-wheel pendulum (references.md "Linear model", nonlinear form; Spong, Corke & Lozano
    # 2001): J theta_dd = mbar g sin(theta) - tau (+ the push), I_w (theta_dd + phi_dd) = tau, tau the
    # motor torque on the wheel (no friction here). The engine steps velocities with the forces at
    # the step's start (semi-implicit Euler): over step k, J (rate[k+1] - rate[k]) = dt (mbar g
    # sin x_k - torque[k]) with x_k the engine's angle, angle[k] + (rate[k] - rate[0]) dt / 2 (the
    # README's definition). Tolerance: 1e-6 of the step's torque scale (the CSV's 9 digits).
    result, cols = run
    d = result.device
    rate, wheel, tau = cols["rate_rad_s"], cols["wheel_speed_rad_s"], cols["torque_n_m"]
    x = _unwrap(cols["angle_rad"]) + (rate - rate[0]) * DT / 2
    body = d.J_kg_m2 * np.diff(rate) / DT - (d.gravity_torque_coeff_n_m * np.sin(x[:-1]) - tau[:-1])
    push_row = int(round(0.1 / DT))
    scale = d.stall_torque_n_m
    assert_allclose(np.delete(body, push_row), 0.0, atol=1e-6 * scale)
    assert_allclose(body[push_row], 0.004 / DT, rtol=1e-6)      # the push: impulse / dt on its one step
    wheel_eq = d.I_w_kg_m2 * np.diff(rate + wheel) / DT - tau[:-1]
    assert_allclose(wheel_eq, 0.0, atol=1e-6 * scale)
    assert np.max(np.abs(tau)) > 0.1 * scale                     # the law did work


def test_current_torque_and_power(run):
    # DC motor (references.md "Motor"), no inductance: i = (V - k_e w) / R at each instant, so the
    # step's mean current is (V - k_e mean w) / R; the mean relative wheel speed over the step is
    # (w[k] + w[k+1]) / 2 to second order (atol 2e-5 of V/R; seen 5e-6: the drive's step solution
    # leaves gravity's pull on the relative wheel speed to the engine). torque = k_t i with
    # k_t != k_e (rtol 1e-8); power = V i, electrical power into the winding (rtol 1e-8).
    result, cols = run
    d = result.device
    v, i, w = cols["voltage_v"], cols["current_a"], cols["wheel_speed_rad_s"]
    expected = (v[:-1] - d.k_e_v_s_rad * 0.5 * (w[:-1] + w[1:])) / d.resistance_ohm
    push_row = int(round(0.1 / DT))        # the push jumps the relative wheel speed: no smooth mean there
    assert_allclose(np.delete(i[:-1], push_row), np.delete(expected, push_row), atol=2e-5 * 12.0 / d.resistance_ohm)
    assert_allclose(cols["torque_n_m"], d.k_t_n_m_a * i, rtol=1e-8, atol=1e-12)
    assert_allclose(cols["power_w"], v * i, rtol=1e-8, atol=1e-12)


def test_measured_columns_and_voltage_hold_each_tick(run):
    # Ideal sensors: at each tick (every 2nd row) the measured angle, rate and wheel speed are the
    # true ones of that row, held until the next tick (README). The voltage is the law's answer
    # to them, held: volts = -K x_meas clamped to the supply, K from python-control's dlqr of the
    # ZOH model (references.md "LQR"), rtol 1e-6.
    result, cols = run
    d = result.device
    ticks = np.arange(0, len(cols["t_s"]), 2)
    held = np.repeat(ticks, 2)[: len(cols["t_s"])]
    for meas, true in (("measured_angle_rad", "angle_rad"), ("measured_rate_rad_s", "rate_rad_s"),
                       ("measured_wheel_speed_rad_s", "wheel_speed_rad_s")):
        assert_allclose(cols[meas], cols[true][held], rtol=1e-8, atol=1e-12, err_msg=meas)
    x = np.column_stack([cols["measured_angle_rad"], cols["measured_rate_rad_s"], cols["measured_wheel_speed_rad_s"]])
    assert_allclose(cols["voltage_v"], np.clip(-x @ _reference_gain(result), -d.supply_v, d.supply_v),
                    rtol=1e-6, atol=1e-9)
    assert cols["mode"] == ["balance"] * len(cols["t_s"])


def _reference_gain(result) -> np.ndarray:
    """K of python-control's dlqr on the ZOH model at the loop period, with the strategy's weights."""
    A, B = references_model(result.device)
    sysd = control.c2d(control.ss(A, B, np.eye(3), np.zeros((3, 1))), 1.0 / RATE_HZ, method="zoh")
    return np.ravel(control.dlqr(sysd.A, sysd.B, result.strategy.design.Q, result.strategy.design.R)[0])


def test_voltage_saturated_fraction_counts_the_ticks_that_asked_past_the_supply(run):
    # metrics.json's voltage_saturated_fraction (README): control ticks whose law asked for more than
    # the supply, over all ticks. Counted here from the measured columns at the tick rows and the
    # law's own answer -K x (K from python-control dlqr); the trial saturates on 13 of its 200 ticks.
    from sim.run.metrics import trial_metrics

    result, cols = run
    x = np.column_stack([cols["measured_angle_rad"], cols["measured_rate_rad_s"],
                         cols["measured_wheel_speed_rad_s"]])[::2]
    asked = -x @ _reference_gain(result)
    saturated = int(np.sum(np.abs(asked) > result.device.supply_v))
    assert 5 <= saturated < len(asked) // 2
    assert_allclose(trial_metrics(result)["voltage_saturated_fraction"], saturated / len(asked), rtol=1e-12)
