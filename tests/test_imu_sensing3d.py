"""An IMU and its estimator on 3D devices (sim.physics.imu_sensing3d, the estimators' vector form).

Sources: an accelerometer measures specific force, its acceleration minus gravity, so a body at rest
reads f = R^T (a - g) = -R^T g in its own axes (Groves, Principles of GNSS, Inertial, and Multisensor
Integrated Navigation Systems, 2nd ed., 2013, ch. 2; from memory); rotation matrices from Euler
angles by scipy.spatial.transform.Rotation (an independent implementation of R = Rz Ry Rx); the
complementary filter is the first-order low-pass 1/(tau s + 1) on the accelerometer's tilt plus
tau/(tau s + 1) on the gyro rate (common practice, no source; references.md, Sensing), here
discretised by the backward difference s = (1 - 1/z)/dt, compared with scipy.signal.cont2discrete
and dlsim; its steady tilt error under a gyro bias b is tau b (the same transfer function at s = 0).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import scipy.signal
from numpy.testing import assert_allclose
from scipy.spatial.transform import Rotation

from sim.model.device3d import Device3D
from sim.model.scenario_yaml import load_scenario
from sim.physics.imu_sensing3d import body_vectors, upright_turn
from sim.run.metrics3d import trial_metrics3d
from sim.run.trial import run_trial
from sim.strategies.estimators import accel_tilts, resolve_estimator

ROOT = Path(__file__).resolve().parent.parent
CUBE_IMU = ROOT / "scenarios" / "cube_imu.yaml"
G = 9.81
IDEAL_IMU = ("sensors.imu.gyro={}", "sensors.imu.accel={}")   # no noise, bias, range or resolution


def _complementary(tau: float, dt: float):
    return resolve_estimator({"kind": "complementary", "time_constant": tau}, base_dir=Path.cwd()).build(
        period_s=dt, gravity_m_s2=G)


def _at_rest(tilt_x: float, tilt_y: float) -> tuple:
    """The upright-frame specific force of a body at rest at these tilts: A^T (0, 0, g), A = Ry Rx."""
    a = Rotation.from_euler("ZYX", [0.0, tilt_y, tilt_x]).as_matrix()
    return tuple(a.T @ np.array([0.0, 0.0, G]))


@pytest.mark.parametrize("tx, ty, hd", [(0.1, -0.05, 0.0), (-0.3, 0.2, 1.2), (0.02, 0.4, -2.5)])
def test_a_still_tilted_body_reads_minus_r_transpose_g(tx, ty, hd):
    # the IMU's truth from a 3D trace row, against R = Rz(heading) Ry(tilt_y) Rx(tilt_x) U from scipy
    sc = load_scenario(CUBE_IMU)
    device = Device3D.from_scenario(sc)
    u = np.array(upright_turn(device))
    r = Rotation.from_euler("ZYX", [hd, ty, tx]).as_matrix() @ u
    world = (0.3, -1.1, 2.0)
    w_heading = (0.2, -0.4, 0.7)
    up, w_body, turned = body_vectors(tx, ty, hd, w_heading, tuple(map(tuple, u)), world)
    # specific force at rest: -R^T g with g = (0, 0, -9.81) (Groves, ch. 2)
    assert_allclose(G * np.array(up), r.T @ np.array([0.0, 0.0, G]), atol=1e-12)
    assert_allclose(turned, r.T @ np.array(world), atol=1e-12)
    # the trace's rate is in the heading frame (the world turned by the heading about z)
    w_world = Rotation.from_euler("z", hd).as_matrix() @ np.array(w_heading)
    assert_allclose(w_body, r.T @ w_world, atol=1e-12)


def test_the_body_rate_for_the_gyro_is_the_engines_own():
    # the rate turned from the trace's heading frame into the body frame, against pybullet's state read
    # through the engine's own attitude and world-rate calls at the same step
    sc = load_scenario(CUBE_IMU, overrides=(*IDEAL_IMU, "sensors.delay=0", "sensors.imu.rate=500 Hz",
                                            "trial.duration=1 s", "trial.pushes=[]"))
    seen = {}

    def record(k, engine):
        r = np.array(engine.attitude())
        seen[k + 1] = r.T @ np.array(engine.body_rate_world())
    res = run_trial(sc, on_step=record)
    tr = res.trace
    rows = [k for k in range(2, 500, 2) if k in seen]
    gyro = np.array([[tr.imu_gyro_x_rad_s[k], tr.imu_gyro_y_rad_s[k], tr.imu_gyro_z_rad_s[k]] for k in rows])
    truth = np.array([seen[k] for k in rows])
    assert np.max(np.abs(truth)) > 0.01      # the body did move
    assert_allclose(gyro, truth, atol=1e-9)


def test_the_start_rows_accelerometer_is_gravity_in_body_axes():
    # end to end: the cube starts at rest, tilted; row 0's accelerometer is -R^T g (Groves, ch. 2)
    sc = load_scenario(CUBE_IMU, overrides=(*IDEAL_IMU, "trial.duration=0.01 s", "trial.pushes=[]"))
    res = run_trial(sc)
    tr = res.trace
    tx, ty = float(tr.tilt_x[0]), float(tr.tilt_y[0])
    assert_allclose((tx, ty), np.radians([2.0, -1.0]), atol=1e-9)
    r = Rotation.from_euler("ZYX", [float(tr.heading[0]), ty, tx]).as_matrix() @ np.array(res.device.upright())
    accel = (tr.imu_accel_x_m_s2[0], tr.imu_accel_y_m_s2[0], tr.imu_accel_z_m_s2[0])
    assert_allclose(accel, r.T @ np.array([0.0, 0.0, G]), atol=1e-9)


def test_accel_tilts_inverts_the_specific_force_at_rest():
    for tx, ty in [(0.3, -0.2), (-1.0, 0.5), (2.5, 0.1)]:
        assert_allclose(accel_tilts(_at_rest(tx, ty)), (tx, ty), atol=1e-12)


def test_the_two_axis_filter_converges_to_a_constant_tilt():
    tau, dt = 0.3, 2e-3
    est = _complementary(tau, dt)
    est.update_tilts(0.0, (0.0, 0.0, 0.0), _at_rest(0.0, 0.0))     # starts level
    truth = (0.12, -0.07)
    for i in range(1, int(12 * tau / dt)):
        tilts, rates = est.update_tilts(i * dt, (0.0, 0.0, 0.0), _at_rest(*truth))
    # a first-order approach: after 12 tau the start's error is e^-12 of itself
    assert_allclose(tilts, truth, atol=1e-5 * 0.12)
    assert_allclose(rates, (0.0, 0.0, 0.0), atol=1e-15)


def test_the_two_axis_filters_steady_error_under_a_gyro_bias_is_tau_times_the_bias():
    # the gyro path's transfer tau/(tau s + 1) at s = 0: a rate bias b leaves a tilt error tau b
    tau, dt, b = 0.5, 2e-3, (0.002, -0.003, 0.0)
    est = _complementary(tau, dt)
    for i in range(int(15 * tau / dt)):
        tilts, _ = est.update_tilts(i * dt, b, _at_rest(0.0, 0.0))
    assert_allclose(tilts, (tau * b[0], tau * b[1]), rtol=1e-3)


@pytest.mark.parametrize("path", ["accel", "gyro"])
@pytest.mark.parametrize("axis", [0, 1])
def test_the_two_axis_filter_is_the_textbook_first_order_form(path, axis):
    # each tilt axis: accelerometer tilt through 1/(tau s + 1), gyro rate through tau/(tau s + 1),
    # backward-difference discretised (scipy.signal.cont2discrete), step responses compared by dlsim;
    # with one axis driven the other stays at 0, where the filter's frame turns are exact
    tau, dt, n, step = 0.25, 2e-3, 600, 0.05
    numd, dend, _ = scipy.signal.cont2discrete(([1.0] if path == "accel" else [tau], [tau, 1.0]), dt,
                                               method="backward_diff")
    _, expect = scipy.signal.dlsim((np.ravel(numd), np.ravel(dend), dt), np.full(n, step))
    est = _complementary(tau, dt)
    est.update_tilts(0.0, (0.0, 0.0, 0.0), _at_rest(0.0, 0.0))    # the filter's state starts at 0
    drive = [0.0, 0.0, 0.0]
    drive[axis] = step
    out = []
    for i in range(1, n + 1):
        if path == "accel":
            tilts, _ = est.update_tilts(i * dt, (0.0, 0.0, 0.0), _at_rest(drive[0], drive[1]))
        else:
            tilts, _ = est.update_tilts(i * dt, tuple(drive), _at_rest(0.0, 0.0))
        out.append(tilts[axis])
        assert tilts[1 - axis] == pytest.approx(0.0, abs=1e-15)
    assert_allclose(out, np.ravel(expect), rtol=1e-9, atol=1e-12)


def test_a_one_axis_estimator_runs_on_a_3d_hinge_and_is_refused_on_a_ball():
    # the base's update_tilts wraps update: one tilt, about x; a ball needs two (checked at load)
    from sim.core.errors import ScenarioError
    from sim.model.scenario import validate_scenario
    from sim.model.scenario_yaml import load_raw
    from sim.strategies.estimators import Estimator, EstimatorParams, EstimatorSpec

    class OneAxis(Estimator):
        class Params(EstimatorParams):
            pass

        def update(self, t_s, gyro_rad_s, accel_m_s2):
            return math.atan2(accel_m_s2[1], accel_m_s2[2]), gyro_rad_s[0]

    est = OneAxis(params=OneAxis.Params(), period_s=2e-3, gravity_m_s2=G)
    tilts, rates = est.update_tilts(0.0, (0.01, 0.0, 0.0), _at_rest(0.1, 0.0))
    assert len(tilts) == 1 and len(rates) == 1
    assert_allclose(tilts[0], 0.1, atol=1e-12)
    raw, where = load_raw(CUBE_IMU)
    raw["sensors"]["estimator"] = EstimatorSpec(kind="one_axis", cls=OneAxis, params=OneAxis.Params())
    with pytest.raises(ScenarioError) as info:
        validate_scenario(raw, where=where)
    msg = str(info.value)
    assert "\n" not in msg and "sensors.estimator.kind: one_axis gives one tilt" in msg, msg


def _kalman(dt: float, **raw):
    return resolve_estimator({"kind": "kalman", **raw}, base_dir=Path.cwd()).build(period_s=dt, gravity_m_s2=G)


def test_the_two_axis_kalman_finds_the_tilt_and_the_gyro_bias():
    # unlike the complementary filter (steady error tau b), the bias state takes the gyro's bias out
    dt, bias, truth = 2e-3, (0.01, -0.02, 0.0), (0.1, -0.05)
    est = _kalman(dt, measurement_noise=math.radians(3.0), process_noise={"rate": 0.005, "bias": 0.001})
    for i in range(10_000):
        tilts, rates = est.update_tilts(i * dt, bias, _at_rest(*truth))
    assert_allclose(tilts, truth, atol=1e-4)
    assert_allclose([est.axes[0].bias, est.axes[1].bias], bias[:2], rtol=0.02)
    assert_allclose(rates[:2], (0.0, 0.0), atol=5e-4)


def test_each_axis_of_the_two_axis_kalman_reaches_the_riccati_gain():
    # per axis: the tilt-and-bias model's steady gain, K = P C^T (C P C^T + R)^-1 with P from
    # scipy.linalg.solve_discrete_are (Simon, Optimal State Estimation, 2006)
    import scipy.linalg
    dt, r = 2e-3, 0.03
    est = _kalman(dt, measurement_noise=r, process_noise={"rate": 0.02, "bias": 0.01})
    rng = np.random.default_rng(2)
    for i in range(40_000):
        est.update_tilts(i * dt, tuple(0.01 * rng.standard_normal(3)), _at_rest(*(0.01 * rng.standard_normal(2))))
    a, c = np.array([[1.0, -dt], [0.0, 1.0]]), np.array([[1.0, 0.0]])
    for axis in est.axes:
        q = np.array([[axis.q11, axis.q12], [axis.q12, axis.q22]])
        p = scipy.linalg.solve_discrete_are(a.T, c.T, q, np.array([[r * r]]))
        p_pred = p      # the DARE's P is the predicted covariance
        gain = p_pred @ c.T / (c @ p_pred @ c.T + r * r)
        assert_allclose(axis.gain, gain.ravel(), rtol=1e-6)


def test_kalman_balances_the_imu_cube_with_a_small_start_variance():
    # the default start variance (the measurement's) gives the first ticks a gain near 1/2: on the
    # cube the board, 0.24 m out, reads the wheels' first kick as tilt and the cube falls; a small
    # `initial_angle` keeps the gain small from the start
    est = "{kind: kalman, measurement_noise: 10 deg, process_noise: {rate: 0.005, bias: 0.0005}"
    good = run_trial(load_scenario(CUBE_IMU, overrides=(f"sensors.estimator={est}, initial_angle: 0.5 deg}}",)))
    bad = run_trial(load_scenario(CUBE_IMU, overrides=(f"sensors.estimator={est}}}",)))
    assert good.outcome == "balanced"
    assert trial_metrics3d(good)["estimator_angle_rms_error_rad"] < math.radians(0.5)
    assert bad.outcome == "fell" and bad.cause == "estimator_misread"


def test_the_imu_cube_balances_and_its_misaligned_twin_reads_the_mounting_error():
    good = run_trial(load_scenario(CUBE_IMU))
    bad = run_trial(load_scenario(ROOT / "scenarios" / "cube_imu_misaligned.yaml"))
    mg, mb = trial_metrics3d(good), trial_metrics3d(bad)
    assert good.outcome == bad.outcome == "balanced"
    assert mg["estimator"] == "complementary" and mg["estimator_angle_rms_error_rad"] < math.radians(0.5)
    # 0.5 deg about the body's x edge: the estimate's steady error is of that size
    assert math.radians(0.3) < math.hypot(*mb["estimator_tilt_mean_error_rad"]) < math.radians(0.7)
    assert math.hypot(*mg["estimator_tilt_mean_error_rad"]) < math.radians(0.25)
    # and the wheels settle where they hold the lean the filter misreads
    end = [abs(float(bad.trace.wheel(i, "speed")[bad.trace.n - 1])) for i in (1, 2, 3)]
    end_good = [abs(float(good.trace.wheel(i, "speed")[good.trace.n - 1])) for i in (1, 2, 3)]
    assert max(end) > 2 * max(end_good)


def test_a_filter_trusting_its_accelerometer_misreads_the_swing_and_the_cause_says_so():
    res = run_trial(load_scenario(CUBE_IMU, overrides=("sensors.estimator.time_constant=5 ms",)))
    assert res.outcome == "fell" and res.cause == "estimator_misread", res.cause_detail
    assert "deg RMS" in res.cause_detail


def test_an_imu_without_an_estimator_is_recorded_and_leaves_the_encoders_in_charge():
    base = load_scenario(ROOT / "scenarios" / "cube_corner.yaml", overrides=("trial.duration=0.5 s", "trial.pushes=[]"))
    with_imu = load_scenario(ROOT / "scenarios" / "cube_corner.yaml",
                             overrides=("trial.duration=0.5 s", "trial.pushes=[]", "sensors.imu={at: [0.1, 0.1, 0.15]}"))
    a, b = run_trial(base), run_trial(with_imu)
    for name in a.trace.FLOAT_COLUMNS:
        assert np.array_equal(getattr(a.trace, name)[: a.trace.n], getattr(b.trace, name)[: b.trace.n]), name
    assert np.any(b.trace.imu_accel_z_m_s2[: b.trace.n] != 0.0)


# ----------------------------------------------------------------------------- the commands, end to end

def test_run_on_the_imu_cube_writes_the_imu_and_estimate_columns(tmp_path):
    from sim.cli import main
    out = tmp_path / "out"
    assert main(["run", str(CUBE_IMU), "--out", str(out), "--set", "trial.duration=1 s",
                 "--set", "trial.pushes=[]"]) == 0
    header = (out / "trace.csv").read_text().splitlines()[0].split(",")
    for name in ("imu_gyro_x_rad_s", "imu_accel_z_m_s2", "estimated_tilt_x_rad", "estimated_tilt_y_rad",
                 "estimated_rate_z_rad_s", "measured_tilt_y_rad"):
        assert name in header, name
    import json
    metrics = json.loads((out / "metrics.json").read_text())
    assert metrics["outcome"] == "balanced" and metrics["estimator"] == "complementary"
    assert metrics["estimator_angle_rms_error_rad"] < math.radians(1.0)


@pytest.mark.parametrize("setting, key", [
    ("sensors.imu.gyro.bias_drift=0.1", "sensors.imu.gyro"),
    ("sensors.estimator={kind: complementary}", "sensors.estimator.time_constant"),
    ("timing.jitter=5 ms", "timing.jitter"),
])
def test_bad_sensing_keys_on_a_3d_device_are_one_line_and_exit_2(tmp_path, capsys, setting, key):
    from sim.cli import main
    out = tmp_path / "out"
    code = main(["run", str(CUBE_IMU), "--out", str(out), "--set", setting])
    err = capsys.readouterr().err.strip()
    assert code == 2
    assert len(err.splitlines()) == 1 and key in err, err
    assert not out.exists()


def test_timing_on_a_3d_device_applies_each_command_after_its_compute_time():
    # 1 kHz physics, 500 Hz ticks on even steps, compute time 1 ms: each tick's command reaches the
    # drives one step later, so the voltage changes only on odd steps (jitter 0: sim.physics.timing)
    base = ("trial.duration=0.4 s", "trial.pushes=[]")
    res = run_trial(load_scenario(ROOT / "scenarios" / "cube_corner.yaml",
                                  overrides=(*base, "timing={compute_time: 1 ms}")))
    v = res.trace.wheel(1, "voltage")
    changed = np.flatnonzero(np.diff(v) != 0.0) + 1
    assert changed.size > 50 and np.all(changed % 2 == 1)
    assert res.loop_overruns == 0 and trial_metrics3d(res)["loop_overruns"] == 0
    # 3 ms of compute on a 2 ms period: every other tick is skipped (rule skip)
    slow = run_trial(load_scenario(ROOT / "scenarios" / "cube_corner.yaml",
                                   overrides=(*base, "timing={compute_time: 3 ms}")))
    assert slow.loop_overruns == 100   # ticks due at 2, 6, ..., 398 ms are skipped: one per 4 ms
    # a timing section that moves nothing gives the untimed trial's numbers exactly
    plain = run_trial(load_scenario(ROOT / "scenarios" / "cube_corner.yaml", overrides=base))
    zero = run_trial(load_scenario(ROOT / "scenarios" / "cube_corner.yaml",
                                   overrides=(*base, "timing={compute_time: 0 s}")))
    for name in plain.trace.FLOAT_COLUMNS:
        assert np.array_equal(getattr(plain.trace, name)[: plain.trace.n], getattr(zero.trace, name)[: zero.trace.n]), name


@pytest.mark.slow
def test_check_on_the_imu_cube_reports_the_estimators_errors(tmp_path):
    from sim.cli import main
    out = tmp_path / "check"
    code = main(["check", str(CUBE_IMU), "--out", str(out), "--trials", "1", "--workers", "1",
                 "--set", "requirements.hold_time=10 s"])
    assert code in (0, 1)
    import json
    sensing = json.loads((out / "verdict.json").read_text())["sensing"]
    assert sensing["estimator"] == "complementary"
    assert abs(sensing["estimator_steady_error_rad"]) < math.radians(0.5)
    assert sensing["push_tilt_error_rad"] is not None and sensing["push_tilt_error_rad"] > 0.0
    assert "## Sensing" in (out / "report.md").read_text()


def test_encoder_bus_limits_apply_per_wheel_on_a_3d_device():
    # wheel 1 starts past the encoder's tracking limit: its counts stop (speed from counts reads 0,
    # sim.physics.sensors) until it slows below the limit; check's criterion reports the time
    from sim.studies.sensing_checks import sensing_checks3d
    sc = load_scenario(ROOT / "scenarios" / "cube_corner.yaml", overrides=(
        "trial.duration=0.5 s", "trial.pushes=[]", "trial.start.wheel_speed=[300, 0, 0]",
        "sensors.wheel.max_speed=250 rad/s", "sensors.wheel.update_rate=250 Hz"))
    res = run_trial(sc)
    tr = res.trace
    ticks = np.arange(0, tr.n, sc.control_steps)[4:]
    past = ticks[np.abs(tr.w1_speed[ticks - 2]) > 260.0]       # the value read is 2 ms old (sensors.delay)
    assert past.size > 10
    assert np.all(tr.m_w1[past] == 0.0)
    criteria, summary = sensing_checks3d(sc, {"nominal": res}, {}, push_scenario=None)
    (c,) = criteria
    assert c["name"] == "encoder_over_speed_s" and not c["passed"] and c["value"] > 0.0
    assert "wheel (w1_speed)" in c["note"] and summary == {}


def test_a_one_axis_plugin_estimator_runs_isolated_on_a_3d_hinge(monkeypatch):
    # a plug-in's trial runs in a forked child with a shared trace: the IMU's columns come back;
    # one that raises ends the trial as strategy_failed with its message
    from sim.strategies import ALLOW_OUTSIDE_ENV
    monkeypatch.setenv(ALLOW_OUTSIDE_ENV, "1")
    plugin = str(ROOT / "tests" / "plugins" / "estimator_plugins.py")
    base = ("trial.duration=0.6 s", "trial.pushes=[]", "sensors.imu={at: [0, 0, 0.05]}")
    ok = run_trial(load_scenario(ROOT / "scenarios" / "tilted_axis.yaml", overrides=(
        *base, f"sensors.estimator={{plugin: '{plugin}:TrueTiltOnly'}}")))
    assert ok.outcome == "balanced", ok.message
    tr = ok.trace
    # at rest on the first tick the accelerometer's tilt, turned to upright about the hinge, is the
    # true tilt (an ideal IMU); later it also reads the body's kick (the plug-in does not filter)
    assert_allclose(tr.estimated_tilt_x_rad[0], tr.tilt_x[0], atol=1e-12)
    assert np.max(np.abs(tr.estimated_tilt_x_rad[: tr.n] - tr.tilt_x[: tr.n])) > math.radians(1.0)
    broken = run_trial(load_scenario(ROOT / "scenarios" / "tilted_axis.yaml", overrides=(
        *base, f"sensors.estimator={{plugin: '{plugin}:BreaksAfter', after_s: 0.2}}")))
    assert broken.outcome == "strategy_failed" and "IMU bus lost" in broken.message
