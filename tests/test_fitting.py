"""Fits to bench logs: reference formulas, synthetic logs with known truth, engine round trips, CLI.

Synthetic logs come from scipy's solve_ivp integrating the textbook equations written out in this
file (not the engine, not the fitting code): the pendulum with viscous and Coulomb pivot friction,
the DC motor with inductance and bearing friction, the coasting wheel. Noise, uneven sample times,
wrapped angles and quiet lead-ins are added. Tolerances are stated beside each check; they are a
few times the errors seen with the noise used here.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import yaml
from numpy.testing import assert_allclose
from scipy.integrate import quad, solve_ivp

from sim.core.errors import InputError
from sim.model.device import Device
from sim.fit.fit_swing import (coulomb_loss_per_cycle, damping_ratio_from_decrement, decrement_from_damping_ratio,
                               log_decrement, period_ratio, swing_speed_integral)
from sim.fit.bench_tests import fit_log
from sim.fit.logs import BenchLog, read_log

from conftest import make_scenario, scenario_dict, write_scenario

RNG_SEED = 20


# ----------------------------------------------------------------------------- reference formulas

def test_large_amplitude_period_ratio_matches_references():
    # references.md, "Pendulum identification" [calc]: T/T0 at 10, 30, 90 deg = 1.001907, 1.017409, 1.180341
    assert_allclose(period_ratio(np.radians([10.0, 30.0, 90.0])), [1.001907, 1.017409, 1.180341], rtol=2e-6)
    # series T/T0 = 1 + A^2/16 + 11 A^4/3072 (same section) agrees at 10 deg to the series' own error (~A^6)
    a = math.radians(10.0)
    assert_allclose(period_ratio(a), 1 + a**2 / 16 + 11 * a**4 / 3072, rtol=1e-7)


def test_log_decrement_and_damping_ratio_match_references():
    # references.md: amplitude ratio 0.8 per cycle -> delta 0.2231, zeta 0.03549
    delta = log_decrement(1.0, 0.8, 1)
    assert_allclose(delta, 0.2231, atol=5e-5)
    assert_allclose(damping_ratio_from_decrement(delta), 0.03549, atol=5e-6)
    # over n cycles: x_k / x_(k+n) = 0.8^-n gives the same delta (definition, references.md)
    assert_allclose(log_decrement(1.0, 0.8**5, 5), delta, rtol=1e-12)
    assert_allclose(decrement_from_damping_ratio(0.03549), 0.2231, atol=2e-4)


def test_coulomb_loss_formula_matches_references():
    # references.md (Den Hartog): amplitude falls 4 T_c / (m g d) per full cycle
    assert_allclose(coulomb_loss_per_cycle(1e-3, 0.5), 4 * 1e-3 / 0.5, rtol=1e-15)


def test_swing_speed_integral_closed_form_against_quadrature():
    # I(A) = integral_{-A}^{A} sqrt(2 (cos psi - cos A)) dpsi, by scipy quad (independent of the elliptic form)
    for deg in (5.0, 40.0, 120.0):
        a = math.radians(deg)
        numeric, _ = quad(lambda p, a=a: math.sqrt(max(2.0 * (math.cos(p) - math.cos(a)), 0.0)), -a, a, limit=200)
        assert_allclose(swing_speed_integral(a), numeric, rtol=1e-7)
    # small swings: pi A^2 / 2 (the linear oscillator's energy loss per half cycle, any vibration text)
    assert_allclose(swing_speed_integral(1e-3), math.pi * 1e-6 / 2, rtol=1e-6)


# ----------------------------------------------------------------------------- synthetic free swings

def swing_truth(t: np.ndarray, *, w0: float, zeta: float, e: float, psi0: float, release_s: float) -> np.ndarray:
    """psi(t) of psi'' = -w0^2 sin psi - 2 zeta w0 psi' - e w0^2 sign(psi'), held at psi0 before the release.

    Integrated half cycle by half cycle (the friction sign is constant in each), stopping for good
    at a turning point where |sin psi| <= e (gravity cannot overcome the friction).
    """
    out = np.full(len(t), psi0, dtype=float)
    start, psi = release_s, psi0
    while start < t[-1] and abs(math.sin(psi)) > e:
        direction = -math.copysign(1.0, psi)

        def rhs(_, y, d=direction):
            return [y[1], -w0**2 * math.sin(y[0]) - 2 * zeta * w0 * y[1] - e * w0**2 * d]

        def stop(_, y):
            return y[1]

        stop.terminal, stop.direction = True, -direction
        sol = solve_ivp(rhs, (start, t[-1]), [psi, 0.0], method="DOP853", events=stop, dense_output=True,
                        rtol=1e-11, atol=1e-13)
        seg = (t >= start) & (t <= sol.t[-1])
        out[seg] = sol.sol(t[seg])[0]
        start, psi = float(sol.t[-1]), float(sol.y[0, -1])
        out[t > start] = psi
        if sol.status != 1:
            break
    return out


def swing_log(*, w0, zeta, e, amplitude_deg, duration_s=14.0, n=7000, noise_rad=1e-3, release_s=0.4,
              seed=RNG_SEED, path="synthetic-swing.csv") -> BenchLog:
    """A free-swing log: uneven times, angle about hanging (pi) wrapped to (-pi, pi], Gaussian noise."""
    rng = np.random.default_rng(seed)
    t = np.sort(rng.uniform(0.0, duration_s, n))
    psi = swing_truth(t, w0=w0, zeta=zeta, e=e, psi0=math.radians(amplitude_deg), release_s=release_s)
    angle = np.angle(np.exp(1j * (math.pi + psi))) + rng.normal(0.0, noise_rad, n)
    return BenchLog(path, t, {"angle_rad": np.unwrap(angle)}, {"angle_rad": "angle_rad"})


def pendulum_scenario(**friction):
    """The shared test device with pivot friction; returns (scenario, device)."""
    sc = make_scenario(body={"pivot_friction": friction} if friction else {})
    return sc, Device.from_scenario(sc)


def test_free_swing_recovers_inertia_and_both_frictions():
    sc, dev = pendulum_scenario()
    mgd = dev.mbar_kg_m * dev.gravity_m_s2
    w0 = math.sqrt(mgd / dev.J_kg_m2)
    zeta, torque = 0.008, 0.6e-3
    log = swing_log(w0=w0, zeta=zeta, e=torque / mgd, amplitude_deg=40.0)
    res = fit_log(log, "free-swing", scenario=sc)
    # tolerances: about 3x the largest errors seen over four noise seeds (1 mrad noise, ~14 cycles)
    assert_allclose(res.value("natural_frequency_rad_s"), w0, rtol=2e-4)
    assert_allclose(res.value("body_inertia_about_pivot_kg_m2"), dev.J_kg_m2, rtol=3e-4)
    assert_allclose(res.value("damping_ratio"), zeta, rtol=0.03)
    assert_allclose(res.value("coulomb_torque_n_m"), torque, rtol=0.06)
    assert_allclose(res.value("pivot_viscous_n_m_s_per_rad"), 2 * zeta * w0 * dev.J_kg_m2, rtol=0.03)
    # the stated uncertainties cover the true values (three standard deviations)
    for key, truth in (("damping_ratio", zeta), ("coulomb_torque_n_m", torque)):
        value, sigma = res.values[key]
        assert abs(value - truth) <= 3.0 * sigma, key
    assert res.facts["decay"] == "viscous and coulomb"
    assert_allclose(res.facts["hanging_angle_rad"] % (2 * math.pi), math.pi, atol=2e-3)
    patch = res.patch["body"]
    assert_allclose(patch["inertia_correction"], 0.0, atol=1e-3 * dev.J_kg_m2)
    assert set(patch["pivot_friction"]) == {"coulomb", "viscous"}
    for key, (_, sigma) in res.values.items():
        assert sigma is not None and sigma >= 0.0, key


def test_free_swing_log_decrement_matches_reference_ratio():
    # a viscous swing whose amplitude falls to 0.8 per cycle: references.md gives delta 0.2231, zeta 0.03549
    zeta = damping_ratio_from_decrement(math.log(1 / 0.8))
    log = swing_log(w0=6.0, zeta=zeta, e=0.0, amplitude_deg=8.0, duration_s=12.0, noise_rad=2e-4)
    res = fit_log(log, "free-swing")
    assert_allclose(res.value("log_decrement"), 0.2231, rtol=0.01)
    assert_allclose(res.value("damping_ratio"), 0.03549, rtol=0.01)
    assert res.facts["decay"] == "viscous"
    assert res.patch == {}  # without a scenario no scenario key is determined
    assert any("--scenario" in n for n in res.notes)


def test_free_swing_coulomb_decay_is_linear_and_matches_reference():
    w0, e = 6.5, 0.004
    log = swing_log(w0=w0, zeta=0.0, e=e, amplitude_deg=12.0, duration_s=10.0, noise_rad=3e-4)
    # the synthetic log itself: successive maxima fall by 4 e per cycle (references.md, Coulomb decay)
    t = np.linspace(0.4, 10.0, 200_001)
    psi = swing_truth(t, w0=w0, zeta=0.0, e=e, psi0=math.radians(12.0), release_s=0.4)
    inner = (psi[1:-1] > psi[:-2]) & (psi[1:-1] >= psi[2:]) & (psi[1:-1] > 0.02)
    maxima = np.concatenate([[psi[0]], psi[1:-1][inner]])
    assert_allclose(np.diff(maxima), -coulomb_loss_per_cycle(e, 1.0), rtol=0.01)
    res = fit_log(log, "free-swing")
    assert_allclose(res.value("coulomb_amplitude_loss_rad_per_cycle"), 4 * e, rtol=5e-3)
    assert abs(res.value("damping_ratio")) < 5e-4
    assert res.facts["decay"] == "coulomb"


def test_free_swing_from_a_quantised_encoder():
    # a 4096-count encoder and no other noise: 1.5 mrad steps, nothing for a noise estimate to see
    sc, dev = pendulum_scenario()
    mgd = dev.mbar_kg_m * dev.gravity_m_s2
    log = swing_log(w0=math.sqrt(mgd / dev.J_kg_m2), zeta=0.02, e=0.3e-3 / mgd, amplitude_deg=30.0, noise_rad=0.0,
                    duration_s=20.0, n=20000)
    count = 2 * math.pi / 4096
    counts = BenchLog("encoder.csv", log.t_s, {"angle_rad": np.round(log.columns["angle_rad"] / count) * count}, {})
    res = fit_log(counts, "free-swing", scenario=sc)
    # tolerances: about 3x the errors seen (J 1.6e-4, zeta 1.5e-4, T_c 0.4%)
    assert_allclose(res.value("body_inertia_about_pivot_kg_m2"), dev.J_kg_m2, rtol=5e-4)
    assert_allclose(res.value("damping_ratio"), 0.02, rtol=5e-3)
    assert_allclose(res.value("coulomb_torque_n_m"), 0.3e-3, rtol=0.02)


def test_free_swing_large_amplitude_period_is_corrected():
    # at 90 degrees the measured period is 18% longer than T0 (references.md); the fit must undo it
    w0 = 5.0
    log = swing_log(w0=w0, zeta=0.002, e=0.0, amplitude_deg=90.0, duration_s=16.0)
    res = fit_log(log, "free-swing")
    assert res.value("period_s") > 1.12 * 2 * math.pi / w0
    assert_allclose(res.value("natural_frequency_rad_s"), w0, rtol=1e-3)
    assert_allclose(res.value("damping_ratio"), 0.002, rtol=0.02)


# ----------------------------------------------------------------------------- synthetic wheel tests

MOTOR = {"k_e": 60 / (2 * math.pi * 300), "R": 2.0, "L": 2e-4, "I": 1.25e-4, "b": 2e-6, "Tc": 5e-4}
# k_e = 60 / (2 pi Kv) for Kv = 300 rpm/V (references.md "Motor"); I = m r^2 / 2 for the test disk


def spin_up_truth(t: np.ndarray, *, volts: float, step_s: float, m=MOTOR) -> tuple[np.ndarray, np.ndarray]:
    """(current A, speed rad/s) of L i' = V - R i - k_e w, I w' = k_t i - b w - T_c, k_t = k_e, from rest.

    The wheel sticks until the motor torque beats the Coulomb friction.
    """
    def rhs(_, y):
        i, w = y
        drive = m["k_e"] * i - m["b"] * w - m["Tc"]
        return [(volts - m["R"] * i - m["k_e"] * w) / m["L"], max(drive, 0.0) / m["I"] if w <= 0.0 else drive / m["I"]]

    after = t >= step_s
    sol = solve_ivp(rhs, (step_s, t[-1]), [0.0, 0.0], method="Radau", dense_output=True, rtol=1e-9, atol=1e-11)
    i, w = np.zeros(len(t)), np.zeros(len(t))
    i[after], w[after] = sol.sol(t[after])
    return i, w


def spin_up_log(*, current=True, seed=RNG_SEED, volts=6.0) -> BenchLog:
    rng = np.random.default_rng(seed)
    t = np.sort(rng.uniform(0.0, 2.0, 4000))
    step = 0.3
    i, w = spin_up_truth(t, volts=volts, step_s=step)
    v = np.where(t >= step, volts, 0.0)
    cols = {"wheel_speed_rad_s": w + rng.normal(0, 0.3, len(t)), "voltage_v": v + rng.normal(0, 0.01, len(t))}
    if current:
        cols["current_a"] = i + rng.normal(0, 0.005, len(t))
    return BenchLog("synthetic-spin-up.csv", t, cols, {k: k for k in cols})


def wheel_scenario(**bearing):
    sc = make_scenario(body={"locked": True}, wheel={"bearing_friction": bearing} if bearing else {})
    return sc, Device.from_scenario(sc)


def test_spin_up_with_current_recovers_motor_and_inertia():
    sc, dev = wheel_scenario(coulomb=MOTOR["Tc"], viscous=MOTOR["b"])
    assert_allclose(dev.I_w_kg_m2, MOTOR["I"], rtol=1e-12)  # the test disk: m r^2 / 2
    res = fit_log(spin_up_log(), "spin-up", scenario=sc)
    damping = MOTOR["k_e"] ** 2 / MOTOR["R"] + MOTOR["b"]
    # tolerances: about 3x the largest errors seen over three noise seeds, rounded up
    assert_allclose(res.value("time_constant_s"), MOTOR["I"] / damping, rtol=2e-3)
    assert_allclose(res.value("back_emf_constant_v_s_per_rad"), MOTOR["k_e"], rtol=1e-3)
    assert_allclose(res.value("resistance_ohm"), MOTOR["R"], rtol=2e-3)
    assert_allclose(res.value("wheel_spin_inertia_kg_m2"), MOTOR["I"], rtol=2e-3)
    assert_allclose(res.facts["step_time_s"], 0.3, atol=2e-3)
    assert set(res.patch["motor"]) == {"back_emf_constant", "torque_constant", "resistance"}
    assert_allclose(res.patch["wheel"]["inertia_correction"], 0.0, atol=0.02 * MOTOR["I"])


def test_spin_up_without_current_uses_scenario_friction():
    sc, _ = wheel_scenario(coulomb=MOTOR["Tc"], viscous=MOTOR["b"])
    res = fit_log(spin_up_log(current=False), "spin-up", scenario=sc)
    assert_allclose(res.value("back_emf_constant_v_s_per_rad"), MOTOR["k_e"], rtol=1e-3)
    assert "resistance_ohm" not in res.values
    assert_allclose(res.value("wheel_spin_inertia_kg_m2"), MOTOR["I"], rtol=2e-3)


def test_spin_up_without_friction_states_its_assumption():
    res = fit_log(spin_up_log(current=False), "spin-up")
    # with friction ignored, k_e = V / final speed: the final speed of the true model (see the module docstring)
    w_inf = (MOTOR["k_e"] * 6.0 / MOTOR["R"] - MOTOR["Tc"]) / (MOTOR["k_e"] ** 2 / MOTOR["R"] + MOTOR["b"])
    assert_allclose(res.value("final_speed_rad_s"), w_inf, rtol=0.003)
    assert_allclose(res.value("back_emf_constant_v_s_per_rad"), 6.0 / w_inf, rtol=0.003)
    assert any("negligible" in n for n in res.notes)


def test_spin_up_window_ends_where_the_voltage_is_switched_off():
    # a step at 0.3 s, switched off at 2.3 s (winding open, the wheel coasts): only the step is fitted
    sc, _ = wheel_scenario(coulomb=MOTOR["Tc"], viscous=MOTOR["b"])
    rng = np.random.default_rng(RNG_SEED)
    t = np.sort(rng.uniform(0.0, 4.0, 8000))
    i, w = spin_up_truth(t, volts=6.0, step_s=0.3)
    off = t >= 2.3
    w = np.where(off, coast_truth(t, w0=float(np.interp(2.3, t, w)), start_s=2.3), w)
    cols = {"wheel_speed_rad_s": w + rng.normal(0, 0.3, len(t)), "voltage_v": np.where((t >= 0.3) & ~off, 6.0, 0.0),
            "current_a": np.where(off, 0.0, i) + rng.normal(0, 0.005, len(t))}
    res = fit_log(BenchLog("on-off.csv", t, cols, {}), "spin-up", scenario=sc)
    # same tolerances as the plain spin-up above
    assert_allclose(res.value("back_emf_constant_v_s_per_rad"), MOTOR["k_e"], rtol=1e-3)
    assert_allclose(res.value("resistance_ohm"), MOTOR["R"], rtol=2e-3)
    assert_allclose(res.value("wheel_spin_inertia_kg_m2"), MOTOR["I"], rtol=2e-3)
    assert res.facts["samples_used"] < np.count_nonzero(t >= 0.3)


def coast_truth(t: np.ndarray, *, w0: float, start_s: float, m=MOTOR) -> np.ndarray:
    """I w' = -b w - T_c until the wheel stops (then it stays stopped)."""
    def stopped(_, y):
        return y[0]

    stopped.terminal = True
    sol = solve_ivp(lambda _, y: [(-m["b"] * y[0] - m["Tc"]) / m["I"]], (start_s, t[-1]), [w0], method="DOP853",
                    events=stopped, dense_output=True, rtol=1e-10, atol=1e-10)
    w = np.full(len(t), w0)
    seg = (t >= start_s) & (t <= sol.t[-1])
    w[seg] = sol.sol(t[seg])[0]
    w[t > sol.t[-1]] = 0.0
    return w


