"""The engine model against published mechanics, an independent scipy integration, and the sensors.

Conventions (sim.model.scenario): angle 0 upright, +-pi hanging; wheel speed relative to the body;
positive voltage accelerates the wheel positively and turns the body negatively.
References: ../shared/references.md (Spong, Corke & Lozano 2001; Astrom, Block & Spong 2007 for
the reaction-wheel equations; the pendulum period with scipy.special.ellipk).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.integrate import solve_ivp
from scipy.special import ellipk

from conftest import make_scenario
from sim.core.angles import wrap_angle, wrap_angles
from sim.model.device import Device
from sim.model.scenario import Sensors
from sim.physics.engine import EngineModel
from sim.physics.sensors import SensorSuite
from sim.run.trial import run_trial


def zero_crossings(t: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Times where x changes sign, by linear interpolation between samples."""
    i = np.nonzero(np.signbit(x[1:]) != np.signbit(x[:-1]))[0]
    return t[i] - x[i] * (t[i + 1] - t[i]) / (x[i + 1] - x[i])


def swing(amplitude_deg: float, *, duration: float = 2.5):
    """Coasting wheel (open winding), no friction, released at rest `amplitude_deg` from hanging."""
    sc = make_scenario(sensors={"rate": 100}, strategy={"kind": "coast"},
                       trial={"duration": duration, "start": {"angle": math.pi - math.radians(amplitude_deg)}})
    return run_trial(sc)


# ----------------------------------------------------------------------------- free swing

def test_large_amplitude_factor_matches_reference_check_values():
    # The project's period formula (sim.fit.fit_swing.period_ratio, used by the free-swing fit) against
    # references.md, "Pendulum identification": T/T0 = (2/pi) K(m), m = sin^2(theta0/2); check values
    # [calc] 1.001907, 1.017409, 1.180341 (7 digits quoted: rtol 1e-6).
    from sim.fit.fit_swing import period_ratio

    assert_allclose([period_ratio(math.radians(a)) for a in (10, 30, 90)], [1.001907, 1.017409, 1.180341], rtol=1e-6)
    # and against the period integral itself, T/T0 = (2/pi) int_0^(pi/2) dphi / sqrt(1 - k^2 sin^2 phi),
    # k = sin(theta0/2) (the complete elliptic integral's definition, e.g. Abramowitz & Stegun 17.3.1),
    # by scipy's quad at 120 deg, where a wrong parameter (k instead of m = k^2) is off by 20%
    from scipy.integrate import quad

    k = math.sin(math.radians(120) / 2)
    integral = quad(lambda p: 1.0 / math.sqrt(1.0 - (k * math.sin(p)) ** 2), 0.0, math.pi / 2, epsabs=1e-13)[0]
    assert_allclose(period_ratio(math.radians(120)), 2 / math.pi * integral, rtol=1e-9)


@pytest.mark.parametrize("amplitude_deg", [10, 30, 90])
def test_free_swing_period_with_coasting_wheel(amplitude_deg):
    # Compound pendulum: T0 = 2 pi sqrt(J / (mbar g)) (references.md, "Pendulum identification"),
    # J WITHOUT the wheel's spin inertia: a wheel coasting on a frictionless bearing keeps its
    # absolute orientation and takes no part in the swing (references.md, dynamics section).
    # Exact large-amplitude period T = T0 (2/pi) K(sin^2(theta0/2)) (same source, scipy ellipk).
    # Tolerance 1e-4: measured at 1 ms steps the model agrees to ~2e-6; counting I_w in J would
    # lengthen T by sqrt(1 + I_w/J) - 1 = 0.7% for this device, 70x the tolerance.
    r = swing(amplitude_deg)
    d = r.device
    x = wrap_angles(r.trace.view("angle") - math.pi)  # angle from hanging
    crossings = zero_crossings(r.trace.view("t"), x)
    assert len(crossings) >= 4
    measured = 2 * np.mean(np.diff(crossings))
    t0 = 2 * math.pi * math.sqrt(d.J_kg_m2 / (d.mbar_kg_m * d.gravity_m_s2))
    exact = t0 * 2 / math.pi * ellipk(math.sin(math.radians(amplitude_deg) / 2) ** 2)
    assert_allclose(measured, exact, rtol=1e-4)
    # the swing's amplitude is kept: no friction, no hidden damping (energy conservation)
    assert_allclose(np.max(np.abs(x)), math.radians(amplitude_deg), rtol=1e-4)


