"""Estimators (sim.strategies.estimators): the complementary filter's crossover, the Kalman filter's
steady gain and noise model, plug-in estimators and their failures.

Sources: complementary filter, crossover at 1/(2 pi tau) (common practice, no source; references.md,
Sensing); steady-state Kalman gain from the discrete algebraic Riccati equation (Simon, Optimal
State Estimation, 2006; scipy.linalg.solve_discrete_are); exact discretisation of continuous
process noise (Van Loan, "Computing integrals involving the matrix exponential", IEEE Trans. Automatic
Control, 1978; volume and pages from memory: 23, 395-404; computed here with scipy.linalg.expm).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import scipy.linalg
from numpy.testing import assert_allclose

from conftest import make_scenario
from sim.core.errors import ScenarioError
from sim.run.metrics import trial_metrics
from sim.run.trial import run_trial
from sim.strategies.estimators import Complementary, Kalman, resolve_estimator

G = 9.81
PLUGINS = Path(__file__).resolve().parent / "plugins"


def _build(raw: dict, period_s: float):
    return resolve_estimator(raw, base_dir=Path.cwd()).build(period_s=period_s, gravity_m_s2=G)


def _accel_at(angle: float) -> tuple:
    return (0.0, G * math.sin(angle), G * math.cos(angle))


def _amplitude(x: np.ndarray, t: np.ndarray, f: float) -> float:
    """Least-squares amplitude of the f-Hz sinusoid in x."""
    basis = np.stack([np.sin(2 * math.pi * f * t), np.cos(2 * math.pi * f * t), np.ones_like(t)], axis=1)
    c = np.linalg.lstsq(basis, x, rcond=None)[0]
    return float(math.hypot(c[0], c[1]))


@pytest.mark.parametrize("f_ratio", [0.1, 1.0, 10.0])
def test_complementary_filter_crosses_over_at_one_over_two_pi_tau(f_ratio):
    # accelerometer path: a first-order low-pass 1/(1 + j w tau); gyro path: its complement
    # j w tau/(1 + j w tau); at f = 1/(2 pi tau) each passes 1/sqrt(2), and together they pass 1
    tau, dt = 0.2, 1e-3
    f = f_ratio / (2 * math.pi * tau)
    t = np.arange(int(12 * max(1 / f, tau) / dt)) * dt
    amp = 0.1
    theta, omega = amp * np.sin(2 * math.pi * f * t), amp * 2 * math.pi * f * np.cos(2 * math.pi * f * t)
    outputs = {}
    for name, gyro, tilt in (("accel", np.zeros_like(t), theta), ("gyro", omega, np.zeros_like(t)), ("both", omega, theta)):
        est = _build({"kind": "complementary", "time_constant": tau}, dt)
        outputs[name] = np.array([est.update(ti, (w, 0.0, 0.0), _accel_at(a))[0] for ti, w, a in zip(t, gyro, tilt)])
    late = t > t[-1] / 2
    w_tau = 2 * math.pi * f * tau
    assert_allclose(_amplitude(outputs["accel"][late], t[late], f) / amp, 1 / math.hypot(1, w_tau), rtol=0.01)
    assert_allclose(_amplitude(outputs["gyro"][late], t[late], f) / amp, w_tau / math.hypot(1, w_tau), rtol=0.01)
    # together: the angle itself, up to the rectangle rule's error in integrating the gyro (the
    # rate at the step's end times dt: at most one step's worth, amp 2 pi f dt)
    assert_allclose(outputs["both"][late], theta[late], atol=amp * max(2 * math.pi * f * dt, 0.01))


def _kalman_raw(q_rate=0.02, q_bias=0.002, r=0.03):
    return {"kind": "kalman", "measurement_noise": r, "process_noise": {"rate": q_rate, "bias": q_bias}}


def test_kalman_steady_gain_solves_the_riccati_equation():
    dt = 2e-3
    est = _build(_kalman_raw(q_bias=0.01), dt)
    rng = np.random.default_rng(1)
    for i in range(40_000):
        est.update(i * dt, (0.1 + 0.01 * rng.standard_normal(), 0.0, 0.0), _accel_at(0.01 * rng.standard_normal()))
    A, C = np.array([[1.0, -dt], [0.0, 1.0]]), np.array([[1.0, 0.0]])
    Q = np.array([[est.q11, est.q12], [est.q12, est.q22]])      # checked against Van Loan below
    P = scipy.linalg.solve_discrete_are(A.T, C.T, Q, np.array([[0.03**2]]))
    K = P @ C.T @ np.linalg.inv(C @ P @ C.T + 0.03**2)
    assert_allclose(est.gain, K.ravel(), rtol=1e-6)


def test_kalman_process_noise_is_the_exact_discretisation():
    # Van Loan (1978): exp([[-F, G Qc G'], [0, F']] dt) = [[., Phi^-1 Qd], [0, Phi']]
    dt, qw, qb = 2e-3, 0.02, 0.002
    est = _build(_kalman_raw(qw, qb), dt)
    F, Qc = np.array([[0.0, -1.0], [0.0, 0.0]]), np.diag([qw**2, qb**2])
    M = scipy.linalg.expm(np.block([[-F, Qc], [np.zeros((2, 2)), F.T]]) * dt)
    Phi = M[2:, 2:].T
    Qd = Phi @ M[:2, 2:]
    assert_allclose([[est.q11, est.q12], [est.q12, est.q22]], Qd, rtol=1e-9, atol=1e-18)


def test_kalman_learns_a_gyro_bias():
    dt, bias = 2e-3, 0.05
    est = _build(_kalman_raw(), dt)
    rng = np.random.default_rng(2)
    for i in range(10_000):   # 20 s at rest, the gyro reading its bias plus noise
        angle, rate = est.update(i * dt, (bias + 0.01 * rng.standard_normal(), 0.0, 0.0), _accel_at(0.01 * rng.standard_normal()))
    assert_allclose(est.bias, bias, atol=0.005)
    assert abs(rate) < 0.04 and abs(angle) < 0.01


def test_filters_follow_a_body_through_plus_minus_pi():
    dt = 1e-3
    for raw in ({"kind": "complementary", "time_constant": 0.3}, _kalman_raw()):
        est = _build(raw, dt)
        angle = 3.0
        for i in range(3000):    # turning steadily at 1 rad/s through pi
            angle = math.remainder(angle + dt, 2 * math.pi)
            out, _ = est.update(i * dt, (1.0, 0.0, 0.0), _accel_at(angle))
        assert abs(math.remainder(out - angle, 2 * math.pi)) < 0.01, raw["kind"]


def test_estimator_in_a_trial_balances_and_reports_its_error():
    sc = make_scenario(strategy={"kind": "lqr"}, trial={"duration": 1.0, "start": {"angle": 0.03}},
                       sensors={"angle": None, "imu": {"at": [0, 0, 0.05], "accel": {"noise_density": 0.003}},
                                "estimator": {"kind": "complementary", "time_constant": 0.3}})
    res = run_trial(sc)
    m = trial_metrics(res)
    assert res.outcome == "balanced"
    err = np.abs(res.trace.view("estimated_angle_rad") - res.trace.view("angle"))
    assert_allclose(m["estimator_angle_peak_error_rad"], err.max(), rtol=1e-9)
    assert np.array_equal(res.trace.view("estimated_angle_rad"), res.trace.view("meas_angle"))
    assert m["estimator"] == "complementary" and "loop_overruns" not in m


def test_plugin_estimator_runs_and_its_failure_is_an_outcome():
    def scenario(cls, **params):
        return make_scenario(strategy={"kind": "lqr"}, trial={"duration": 0.3, "start": {"angle": 0.02}},
                             sensors={"imu": {}, "estimator": {"plugin": f"{PLUGINS / 'estimator_plugins.py'}:{cls}", **params}})
    res = run_trial(scenario("TrueTiltOnly", gain=1.0), isolate=False)
    assert res.outcome == "balanced"
    for isolate in (False, None):    # None: a plug-in estimator's trial runs in the isolation child
        res = run_trial(scenario("BreaksAfter", after_s=0.1), isolate=isolate)
        assert res.outcome == "strategy_failed"
        assert "the estimator failed" in res.message and "bus lost" in res.message
        assert res.trace.n == 101 and res.ended_at_s == 0.1      # row 100 (1 ms steps) holds the failure
    with pytest.raises(ScenarioError, match="not a subclass of sim.strategies.estimators.Estimator"):
        scenario("NotAnEstimator")


def test_unknown_estimator_and_bad_parameters_are_named():
    with pytest.raises(ScenarioError, match=r"sensors\.estimator\.kind: unknown estimator 'kalmann'"):
        make_scenario(sensors={"imu": {}, "estimator": {"kind": "kalmann"}})
    with pytest.raises(ScenarioError, match=r"sensors\.estimator\.time_constant"):
        make_scenario(sensors={"imu": {}, "estimator": {"kind": "complementary", "time_constant": -1}})
    assert isinstance(_build({"kind": "kalman"}, 1e-3), Kalman)
    assert isinstance(_build({"kind": "complementary", "time_constant": 1}, 1e-3), Complementary)


def test_demo_pair_shows_what_half_a_degree_of_misalignment_does():
    # the two demo files' own claims (their top comments): aligned, the IMU pendulum holds with its
    # wheel far from the limit; half a degree off, the angle-only law runs the wheel to its limit
    from sim.model.scenario_yaml import load_scenario
    root = Path(__file__).resolve().parent.parent / "scenarios"
    good = trial_metrics(run_trial(load_scenario(root / "imu_pendulum.yaml")))
    bad = trial_metrics(run_trial(load_scenario(root / "imu_pendulum_misaligned.yaml")))
    assert good["outcome"] == "balanced" and good["peak_wheel_speed_rad_s"] < 30
    assert bad["outcome"] == "fell" and bad["cause"] == "wheel_at_speed_limit"
    # the misalignment passes through the filter as a steady angle error of about its size
    assert_allclose(bad["estimator_angle_mean_error_rad"], math.radians(0.5), rtol=0.2)
    assert abs(good["estimator_angle_mean_error_rad"]) < math.radians(0.1)