def test_coast_down_recovers_bearing_friction():
    sc, dev = wheel_scenario()
    rng = np.random.default_rng(RNG_SEED)
    t = np.sort(rng.uniform(0.0, 22.0, 3000))
    w = -coast_truth(t, w0=300.0, start_s=1.0) + rng.normal(0, 0.3, len(t))  # spinning the negative way
    log = BenchLog("synthetic-coast.csv", t, {"wheel_speed_rad_s": w}, {"wheel_speed_rad_s": "wheel_speed_rad_s"})
    res = fit_log(log, "coast-down", scenario=sc)
    # tolerances: about 3x the largest errors seen over three noise seeds (0.3 rad/s noise)
    assert_allclose(res.value("bearing_viscous_n_m_s_per_rad"), MOTOR["b"], rtol=0.02)
    assert_allclose(res.value("bearing_coulomb_torque_n_m"), MOTOR["Tc"], rtol=0.015)
    assert_allclose(res.value("start_speed_rad_s"), -300.0, rtol=0.005)
    assert res.patch == {"wheel": {"bearing_friction": {"coulomb": res.value("bearing_coulomb_torque_n_m"),
                                                        "viscous": res.value("bearing_viscous_n_m_s_per_rad")}}}
    no_scenario = fit_log(log, "coast-down")
    assert no_scenario.patch == {} and "bearing_coulomb_torque_n_m" not in no_scenario.values
    assert_allclose(no_scenario.value("coulomb_deceleration_rad_s2"), MOTOR["Tc"] / MOTOR["I"], rtol=0.015)