@pytest.mark.parametrize("step", [1e-3, 1e-2], ids=["1ms", "10ms"])
def test_energy_from_trace_rows_stays_flat_in_a_free_swing(step):
    # A free, frictionless swing (open winding: the wheel's absolute speed stays 0, so only the body
    # stores energy) keeps E = 1/2 J theta_d^2 + mbar g (cos theta - 1) (conservation of energy,
    # any mechanics text). Computed from trace rows, E must stay flat: the angle and rate columns
    # of a row are at the same instant. With the angle half a step ahead of the rate, E strayed by
    # 3.4% (10 ms) and 0.34% (1 ms) of the swing's energy range mbar g (1 - cos 60 deg); with both at
    # one instant, 0.11% and 0.001% were seen (the engine's own second-order error).
    # Tolerance: 0.5% of that range at 10 ms, 0.01% at 1 ms.
    amplitude = math.radians(60)
    sc = make_scenario(world={"step": step}, sensors={"rate": 1.0 / step if step > 2e-3 else 100},
                       strategy={"kind": "coast"},
                       trial={"duration": 3.0, "start": {"angle": math.pi - amplitude}})
    r = run_trial(sc)
    d = r.device
    e = np.array([d.body_energy_j(a, w) for a, w in zip(r.trace.view("angle"), r.trace.view("rate"))])
    scale = d.mbar_kg_m * d.gravity_m_s2 * (1 - math.cos(amplitude))
    assert np.max(np.abs(r.trace.view("rate"))) > 4.0        # it did swing (peak ~6 rad/s)
    assert_allclose(e, e[0], atol=(5e-3 if step > 2e-3 else 1e-4) * scale)


def test_coasting_wheel_keeps_its_absolute_orientation():
    # With no bearing friction and no motor current nothing exerts a torque on the wheel about its
    # axis, so its absolute speed theta_d + phi_d stays 0 (Newton-Euler about the wheel's axis;
    # references.md, I_w (theta_dd + phi_dd) = tau = 0). Tolerance 1e-6 rad/s vs ~3.7 rad/s swing rates.
    r = swing(30, duration=1.0)
    absolute = r.trace.view("rate") + r.trace.view("wheel_speed")
    assert np.max(np.abs(r.trace.view("rate"))) > 3.0  # the body did swing
    assert_allclose(absolute, 0.0, atol=1e-6)


def test_pivot_coulomb_friction_amplitudes_and_rest_band():
    # Dry friction T_c at the pivot: between turning points a_n and a_n+1 (on opposite sides of
    # hanging) the energy lost equals the friction work, mbar g (cos a_n+1 - cos a_n) = T_c (a_n + a_n+1);
    # for small angles this is the linear decay of 4 T_c/(mbar g) per full cycle, and the motion
    # stops within |theta| < T_c/(mbar g) (references.md, "Coulomb"; Den Hartog, Mechanical
    # Vibrations). Tolerance 2e-5 rad on each turning point (observed 1e-6; the decay is 9e-3 rad
    # per half cycle, so a 1% error in the friction torque shows as ~1e-3 rad by the end).
    from scipy.optimize import brentq

    t_c, a0 = 2e-3, math.radians(6)
    sc = make_scenario(sensors={"rate": 100}, body={"pivot_friction": {"coulomb": t_c}},
                       strategy={"kind": "coast"}, trial={"duration": 6.0, "start": {"angle": math.pi - a0}})
    r = run_trial(sc)
    k = r.device.mbar_kg_m * r.device.gravity_m_s2
    predicted = [a0]
    while k * (1.0 - math.cos(predicted[-1])) > t_c * predicted[-1]:  # it still swings through hanging
        a = predicted[-1]
        predicted.append(brentq(lambda b: k * (math.cos(b) - math.cos(a)) - t_c * (a + b), 0.0, a))
    x = wrap_angles(r.trace.view("angle") - math.pi)
    ax = np.abs(x)
    turning = ax[1:-1][(ax[1:-1] > ax[:-2]) & (ax[1:-1] >= ax[2:])]  # local maxima of |angle from hanging|
    assert len(predicted) >= 10
    assert_allclose(turning[: len(predicted) - 1], predicted[1:], atol=2e-5)
    assert abs(x[-1]) < math.asin(t_c / k)          # at rest inside the dead band
    assert_allclose(r.trace.view("rate")[-200:], 0.0, atol=1e-9)  # and held there by stiction


