"""The motor and drive against the DC-motor equations, on a locked body (a bench test of the drive).

Model (references.md, "Motor"): L di/dt = V - R i - k_e w, tau = k_t i, w relative to the body.
With the body locked and no friction: I_w dw/dt = k_t i, so from rest at a fixed voltage
w(t) = (V/k_e) (1 - exp(-t/tau_m)), tau_m = I_w R / (k_t k_e) (inductance neglected).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.integrate import solve_ivp

from conftest import make_scenario
from sim.model.device import Device
from sim.physics.motor import MotorDrive
from sim.run.metrics import trial_metrics
from sim.run.trial import run_trial

# 80 g disk of radius 50 mm: I_w = m r^2 / 2 = 1e-4 kg m^2 (the check value's J in references.md)
WHEEL_1E4 = {"at": 0.2, "parts": [{"shape": "disk", "radius": 0.05, "thickness": 0.005, "mass": 0.08}]}


def bench(*, volts=12.0, kv="100 rpm/V", resistance="1 ohm", duration=0.15, step=1e-3, wheel=WHEEL_1E4, **motor):
    """A locked-body fixed-voltage trial; returns the TrialResult."""
    sc = make_scenario(world={"step": step}, body={"locked": True}, wheel=wheel,
                       motor={"speed_constant": kv, "resistance": resistance, **motor},
                       drive={"supply": max(abs(volts), 1.0)},
                       strategy={"kind": "fixed_voltage", "volts": volts}, trial={"duration": duration})
    return run_trial(sc)


def test_reference_check_values_from_the_scenario():
    # references.md, "Motor", check value [calc]: Kv 100 rpm/V, 12 V, R 1 ohm, J 1e-4 kg m^2 ->
    # k_e 0.095493 V s/rad, no-load 125.66 rad/s, stall 1.1459 N m, tau_m 10.97 ms.
    # k_e = 60 / (2 pi Kv) (references.md [mem, standard]). Tolerance: half a unit in the last digit
    # quoted: rtol 5e-5 for the 5-digit values, 5e-4 for tau_m's 4 digits.
    sc = make_scenario(body={"locked": True}, wheel=WHEEL_1E4,   # an ideal motor: no torque constant of its own
                       motor={"speed_constant": "100 rpm/V", "resistance": "1 ohm", "torque_constant": None},
                       drive={"supply": "12 V"})
    d = Device.from_scenario(sc)
    tau_m = d.I_w_kg_m2 * d.resistance_ohm / (d.k_t_n_m_a * d.k_e_v_s_rad)
    assert_allclose([d.k_e_v_s_rad, d.no_load_speed_rad_s, d.stall_torque_n_m], [0.095493, 125.66, 1.1459], rtol=5e-5)
    assert_allclose(tau_m, 10.97e-3, rtol=5e-4)
    assert_allclose(d.k_e_v_s_rad, 60 / (2 * math.pi * 100), rtol=1e-12)
    assert d.k_t_n_m_a == d.k_e_v_s_rad  # ideal motor: k_t = k_e in SI (references.md)


@pytest.mark.parametrize("kt_factor", [1.0, 1.5], ids=["kt=ke", "kt=1.5ke"])
def test_locked_body_fixed_voltage_speed_and_time_constant(kt_factor):
    # No-load speed V/k_e and mechanical time constant tau_m = I_w R / (k_t k_e): the speed reaches
    # 63.2% (1 - 1/e) of its final value at tau_m (references.md, "Motor"). A torque constant other
    # than k_e changes tau_m but not the final speed.
    # Tolerances: final speed rtol 1e-4 after ~14 tau_m (exp(-14) = 8e-7); 63.2% time rtol 5e-3
    # (linear interpolation between 1 ms samples on the exponential is late by up to
    # dt^2 / (8 tau_m^2) = 0.23% at tau_m = 7.3 ms); whole trace atol 1e-6 of V/k_e (sim.physics.motor solves
    # the motor and a locked wheel exactly over each step: observed ~1e-11).
    k_e = 60 / (2 * math.pi * 100)
    r = bench(torque_constant=kt_factor * k_e)
    d = r.device
    t, w = r.trace.view("t"), r.trace.view("wheel_speed")
    final = 12.0 / k_e
    tau_m = d.I_w_kg_m2 * d.resistance_ohm / (kt_factor * k_e * k_e)
    assert_allclose(w[-1], final, rtol=1e-4)
    assert_allclose(np.interp((1 - math.exp(-1)) * final, w, t), tau_m, rtol=5e-3)
    assert_allclose(w, final * (1 - np.exp(-t / tau_m)), atol=1e-6 * final)


def test_wheel_spins_past_300_rad_s_as_the_motor_equations_say():
    # Kv 300 rpm/V at 12 V: no-load 376.99 rad/s (V/k_e). pybullet's default 100 rad/s joint clamp
    # (references.md, "pybullet facts") would hold the wheel at 100; the speed must follow
    # w(t) = V/k_e (1 - exp(-t/tau_m)) to atol 1e-6 of V/k_e (exact per step, see above) and pass 300 rad/s.
    r = bench(kv="300 rpm/V", duration=0.6)
    d = r.device
    t, w = r.trace.view("t"), r.trace.view("wheel_speed")
    final = 12.0 * 2 * math.pi * 300 / 60
    tau_m = d.I_w_kg_m2 * d.resistance_ohm / (d.k_t_n_m_a * d.k_e_v_s_rad)
    assert_allclose(w, final * (1 - np.exp(-t / tau_m)), atol=1e-6 * final)
    assert w[-1] > 300.0
    assert_allclose(trial_metrics(r)["wheel_speed_limit_rad_s"], final, rtol=1e-12)


@pytest.mark.parametrize("volts", [12.0, -12.0])
def test_current_limit_clamps_and_gives_constant_torque(volts):
    # Stall current V/R = 12 A is clamped to 2 A; while clamped the torque is k_t * 2 A and the wheel
    # accelerates uniformly: w = k_t I_lim t / I_w (Newton's second law for rotation). The clamp
    # holds until the back-EMF brings (V - k_e w)/R below the limit, at w = (V - R I_lim)/k_e = 104.7 rad/s.
    # Tolerances: current exact to 1e-12 A; speed rtol 1e-9 in the clamped phase.
    limit = 2.0
    r = bench(volts=volts, current_limit=limit, duration=0.1)
    d = r.device
    t, w, cur = r.trace.view("t"), r.trace.view("wheel_speed"), r.trace.view("current")
    sign = math.copysign(1.0, volts)
    assert_allclose(np.max(np.abs(cur)), limit, atol=1e-12)
    clamped = np.abs(w) < 0.9 * (12.0 - 1.0 * limit) / d.k_e_v_s_rad
    assert clamped.sum() > 40  # ~49 ms at 1910 rad/s^2
    assert_allclose(cur[clamped], sign * limit, atol=1e-12)
    assert_allclose(w[clamped], sign * d.k_t_n_m_a * limit * t[clamped] / d.I_w_kg_m2, rtol=1e-9, atol=1e-12)
    assert_allclose(trial_metrics(r)["peak_current_a"], limit, atol=1e-12)


def test_energy_from_supply_is_the_integral_of_v_times_i():
    # E = integral V i dt. At a fixed V: E = V integral i dt, and k_t integral i dt = I_w w_end
    # (angular impulse = change of angular momentum), so E = V I_w w_end / k_t (tolerance 1e-9:
    # an exact identity of the discrete run too). Energy balance: V i = R i^2 + k_e w i, and
    # k_t i w is the mechanical power, so E = (k_e/k_t) 1/2 I_w w^2 + integral i^2 R dt (Joule
    # heating; the test device's k_t is 3.7% above k_e, so both constants count); tolerance 2e-3,
    # the step's discretisation of the heat integral.
    r = bench(duration=0.1)
    d = r.device
    m = trial_metrics(r)
    w_end_after_last_step = r.trace.view("wheel_speed")[-1] + d.k_t_n_m_a * r.trace.view("current")[-1] * 1e-3 / d.I_w_kg_m2
    e_impulse = 12.0 * d.I_w_kg_m2 * w_end_after_last_step / d.k_t_n_m_a
    assert_allclose(m["energy_from_supply_j"], e_impulse, rtol=1e-9)
    heat = np.sum(r.trace.view("current") ** 2) * d.resistance_ohm * 1e-3
    assert_allclose(m["energy_from_supply_j"], d.k_e_v_s_rad / d.k_t_n_m_a * 0.5 * d.I_w_kg_m2 * w_end_after_last_step**2 + heat,
                    rtol=2e-3)


def test_inductance_current_rises_with_time_constant_l_over_r():
    # With the wheel nearly still (a 10 kg, 0.2 m disk: I_w = 0.2 kg m^2, so tau_m ~ 200 s) the
    # current rises as i = V/R (1 - exp(-t R / L)): 63.2% at L/R (first-order RL circuit, any
    # circuits text). L 10 mH, R 1 ohm -> 10 ms; step 0.1 ms. Row k of the trace holds the mean
    # current over step k (README, trace.csv), i.e. V/R (1 - tau_e (e^(-t_k/tau_e) - e^(-t_k+1/tau_e))/dt).
    # Tolerances: 3e-4 of V/R on the whole rise (the reference leaves out the back-EMF, which reaches
    # 0.02% of V by 50 ms: k_e w = 0.032 V s/rad * 0.07 rad/s); the 63.2% point, read at the step
    # middles, within one step.
    heavy = {"at": 0.2, "parts": [{"shape": "disk", "radius": 0.2, "thickness": 0.01, "mass": 10.0}]}
    step, tau_e, i_final = 1e-4, 0.010, 12.0 / 1.0
    r = bench(kv="300 rpm/V", inductance="10 mH", duration=0.05, step=step, wheel=heavy)
    cur, t = r.trace.view("current"), r.trace.view("t")
    mean = i_final * (1 - tau_e * (np.exp(-t / tau_e) - np.exp(-(t + step) / tau_e)) / step)
    assert_allclose(cur, mean, atol=3e-4 * i_final)
    assert_allclose(np.interp((1 - math.exp(-1)) * i_final, cur, t + step / 2), tau_e, atol=step)
    assert cur[0] < 0.01 * i_final  # the current does not jump: the inductance is in effect


@pytest.mark.parametrize("inductance", [1.1e-4, 1e-3, 1e-2])
def test_inductance_and_wheel_together_match_scipy(inductance):
    # Locked body, 12 V step: L di/dt = V - R i - k_e w and I_w dw/dt = k_t i together (references.md,
    # "Motor"), integrated independently with scipy's solve_ivp (Radau, rtol 1e-10). Electrical time
    # constants from 0.11 ms (a common small winding, well under the 1 ms step) to 10 ms (about tau_m).
    # Tolerance 1e-5 of the no-load speed (V/k_e = 125.7 rad/s).
    r = bench(inductance=inductance, duration=0.1)
    d = r.device
    kt, ke, R, iw = d.k_t_n_m_a, d.k_e_v_s_rad, d.resistance_ohm, d.I_w_kg_m2
    t = r.trace.view("t")
    sol = solve_ivp(lambda _t, x: [(12.0 - R * x[0] - ke * x[1]) / inductance, kt * x[0] / iw],
                    (0.0, t[-1]), [0.0, 0.0], t_eval=t, method="Radau", rtol=1e-10, atol=1e-12)
    assert_allclose(r.trace.view("wheel_speed"), sol.y[1], atol=1e-5 * 12.0 / ke)


def _piecewise_mean_by_integration(d, *, i0, w0, volts, limit, dt):
    """Mean current over one step from (i0, w0) with the limit reached mid-step, by scipy's solve_ivp:
    L di/dt = V - R i - k_e w, I_w dw/dt = k_t i (references.md, "Motor") until |i| = limit (an event),
    then i held at the limit for the rest of the step. Returns (mean A, crossing time s)."""
    L, R, ke, kt, iw = d.inductance_h, d.resistance_ohm, d.k_e_v_s_rad, d.k_t_n_m_a, d.I_w_kg_m2

    def rhs(_t, x):   # x = [i, w, charge]
        return [(volts - R * x[0] - ke * x[1]) / L, kt * x[0] / iw, x[0]]

    def reach(_t, x):
        return x[0] - limit
    reach.terminal = True
    sol = solve_ivp(rhs, (0.0, dt), [i0, w0, 0.0], events=reach, method="Radau", rtol=1e-12, atol=1e-15)
    t_c = sol.t_events[0][0]
    charge = sol.y_events[0][0][2]
    return (charge + limit * (dt - t_c)) / dt, t_c


def _limit_bench_device():
    sc = make_scenario(body={"locked": True}, wheel=WHEEL_1E4,
                       motor={"speed_constant": "100 rpm/V", "resistance": "1.5 ohm", "inductance": "1 mH",
                              "current_limit": "2 A"},
                       drive={"supply": "6 V"}, strategy={"kind": "fixed_voltage", "volts": 6.0},
                       trial={"duration": 0.01})
    return sc, Device.from_scenario(sc)


@pytest.mark.parametrize("i0, w0, volts", [(0.0, 0.0, 6.0), (0.0, 0.0, -6.0), (2.0, 3.0, -6.0), (-0.5, -20.0, 6.0)],
                         ids=["from-rest", "from-rest-reverse", "from-the-limit-reversed", "spinning"])
def test_current_limit_reached_mid_step_gives_the_exact_step_mean(i0, w0, volts):
    # Issue case: 1 mH, 1.5 ohm, 2 A limit, 6 V, body locked, 1 ms step. The current reaches the limit
    # part way through the step and is held there after; the step's mean current is the exact one
    # of that piecewise path (integrated independently with solve_ivp and an event at the limit,
    # rtol 1e-12), not the clamped mean of the unclamped path. Tolerance 1e-9 A.
    _, d = _limit_bench_device()
    drive = MotorDrive(d, step_s=1e-3)
    drive.current = i0
    limit = math.copysign(2.0, volts)
    expected, t_c = _piecewise_mean_by_integration(d, i0=i0, w0=w0, volts=volts, limit=limit, dt=1e-3)
    assert 0.0 < t_c < 1e-3          # the case really crosses mid-step
    mean, torque = drive.update(volts, w0)
    assert_allclose(mean, expected, atol=1e-9)
    assert_allclose(torque, d.k_t_n_m_a * expected, rtol=1e-12)
    assert drive.current == limit    # held at the limit at the end of the step


def test_current_limit_mid_step_closed_form_of_the_rl_step():
    # First-order RL step response from rest, i(t) = V/R (1 - exp(-t R/L)) (any circuits text, e.g.
    # Hayt & Kemmerly, "Engineering Circuit Analysis", the source-driven RL circuit; from memory),
    # with the back-EMF left out (the wheel reaches ~0.05 rad/s in 1 ms: 5 mV of 6 V). It reaches
    # 2 A at t_c = -(L/R) ln(1 - 2 R/V) = 0.462 ms; mean over the step = (integral of i up to t_c
    # + 2 A (dt - t_c)) / dt = 1.591 A (the clamped mean of the unclamped path is 1.928 A).
    # Through a whole trial: row 0 of trace.csv's current column is that step's mean. Tolerance 1e-3
    # relative (the back-EMF left out of the reference).
    sc, d = _limit_bench_device()
    V, R, L, lim, dt = 6.0, 1.5, 1e-3, 2.0, 1e-3
    tau = L / R
    t_c = -tau * math.log(1 - lim * R / V)
    charge = V / R * (t_c - tau * (1 - math.exp(-t_c / tau)))
    expected = (charge + lim * (dt - t_c)) / dt
    assert_allclose(expected, 1.591, atol=5e-4)       # the figure, to its 4 digits
    r = run_trial(sc)
    cur = r.trace.view("current")
    assert_allclose(cur[0], expected, rtol=1e-3)
    assert_allclose(cur[1:5], lim, atol=1e-12)          # held at the limit on the following steps


# ----------------------------------------------------------------------------- k_t and k_e apart
# The test device's torque constant (0.033 N m/A) is 3.7% above its back-EMF constant
# (60 / (2 pi 300) = 0.031831 V s/rad): each formula below must use the right one.
K_E_300 = 60 / (2 * math.pi * 300)     # k_e from Kv = 300 rpm/V (references.md, "Motor", [mem, standard])
K_T = 0.033


def test_no_load_speed_stall_and_available_torque_use_the_right_constant():
    # DC motor (references.md, "Motor"): no-load speed V / k_e; torque k_t (V - k_e w) / R, at
    # stall k_t V / R, or k_t I_lim under a current limit. Exact formulas: rtol 1e-12.
    d = Device.from_scenario(make_scenario())
    assert_allclose([d.k_e_v_s_rad, d.k_t_n_m_a], [K_E_300, K_T], rtol=1e-12)
    assert_allclose(d.no_load_speed_rad_s, 12.0 / K_E_300, rtol=1e-12)
    assert_allclose(d.stall_torque_n_m, K_T * 12.0 / 2.0, rtol=1e-12)
    w = 0.25 * 12.0 / K_E_300
    assert_allclose(d.available_torque_n_m(w), K_T * (12.0 - K_E_300 * w) / 2.0, rtol=1e-12)
    limited = Device.from_scenario(make_scenario(motor={"current_limit": "1.5 A"}))
    assert_allclose(limited.stall_torque_n_m, K_T * 1.5, rtol=1e-12)


def test_volts_for_torque_inverts_the_motor_line():
    # tau = k_t (V - k_e w) / R solved for V (references.md, "Motor"): V = R tau / k_t + k_e w.
    from sim.strategies.swingup import volts_for_torque

    d = Device.from_scenario(make_scenario())
    for tau, w in ((0.05, 0.0), (-0.02, 150.0), (0.01, -80.0)):
        assert_allclose(volts_for_torque(d, tau, w), 2.0 * tau / K_T + K_E_300 * w, rtol=1e-12)


def test_pid_default_gains_place_the_poles_with_the_torque_constant():
    # PID defaults (sim.strategies.pid docstring): torque-input model J theta_dd = mbar g theta - c V with
    # c = k_t / R; the PD loop's characteristic polynomial J s^2 + c kd s + (c kp - mbar g) must have
    # natural frequency 2 sqrt(mbar g / J) and damping 0.7 (the documented placement). Roots by
    # numpy from c built here with k_t = 0.033; rtol 1e-9. With k_e in c the frequency is 1.9% off.
    from sim.strategies.pid import default_pd_gains

    d = Device.from_scenario(make_scenario())
    kp, _, kd = default_pd_gains(d)
    c = K_T / 2.0
    roots = np.roots([d.J_kg_m2, c * kd, c * kp - d.mbar_kg_m * d.gravity_m_s2])
    wn = abs(roots[0])
    assert_allclose(wn, 2.0 * math.sqrt(d.mbar_kg_m * d.gravity_m_s2 / d.J_kg_m2), rtol=1e-9)
    assert_allclose(-roots[0].real / wn, 0.7, rtol=1e-9)