# ----------------------------------------------------------------------------- logs that do not fit the test

def test_times_stamped_since_1970_keep_their_precision():
    # the same spin-up stamped with an epoch offset: times near 1.7e9 s must not spoil the fit
    plain = spin_up_log()
    stamped = BenchLog("epoch.csv", plain.t_s + 1.7e9, plain.columns, plain.source_names)
    a, b = fit_log(plain, "spin-up"), fit_log(stamped, "spin-up")
    for key in ("time_constant_s", "back_emf_constant_v_s_per_rad", "resistance_ohm"):
        assert_allclose(b.value(key), a.value(key), rtol=1e-6)
    assert_allclose(b.facts["log_start_s"] - a.facts["log_start_s"], 1.7e9, rtol=1e-15)
    assert_allclose(b.facts["step_time_s"], a.facts["step_time_s"], atol=1e-6)


def test_wrong_logs_raise_clear_errors():
    flat = BenchLog("flat.csv", np.linspace(0, 5, 500), {"angle_rad": np.full(500, math.pi) +
                                                          np.random.default_rng(1).normal(0, 1e-3, 500)},
                    {"angle_rad": "angle_rad"})
    with pytest.raises(InputError, match="flat.csv.*no oscillation"):
        fit_log(flat, "free-swing")
    short = swing_log(w0=7.0, zeta=0.01, e=0.0, amplitude_deg=20.0, duration_s=1.5, n=1500, release_s=0.1)
    with pytest.raises(InputError, match="too few cycles"):
        fit_log(short, "free-swing")
    with pytest.raises(InputError, match="missing column wheel_speed_rad_s"):
        fit_log(short, "coast-down")
    spin = spin_up_log()
    with pytest.raises(InputError, match="does not look like a coast-down"):
        fit_log(spin, "coast-down")
    swinging = BenchLog("swing.csv", spin.t_s, {"wheel_speed_rad_s": 3.0 * np.sin(7.0 * spin.t_s)}, {})
    with pytest.raises(InputError, match="turns round or rises again"):
        fit_log(swinging, "coast-down")
    quiet = BenchLog("quiet.csv", spin.t_s, {**spin.columns, "voltage_v": np.zeros(len(spin.t_s))},
                     spin.source_names)
    with pytest.raises(InputError, match="no voltage step"):
        fit_log(quiet, "spin-up")
    sc, _ = pendulum_scenario()
    growing = swing_log(w0=7.0, zeta=-0.01, e=0.0, amplitude_deg=10.0, duration_s=8.0)
    with pytest.raises(InputError, match="amplitude grows"):
        fit_log(growing, "free-swing", scenario=sc)