def test_push_gives_the_body_impulse_over_inertia():
    # An angular impulse P about the pivot changes the body's rate by P / J (impulse-momentum, any
    # mechanics text); a coasting frictionless wheel takes no part, so J excludes I_w. Zero gravity.
    # Tolerance 1e-9 relative.
    impulse = 0.01
    sc = make_scenario(world={"gravity": 0}, strategy={"kind": "coast"},
                       trial={"duration": 0.2, "pushes": [{"at": 0.1, "impulse": impulse}]})
    r = run_trial(sc)
    rate = r.trace.view("rate")
    assert_allclose(rate[:100], 0.0, atol=1e-12)
    assert_allclose(rate[-1], impulse / r.device.J_kg_m2, rtol=1e-9)


# ----------------------------------------------------------------------------- engine defaults off

def test_engine_has_no_joint_speed_clamp_and_no_link_damping():
    # references.md, "pybullet facts": every joint is clamped to +-100 rad/s by default and links carry
    # 0.04 linear/angular damping. Both are switched off in sim.physics.engine: a frictionless wheel set to
    # 500 rad/s in zero gravity must keep exactly that speed, and the body its rate
    # (angular momentum conservation, any mechanics text). Tolerance 1e-9 relative.
    sc = make_scenario(world={"gravity": 0})
    device = Device.from_scenario(sc)
    with EngineModel(device, step_s=1e-3) as engine:
        engine.reset(angle_rad=0.3, rate_rad_s=2.0, wheel_speed_rad_s=500.0)
        for _ in range(200):
            engine.advance(0.0, 0.0)
        angle, rate, _, wheel = engine.read()
    assert_allclose([rate, wheel], [2.0, 500.0], rtol=1e-9)
    assert_allclose(angle, 0.3 + 2.0 * 0.2, rtol=1e-9)


def test_torque_spins_a_wheel_past_300_rad_s_at_the_constant_torque_rate():
    # Constant torque on a wheel of a locked body: w(t) = tau t / I_w (Newton's second law for rotation).
    # 0.02 N m on I_w = 1.25e-4 kg m^2 for 3 s -> 480 rad/s; pybullet's default 100 rad/s clamp
    # would stop it at 100. Tolerance 1e-9 relative.
    sc = make_scenario(body={"locked": True})
    device = Device.from_scenario(sc)
    tau, n, dt = 0.02, 3000, 1e-3
    with EngineModel(device, step_s=dt) as engine:
        engine.reset(angle_rad=0.0, rate_rad_s=0.0)
        for _ in range(n):
            engine.advance(0.0, tau)
        wheel = engine.read()[3]
    assert_allclose(wheel, tau * n * dt / device.I_w_kg_m2, rtol=1e-9)
    assert wheel > 300.0


# ----------------------------------------------------------------------------- momentum

def test_no_gravity_body_rate_over_wheel_speed_is_minus_iw_over_j_plus_iw():
    # With no gravity and no friction the motor's torque is internal: J theta_d + I_w (theta_d + phi_d)
    # stays 0 from rest, so theta_d / phi_d = -I_w / (J + I_w) (references.md; conservation of angular
    # momentum, any mechanics text). Tolerance 1e-9 relative (the engine conserves it to rounding).
    sc = make_scenario(world={"gravity": 0}, strategy={"kind": "fixed_voltage", "volts": 6},
                       trial={"duration": 0.3})
    r = run_trial(sc)
    d = r.device
    rate, wheel = r.trace.view("rate"), r.trace.view("wheel_speed")
    assert wheel[-1] > 50.0  # the motor did spin the wheel up
    ratio = -d.I_w_kg_m2 / (d.J_kg_m2 + d.I_w_kg_m2)
    assert_allclose(rate[1:] / wheel[1:], ratio, rtol=1e-9)


