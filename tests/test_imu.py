"""The IMU model (sim.physics.imu) and its place in a trial (sim.physics.imu_sensing).

Sources: IEEE Std 952-1997 (Annex C: the Allan variance and its terms), rigid-body kinematics
(references.md, Sensing; e.g. Meriam & Kraige, Dynamics, relative acceleration in rotating axes, from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from conftest import make_scenario
from sim.core.errors import ScenarioError
from sim.model.sensing import ImuSpec
from sim.physics.imu import ImuModel, hinge_motion, imu_matrix, rotation_x, specific_force_body
from sim.run.trial import run_trial


def allan_deviation(rate: np.ndarray, dt: float, m: int) -> float:
    """Overlapping Allan deviation of rate samples at tau = m dt (IEEE Std 952-1997, Annex C:
    sigma^2(tau) = <(theta[k+2m] - 2 theta[k+m] + theta[k])^2> / (2 tau^2), theta the integrated rate)."""
    theta = np.concatenate([[0.0], np.cumsum(rate) * dt])
    d = theta[2 * m:] - 2.0 * theta[m:-m] + theta[:-2 * m]
    return float(np.sqrt(np.mean(d**2) / (2.0 * (m * dt) ** 2)))


def _gyro_x_samples(n: int, rate_hz: float, *, density: float, walk: float, seed: int) -> np.ndarray:
    spec = ImuSpec.model_validate({"gyro": {"noise_density": density, "bias_instability": walk}})
    imu = ImuModel(spec, rate_hz=rate_hz, gravity_m_s2=9.81, rng=np.random.default_rng(seed))
    return np.array([imu.sample_hinge(i / rate_hz, 0.0, 0.0, 0.0)[0][0] for i in range(n)])   # a body at rest


def test_gyro_allan_deviation_shows_noise_density_and_bias_walk():
    # IEEE Std 952-1997, Annex C: white rate noise N gives sigma(tau) = N / sqrt(tau); a random walk
    # of the bias K gives K sqrt(tau / 3); together sigma^2 = N^2/tau + K^2 tau/3, whose minimum (the
    # bias-instability floor of this model) lies at tau* = sqrt(3) N / K with sigma* = sqrt(2 N K / sqrt(3)).
    N, K, fs = 0.01, 1e-3, 10.0
    rate = _gyro_x_samples(200_000, fs, density=N, walk=K, seed=7)
    short = allan_deviation(rate, 1.0 / fs, 10)            # tau = 1 s: white noise dominates
    assert_allclose(short, math.sqrt(N**2 / 1.0 + K**2 * 1.0 / 3.0), rtol=0.05)
    tau_long = 300.0                                       # K term 10x the white one
    long = allan_deviation(rate, 1.0 / fs, int(tau_long * fs))
    assert_allclose(long, math.sqrt(N**2 / tau_long + K**2 * tau_long / 3.0), rtol=0.2)
    taus = np.geomspace(1.0, 1000.0, 25)
    adev = np.array([allan_deviation(rate, 1.0 / fs, int(round(t * fs))) for t in taus])
    tau_min = math.sqrt(3.0) * N / K                        # 17.3 s
    assert_allclose(adev.min(), math.sqrt(2.0 * N * K / math.sqrt(3.0)), rtol=0.15)
    assert tau_min / 2.5 < taus[np.argmin(adev)] < tau_min * 2.5


def test_white_noise_alone_falls_as_one_over_root_tau():
    # IEEE Std 952-1997, Annex C: a slope of -1/2 on the log-log Allan plot, level N at tau = 1 s
    N, fs = 0.003, 100.0
    rate = _gyro_x_samples(100_000, fs, density=N, walk=0.0, seed=3)
    for tau in (0.1, 1.0, 10.0):
        assert_allclose(allan_deviation(rate, 1.0 / fs, int(tau * fs)), N / math.sqrt(tau), rtol=0.08)


def test_accelerometer_on_a_swinging_arm_reads_tangential_and_centripetal_terms():
    # rigid-body kinematics: at radius r along the body axis, besides gravity, r theta_dd along the
    # tangent (-y in the body frame for a positive theta_dd) and r theta_d^2 towards the pivot (-z)
    r, g = 0.15, 9.81
    for theta, thd, thdd in ((0.0, 0.0, 0.0), (0.3, 2.0, -5.0), (-1.2, -7.0, 40.0), (2.5, 0.5, 3.0)):
        f = specific_force_body(*hinge_motion(theta, thd, thdd), (0.0, 0.0, r), (0.0, 0.0, 0.0), (0.0, 0.0, -g))
        assert_allclose(f, (0.0, g * math.sin(theta) - r * thdd, g * math.cos(theta) - r * thd**2), atol=1e-12)


def test_imu_in_a_trial_matches_the_mount_points_own_acceleration():
    # Independent of the formula: the mount point's world position p = R(theta) r from the trace's
    # angles, differentiated twice (central differences), minus gravity, turned into the body frame.
    r = 0.12
    sc = make_scenario(trial={"duration": 0.6, "start": {"angle": 0.6}},
                       sensors={"rate": 1000, "imu": {"at": [0.0, 0.0, r]}})
    res = run_trial(sc)
    dt, th = sc.world.step, res.trace.view("angle")
    k = np.arange(2, res.trace.n - 2)
    p = np.stack([np.zeros_like(th), -r * np.sin(th), r * np.cos(th)])    # Rx(theta) (0, 0, r)
    acc = (p[:, k + 1] - 2 * p[:, k] + p[:, k - 1]) / dt**2
    acc[2] += sc.world.gravity                                              # minus gravity (0, 0, -g)
    body = np.stack([np.einsum("ji,j->i", np.array(rotation_x(th[i])), acc[:, j]) for j, i in enumerate(k)], axis=1)
    read = np.stack([res.trace.view(f"imu_accel_{a}_m_s2")[k] for a in "xyz"])
    # the reading's theta'' is the rate's backward difference over the last step, half a step older
    # than the central difference above: they differ by r |d theta''| / 2 per step, up to 0.04 m/s^2
    # in this swing (0.4% of g); the kinematics themselves agree to that
    assert_allclose(read, body, atol=0.05)
    assert np.max(np.abs(read[1])) > 1.0            # a real swing, not a body at rest
    assert_allclose(res.trace.view("imu_gyro_x_rad_s"), res.trace.view("rate"), atol=1e-12)


def test_axis_mapping_and_misalignment():
    # a swapped, inverted axis reads the body's vector component it points along (definition of `axes`)
    spec = ImuSpec.model_validate({"orientation": {"axes": ["y", "-x", "z"]}})
    assert_allclose(np.array(imu_matrix(spec.orientation)) @ [1.0, 2.0, 3.0], [2.0, -1.0, 3.0], atol=1e-15)
    # a roll delta about the pivot axis makes a body at rest upright read a tilt of delta
    spec = ImuSpec.model_validate({"orientation": {"roll": math.radians(0.5)}})
    f = np.array(imu_matrix(spec.orientation)) @ [0.0, 0.0, 9.81]
    assert_allclose(math.atan2(f[1], f[2]), math.radians(0.5), rtol=1e-12)


def test_scale_bias_range_and_resolution():
    spec = ImuSpec.model_validate({"gyro": {"bias": [0.1, 0.0, 0.0], "scale_error": 0.02, "range": 5.0,
                                            "resolution": 0.01}})
    imu = ImuModel(spec, rate_hz=100.0, gravity_m_s2=9.81, rng=np.random.default_rng(0))
    gyro, _ = imu.sample(0.0, *hinge_motion(0.0, 1.234, 0.0))
    assert_allclose(gyro[0], round((1.234 * 1.02 + 0.1) / 0.01) * 0.01, atol=1e-12)
    gyro, _ = imu.sample(0.01, *hinge_motion(0.0, 50.0, 0.0))
    assert gyro[0] == 5.0                                   # saturated at the range


def test_imu_without_estimator_leaves_the_law_its_encoder():
    base = make_scenario(strategy={"kind": "lqr"}, trial={"duration": 0.3, "start": {"angle": 0.05}})
    imu = make_scenario(strategy={"kind": "lqr"}, trial={"duration": 0.3, "start": {"angle": 0.05}},
                        sensors={"imu": {"at": [0, 0, 0.1], "gyro": {"noise_density": 0.01}}})
    a, b = run_trial(base), run_trial(imu)
    for name in ("angle", "meas_angle", "voltage", "wheel_speed"):
        assert np.array_equal(a.trace.view(name), b.trace.view(name)), name   # its own draws: encoder noise unchanged
    assert "imu_gyro_x_rad_s" in b.trace.extra and not a.trace.extra


def test_imu_only_device_needs_an_estimator():
    with pytest.raises(ScenarioError, match=r"sensors\.estimator: an IMU-only device"):
        make_scenario(sensors={"angle": None, "imu": {}})
    with pytest.raises(ScenarioError, match=r"sensors\.angle: a device needs an angle sensor"):
        make_scenario(sensors={"angle": None})
    with pytest.raises(ScenarioError, match=r"sensors\.estimator: an estimator needs an IMU"):
        make_scenario(sensors={"estimator": {"kind": "complementary", "time_constant": 0.5}})


def test_hinge_fast_path_equals_the_general_rigid_body_formula():
    spec = ImuSpec.model_validate({"at": [0.01, -0.02, 0.13], "orientation": {"axes": ["z", "-x", "y"], "roll": 0.01,
                                                                             "pitch": -0.02, "yaw": 0.03}})
    a, b = (ImuModel(spec, rate_hz=500.0, gravity_m_s2=9.81, rng=np.random.default_rng(5)) for _ in range(2))
    rng = np.random.default_rng(6)
    for i in range(50):
        th, w, al = rng.uniform(-4, 4), rng.uniform(-30, 30), rng.uniform(-500, 500)
        assert_allclose(np.array(a.sample_hinge(i * 2e-3, th, w, al)), np.array(b.sample(i * 2e-3, *hinge_motion(th, w, al))),
                        rtol=1e-12, atol=1e-12)