# ----------------------------------------------------------------------------- engine round trips

def _engine_log(tmp_path, sc):
    from sim.run.trace import write_csv
    from sim.run.trial import run_trial

    result = run_trial(sc)
    path = tmp_path / "trace.csv"
    write_csv(result.trace, path)
    return read_log(path)


def test_round_trip_engine_coast_down(tmp_path):
    sc = make_scenario(body={"locked": True}, wheel={"bearing_friction": {"coulomb": 1.5e-3, "viscous": 5e-6}},
                       strategy={"kind": "coast"}, trial={"duration": 4.0, "start": {"wheel_speed": 150.0}})
    res = fit_log(_engine_log(tmp_path, sc), "coast-down", scenario=sc)
    # pybullet's capped velocity motor is exact Coulomb friction; 0.1% covers the step's discretisation
    assert_allclose(res.value("bearing_coulomb_torque_n_m"), 1.5e-3, rtol=1e-3)
    assert_allclose(res.value("bearing_viscous_n_m_s_per_rad"), 5e-6, rtol=1e-3)


@pytest.mark.parametrize("current_limit, correction", [(None, 0.0), (1.5, 3e-5)])
def test_round_trip_engine_spin_up(tmp_path, current_limit, correction):
    # with a 1.5 A limit the drive holds the current flat for the first ~0.3 s; the fit must leave that
    # out. A wheel.inertia_correction must reach the engine and come back from the fit.
    # an ideal motor (k_t = k_e): one spin-up fixes only k_t / I_w, and the fit takes k_t = k_e (sim.fit.fit_wheel)
    motor = {"torque_constant": None} | ({"current_limit": current_limit} if current_limit else {})
    sc = make_scenario(body={"locked": True}, wheel={"bearing_friction": {"coulomb": 3e-4, "viscous": 1e-6},
                                                     "inertia_correction": correction},
                       motor=motor, strategy={"kind": "fixed_voltage", "volts": 6.0}, trial={"duration": 1.5})
    dev = Device.from_scenario(sc)
    res = fit_log(_engine_log(tmp_path, sc), "spin-up", scenario=sc)
    assert ("current_limited_s" in res.facts) == bool(current_limit)
    assert_allclose(res.patch["wheel"]["inertia_correction"], correction, atol=5e-3 * dev.I_w_kg_m2)
    assert_allclose(res.value("back_emf_constant_v_s_per_rad"), dev.k_e_v_s_rad, rtol=1e-4)
    # a trace row holds the speed at the step's start but the current over the step (sim/physics/motor.py, sim/run/trace.py),
    # so V = R i + k_e w reads R (1 + dt / (2 tau)): 0.2% here, inside the 0.5% allowed
    assert_allclose(res.value("resistance_ohm"), dev.resistance_ohm, rtol=5e-3)
    assert_allclose(res.value("wheel_spin_inertia_kg_m2"), dev.I_w_kg_m2, rtol=5e-3)