# ----------------------------------------------------------------------------- scipy reference

PIVOT_VISCOUS, BEARING_VISCOUS, BEARING_COULOMB = 2e-4, 1e-5, 2e-3  # N m s/rad, N m s/rad, N m (invented)
START_ANGLE, START_RATE, VOLTS = math.radians(150), 0.5, 3.0


def reference_solution(d: Device, t: np.ndarray, *, coulomb: float) -> np.ndarray:
    """Independent integration of the reaction-wheel equations (references.md, Spong et al. 2001):

        J theta_dd = mbar g sin(theta) - b_p theta_d - tau_w
        I_w (theta_dd + phi_dd) = tau_w,   tau_w = k_t (V - k_e phi_d) / R - b_w phi_d - T_c sign(phi_d)

    (the wheel's net torque tau_w reacts on the body). The Coulomb term is taken as +T_c: the
    caller checks that phi_d stays positive, where that is exact.
    Returns rows theta, theta_d, phi, phi_d at times t.
    """
    J, iw, mg = d.J_kg_m2, d.I_w_kg_m2, d.mbar_kg_m * d.gravity_m_s2
    kt, ke, R = d.k_t_n_m_a, d.k_e_v_s_rad, d.resistance_ohm

    def rhs(_t, x):
        th, thd, _ph, phd = x
        tau_w = kt * (VOLTS - ke * phd) / R - BEARING_VISCOUS * phd - coulomb
        thdd = (mg * math.sin(th) - PIVOT_VISCOUS * thd - tau_w) / J
        return [thd, thdd, phd, tau_w / iw - thdd]

    sol = solve_ivp(rhs, (0.0, t[-1]), [START_ANGLE, START_RATE, 0.0, 0.0], t_eval=t,
                    method="DOP853", rtol=1e-10, atol=1e-12)
    assert sol.success
    return sol.y


def engine_run(step: float, *, coulomb: float):
    sc = make_scenario(world={"step": step},
                       body={"pivot_friction": {"viscous": PIVOT_VISCOUS}},
                       wheel={"bearing_friction": {"viscous": BEARING_VISCOUS, "coulomb": coulomb}},
                       strategy={"kind": "fixed_voltage", "volts": VOLTS},
                       trial={"duration": 3.0, "start": {"angle": START_ANGLE, "rate": START_RATE}})
    return run_trial(sc)


@pytest.mark.parametrize("coulomb", [0.0, BEARING_COULOMB], ids=["viscous", "viscous+coulomb"])
def test_engine_trace_matches_scipy_integration(coulomb):
    # 3 s open loop at 3 V from 150 deg with 0.5 rad/s: the body swings through ~0.95 rad and the
    # wheel reaches ~90-95 rad/s. Tolerances: 3e-3 rad on the angle and 0.03 rad/s on the wheel
    # speed at a 1 ms step. The engine integrates with semi-implicit Euler (first order): the
    # observed gaps were 1.6e-3 rad and 0.018 rad/s and halve with the step (next test).
    r = engine_run(1e-3, coulomb=coulomb)
    t = r.trace.view("t")
    ref = reference_solution(r.device, t, coulomb=coulomb)
    assert np.all(ref[3][1:] > 0.1), "Coulomb term is modelled as +T_c: the wheel must not reverse"
    assert np.ptp(ref[0]) > 0.5  # the body really swung
    assert_allclose(r.trace.view("angle"), ref[0], atol=3e-3)
    assert_allclose(r.trace.view("rate"), ref[1], atol=0.02)
    assert_allclose(r.trace.view("wheel_speed"), ref[3], atol=0.03)