def test_spin_up_of_a_motor_with_k_t_apart_from_k_e_gives_the_ratio_it_can_see(tmp_path):
    # With k_t != k_e (the conftest device: k_t 3.7% above k_e) a spin-up still measures k_e (from
    # V = R i + k_e w) and the ratio k_t / I_w (the wheel's torque per amp over its inertia, Newton's
    # second law for rotation); taking k_t = k_e, as the fit states it does, the inertia it reports is
    # I_w k_e / k_t (the bearing's viscous 1e-6 N m s, 0.2% of the motor's damping k_t k_e / R, aside).
    # Tolerances as the round trip above (rtol 1e-4 on k_e, 5e-3 on the inertia).
    sc = make_scenario(body={"locked": True}, wheel={"bearing_friction": {"coulomb": 3e-4, "viscous": 1e-6}},
                       strategy={"kind": "fixed_voltage", "volts": 6.0}, trial={"duration": 1.5})
    dev = Device.from_scenario(sc)
    assert abs(dev.k_t_n_m_a / dev.k_e_v_s_rad - 1) > 0.03
    res = fit_log(_engine_log(tmp_path, sc), "spin-up", scenario=sc)
    assert_allclose(res.value("back_emf_constant_v_s_per_rad"), dev.k_e_v_s_rad, rtol=1e-4)
    assert_allclose(res.value("wheel_spin_inertia_kg_m2"), dev.I_w_kg_m2 * dev.k_e_v_s_rad / dev.k_t_n_m_a, rtol=5e-3)
    assert any("k_t" in n or "torque_constant" in n for n in res.notes)


@pytest.mark.slow
def test_round_trip_engine_free_swing_sees_inertia_correction(tmp_path):
    # the wheel bearing is frictionless, so the coasting wheel's spin inertia does not take part
    # (references.md); a body.inertia_correction must reach the engine and come back from the fit
    correction = 2e-3
    sc = make_scenario(body={"pivot_friction": {"coulomb": 3e-4, "viscous": 1e-4}, "inertia_correction": correction},
                       strategy={"kind": "coast"}, trial={"duration": 8.0, "start": {"angle": "140 deg"}})
    dev = Device.from_scenario(sc)
    res = fit_log(_engine_log(tmp_path, sc), "free-swing", scenario=sc)
    assert_allclose(res.value("body_inertia_about_pivot_kg_m2"), dev.J_kg_m2, rtol=3e-4)
    assert_allclose(res.patch["body"]["inertia_correction"], correction, atol=3e-4 * dev.J_kg_m2)
    # friction: pybullet applies it per step; the 1.5% seen here is inside the 5% allowed
    assert_allclose(res.value("coulomb_torque_n_m"), 3e-4, rtol=0.05)
    assert_allclose(res.value("pivot_viscous_n_m_s_per_rad"), 1e-4, rtol=0.05)


def test_inertia_corrections_reach_the_device_and_are_checked():
    from sim.core.errors import ScenarioError

    base = Device.from_scenario(make_scenario())
    dev = Device.from_scenario(make_scenario(body={"inertia_correction": 1e-3}, wheel={"inertia_correction": -2e-5}))
    assert_allclose(dev.J_kg_m2 - base.J_kg_m2, 1e-3, rtol=1e-9)
    assert_allclose(dev.I_w_kg_m2 - base.I_w_kg_m2, -2e-5, rtol=1e-9)
    with pytest.raises(ScenarioError, match="wheel.inertia_correction.*negative"):
        make_scenario(wheel={"inertia_correction": "-1 kg*m^2"})
    with pytest.raises(ScenarioError, match="body.inertia_correction.*negative"):
        make_scenario(body={"inertia_correction": -1.0})