def test_engine_error_against_scipy_shrinks_with_the_step():
    # A consistent integrator's error falls as the step falls; a first-order one about halves with
    # the step. A modelling mistake (a missing term) would leave the gap roughly unchanged.
    # We require at least a 1.6x reduction from 1 ms to 0.5 ms (observed: 2.0x).
    errors = []
    for step in (1e-3, 5e-4):
        r = engine_run(step, coulomb=BEARING_COULOMB)
        ref = reference_solution(r.device, r.trace.view("t"), coulomb=BEARING_COULOMB)
        errors.append(np.max(np.abs(r.trace.view("angle") - ref[0])))
    assert errors[1] < errors[0] / 1.6


# ----------------------------------------------------------------------------- angle wrapping

@pytest.mark.parametrize("angle, wrapped", [
    (math.pi, math.pi), (-math.pi, math.pi), (3 * math.pi, math.pi), (0.0, 0.0),
    (2 * math.pi + 0.5, 0.5), (-2 * math.pi - 0.5, -0.5), (math.pi + 0.1, -math.pi + 0.1),
])
def test_angles_wrap_into_minus_pi_exclusive_to_pi_inclusive(angle, wrapped):
    # Issue 2's convention: angles are reported in (-pi, pi]; hanging is +pi, never -pi.
    # Tolerance 1e-12 rad (rounding in the modulo).
    assert_allclose(wrap_angles(np.array([angle]))[0], wrapped, atol=1e-12)
    assert_allclose(wrap_angle(angle), wrapped, atol=1e-12)


# ----------------------------------------------------------------------------- sensors

def _sensor_suite(n_ticks: int = 1, seed: int = 0, step_s: float = 1e-3, **kw) -> SensorSuite:
    return SensorSuite(Sensors.model_validate(kw), step_s=step_s, n_ticks=n_ticks, rng=np.random.default_rng(seed))


def _history(n: int, *, angle0=0.1, rate=2.0, wheel_speed=100.0, step_s=1e-3):
    t = np.arange(n) * step_s
    return angle0 + rate * t, np.full(n, rate), wheel_speed * t, np.full(n, wheel_speed)


def test_angle_encoder_quantises_to_whole_counts():
    # An incremental encoder reports whole counts: the reading is a multiple of 2 pi / counts and
    # lies within one count below the true angle (common practice, no source). Tolerance 1e-12 rad.
    counts = 4096
    res = 2 * math.pi / counts
    suite = _sensor_suite(n_ticks=50, rate=1000, angle={"counts_per_rev": counts})
    angle, rate, wa, ws = _history(50)
    for k in range(50):
        measured = suite.read(k, angle, rate, wa, ws)[0]
        assert 0.0 <= angle[k] - measured < res
        assert_allclose(measured / res, round(measured / res), atol=1e-9)


def test_bias_and_delay():
    # A delayed reading is the true state `delay` earlier; a bias adds a fixed offset
    # (common practice, no source). Delay 3 ms at 1 ms steps = 3 steps. Tolerance 1e-12.
    suite = _sensor_suite(n_ticks=60, rate=1000, delay=0.003, angle={"bias": 0.01},
                          rate_gyro={"bias": 0.2})
    angle, rate, wa, ws = _history(60, rate=2.0, wheel_speed=50.0)
    rate = rate + np.linspace(0, 1, 60)  # a changing rate, so a wrong delay shows
    ws = ws + np.linspace(0, 5, 60)
    for k in range(3, 60):
        a, r, w = suite.read(k, angle, rate, wa, ws)
        assert_allclose([a, r, w], [angle[k - 3] + 0.01, rate[k - 3] + 0.2, ws[k - 3]], atol=1e-12)