# ----------------------------------------------------------------------------- the command

def _save(path, log: BenchLog) -> str:
    names = list(log.columns)
    data = np.column_stack([log.t_s] + [log.columns[n] for n in names])
    np.savetxt(path, data, delimiter=",", header=",".join(["t_s"] + names), comments="", fmt="%.9g")
    return str(path)


def test_cli_free_swing_writes_files_and_merged_scenario(tmp_path, capsys):
    from sim.cli import main
    from sim.model.scenario_yaml import load_scenario

    sc, dev = pendulum_scenario()
    mgd = dev.mbar_kg_m * dev.gravity_m_s2
    log = swing_log(w0=1.02 * math.sqrt(mgd / dev.J_kg_m2), zeta=0.01, e=0.5e-3 / mgd, amplitude_deg=30.0)
    wrapped = np.angle(np.exp(1j * log.columns["angle_rad"]))  # as a trace logs it: (-pi, pi], jumping at hanging
    assert np.ptp(wrapped) > 6.0
    csv = _save(tmp_path / "swing.csv", BenchLog("x", log.t_s, {"angle_rad": wrapped}, {}))
    scen = write_scenario(tmp_path / "pend.yaml", scenario_dict())
    out = tmp_path / "fit"
    assert main(["fit", csv, "--test", "free-swing", "--scenario", str(scen), "--out", str(out)]) == 0
    report = json.loads((out / "fit.json").read_text())
    assert report["fitted"]["damping_ratio"]["sigma"] > 0
    # the figure draws the log (muted dots), the fitted model (accent line) and the residuals (ink)
    from pictures import pixels_near
    from sim.media.plots import ACCENT, INK, MUTED
    for colour in (MUTED, ACCENT, INK):
        assert pixels_near(out / "fit.png", colour, tol=10 / 255) > 200, colour
    patch = yaml.safe_load((out / "patch.yaml").read_text())
    assert set(patch["body"]) == {"inertia_correction", "pivot_friction"}
    fitted = Device.from_scenario(load_scenario(out / "scenario_fitted.yaml"))
    # a 2% faster swing means J / 1.02^2
    assert_allclose(fitted.J_kg_m2, dev.J_kg_m2 / 1.02**2, rtol=1e-3)
    assert_allclose(fitted.J_kg_m2, report["fitted"]["body_inertia_about_pivot_kg_m2"]["value"], rtol=1e-6)
    assert_allclose(fitted.pivot_viscous_n_m_s, report["fitted"]["pivot_viscous_n_m_s_per_rad"]["value"], rtol=1e-6)
    assert "natural_frequency_rad_s" in capsys.readouterr().out


def test_cli_reads_rpm_and_milliseconds(tmp_path):
    from sim.cli import main

    rng = np.random.default_rng(RNG_SEED)
    t = np.sort(rng.uniform(0.0, 22.0, 3000))
    w = coast_truth(t, w0=300.0, start_s=1.0) + rng.normal(0, 0.3, len(t))
    si = BenchLog("x", t, {"wheel_speed_rad_s": w}, {})
    # 1 rpm = 2 pi / 60 rad/s, 1 s = 1000 ms (definitions)
    other = tmp_path / "coast_rpm.csv"
    np.savetxt(other, np.column_stack([1000 * t, w * 60 / (2 * math.pi)]), delimiter=",",
               header="t_ms,wheel_speed_rpm", comments="", fmt="%.12g")
    scen = write_scenario(tmp_path / "bench.yaml", scenario_dict(body={"locked": True}))
    for name, csv in (("si", _save(tmp_path / "coast_si.csv", si)), ("other", str(other))):
        assert main(["fit", csv, "--test", "coast-down", "--scenario", str(scen), "--out", str(tmp_path / name)]) == 0
    a, b = (json.loads((tmp_path / n / "fit.json").read_text())["fitted"] for n in ("si", "other"))
    for key in ("bearing_viscous_n_m_s_per_rad", "bearing_coulomb_torque_n_m", "start_speed_rad_s"):
        assert_allclose(b[key]["value"], a[key]["value"], rtol=1e-6)
    assert_allclose(a["bearing_coulomb_torque_n_m"]["value"], MOTOR["Tc"], rtol=0.015)