def test_trial_trace_shows_the_delayed_readings():
    # Through the whole runner: with a 3 ms delay and a reading every 1 ms step, the measured columns
    # at row k equal the true state at row k - 3 (a delayed reading is the true state `delay`
    # earlier; common practice, no source). Ideal sensors otherwise. Tolerance 1e-12.
    sc = make_scenario(sensors={"rate": 1000, "delay": "3 ms", "rate_gyro": {}},
                       strategy={"kind": "coast"},
                       trial={"duration": 0.2, "start": {"angle": "150 deg", "wheel_speed": 20.0}})
    tr = run_trial(sc).trace
    assert np.ptp(tr.view("rate")) > 0.1  # the state changes, so a wrong delay shows
    assert_allclose(tr.view("meas_angle")[3:], wrap_angles(tr.view("angle")[:-3]), atol=1e-12)
    assert_allclose(tr.view("meas_rate")[3:], tr.view("rate")[:-3], atol=1e-12)
    assert_allclose(tr.view("meas_wheel")[3:], tr.view("wheel_speed")[:-3], atol=1e-12)


def test_rate_without_gyro_is_the_angle_difference_over_one_period():
    # Backward difference of successive angle readings over one control period (sim.physics.sensors
    # docstring); exact for a constant rate. 500 Hz at 1 ms steps: one reading every 2 steps.
    suite = _sensor_suite(n_ticks=20, rate=500)
    angle, rate, wa, ws = _history(40, rate=-1.5)
    readings = [suite.read(k, angle, rate, wa, ws)[1] for k in range(0, 40, 2)]
    assert_allclose(readings[1:], -1.5, rtol=1e-9)


def test_wheel_encoder_speed_within_one_count_per_period():
    # Speed from encoder counts over one period: error below one count per period,
    # 2 pi / (counts * period) (common practice, no source).
    counts, rate_hz = 2048, 500
    suite = _sensor_suite(n_ticks=50, rate=rate_hz, wheel={"counts_per_rev": counts})
    angle, rate, wa, ws = _history(100, wheel_speed=123.4)
    speeds = [suite.read(k, angle, rate, wa, ws)[2] for k in range(0, 100, 2)]
    assert_allclose(speeds, 123.4, atol=2 * math.pi / counts * rate_hz)


def test_noise_statistics_and_seeded_reproducibility():
    # White Gaussian noise of standard deviation sigma: over N = 20000 readings the sample standard
    # deviation lies within 5% of sigma (its standard error is sigma / sqrt(2N) = 0.5%) and the mean
    # within 5 sigma / sqrt(N) of the bias (any statistics text).
    n, sigma_a, sigma_g, bias_g = 20000, 0.002, 0.05, 0.01
    kw = dict(rate=1000, angle={"noise": sigma_a}, rate_gyro={"noise": sigma_g, "bias": bias_g},
              wheel={"noise": 0.5})
    angle, rate, wa, ws = np.full(n, 0.3), np.zeros(n), np.zeros(n), np.zeros(n)

    def readings(seed):
        suite = _sensor_suite(n_ticks=n, seed=seed, **kw)
        return np.array([suite.read(k, angle, rate, wa, ws) for k in range(n)])

    first = readings(7)
    err_a, err_g = first[:, 0] - 0.3, first[:, 1]
    assert_allclose([np.std(err_a), np.std(err_g), np.std(first[:, 2])], [sigma_a, sigma_g, 0.5], rtol=0.05)
    assert abs(np.mean(err_a)) < 5 * sigma_a / math.sqrt(n)
    assert abs(np.mean(err_g) - bias_g) < 5 * sigma_g / math.sqrt(n)
    # the three channels draw independent noise: sample correlation near 0 (|r| < 5 / sqrt(N))
    assert abs(np.corrcoef(err_a, err_g)[0, 1]) < 5 / math.sqrt(n)
    assert np.array_equal(readings(7), first)        # same seed, same noise
    assert not np.array_equal(readings(8), first)    # another seed, other noise


def test_trial_seed_fixes_the_measured_columns():
    # One seed fixes all randomness of a trial (issue 2); a different seed changes the noisy readings.
    def measured(seed):
        sc = make_scenario(sensors={"angle": {"noise": "0.1 deg"}, "rate_gyro": {"noise": 0.02}},
                           trial={"duration": 0.1, "seed": seed})
        return run_trial(sc).trace.view("meas_angle").copy()

    a = measured(3)
    assert np.array_equal(a, measured(3))
    assert not np.array_equal(a, measured(4))