def test_cli_spin_up_patch_replaces_speed_constant(tmp_path):
    from sim.cli import main
    from sim.model.scenario_yaml import load_scenario

    csv = _save(tmp_path / "spin.csv", spin_up_log())
    scen = write_scenario(tmp_path / "bench.yaml", scenario_dict(body={"locked": True}))
    out = tmp_path / "fit"
    assert main(["fit", csv, "--test", "spin-up", "--scenario", str(scen), "--out", str(out)]) == 0
    merged = yaml.safe_load((out / "scenario_fitted.yaml").read_text())
    assert "speed_constant" not in merged["motor"]
    fitted = load_scenario(out / "scenario_fitted.yaml")
    assert_allclose(fitted.motor.k_e, MOTOR["k_e"], rtol=0.005)


@pytest.mark.parametrize("case, words", [
    ("missing column", "missing column angle_rad"),
    ("too few cycles", "too few cycles"),
    ("no oscillation", "no oscillation"),
    ("no step", "no voltage step"),
    ("unknown test", "unknown test"),
])
def test_cli_bad_logs_exit_2_and_write_nothing(tmp_path, capsys, case, words):
    from sim.cli import main

    if case == "missing column":
        csv, test = _save(tmp_path / "log.csv", spin_up_log()), "free-swing"
    elif case == "too few cycles":
        csv, test = _save(tmp_path / "log.csv", swing_log(w0=7.0, zeta=0.01, e=0.0, amplitude_deg=20.0,
                                                          duration_s=1.5, n=1500, release_s=0.1)), "free-swing"
    elif case == "no oscillation":
        t = np.linspace(0, 4, 400)
        flat = BenchLog("x", t, {"angle_rad": np.full(400, 3.0)}, {})
        csv, test = _save(tmp_path / "log.csv", flat), "free-swing"
    elif case == "no step":
        spin = spin_up_log()
        csv, test = _save(tmp_path / "log.csv", BenchLog("x", spin.t_s, {**spin.columns, "voltage_v":
                                                                          np.zeros(len(spin.t_s))}, {})), "spin-up"
    else:
        csv, test = _save(tmp_path / "log.csv", spin_up_log()), "wobble"
    out = tmp_path / "fit"
    assert main(["fit", csv, "--test", test, "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip()
    assert words in err and len(err.splitlines()) == 1 and "Traceback" not in err
    assert not out.exists()


def test_cli_refuses_foreign_out_folder(tmp_path, capsys):
    from sim.cli import main

    csv = _save(tmp_path / "spin.csv", spin_up_log())
    out = tmp_path / "mine"
    out.mkdir()
    (out / "notes.txt").write_text("keep me")
    assert main(["fit", csv, "--test", "spin-up", "--out", str(out)]) == 2
    assert "not empty" in capsys.readouterr().err
    assert sorted(p.name for p in out.iterdir()) == ["notes.txt"]
    assert (out / "notes.txt").read_text() == "keep me"


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_a_clear_viscous_decay_is_not_dropped(seed):
    """Amplitude 0.35 -> 0.25 rad over 21 cycles (damping ratio 0.0025) with 10 mrad noise: each
    term alone falls under two standard deviations, the decay as a whole does not. The joint
    F-test keeps it; the damping ratio comes back within 10% of the one the log was made with
    (the decay of a damped swing: zeta = ln(a0/an) / (2 pi n) for small zeta, any vibrations text)."""
    w0 = 2 * math.pi / 0.9
    zeta = 0.0025
    assert_allclose(math.log(0.35 / 0.25) / (2 * math.pi * 21), zeta, rtol=0.03)   # the case as stated
    log = swing_log(w0=w0, zeta=zeta, e=0.0, amplitude_deg=math.degrees(0.35), duration_s=0.9 * 21 + 0.5,
                    n=4000, noise_rad=0.01, seed=seed)
    res = fit_log(log, "free-swing")
    assert res.facts["decay"] == "viscous"
    assert_allclose(res.value("damping_ratio"), zeta, rtol=0.10)


def test_no_decay_stays_none_measurable():
    """A swing with no friction at all: the joint test finds no decay (friction set to 0)."""
    log = swing_log(w0=2 * math.pi / 0.9, zeta=0.0, e=0.0, amplitude_deg=20.0, noise_rad=0.01)
    res = fit_log(log, "free-swing")
    assert res.facts["decay"] == "none measurable" and res.value("damping_ratio") == 0.0
