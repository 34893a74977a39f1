"""Winding temperature: first-order model with the copper temperature coefficient."""

import math

import numpy as np
from scipy.integrate import solve_ivp

from sim.model.scenario_yaml import load_scenario
from sim.studies.thermal import COPPER_TEMPCO_PER_K, steady_temperature_c, temperature_history_c, winding_check


def _rhs(i_of_t, r20, rth, cth, amb, alpha):
    # references.md "Motor": C dT/dt = I^2 R(T) - (T - T_amb)/R_th, R(T) = R20 (1 + alpha (T - 20)) [mem]
    return lambda t, y: [(i_of_t(t) ** 2 * r20 * (1 + alpha * (y[0] - 20.0)) - (y[0] - amb) / rth) / cth]


def test_history_matches_an_independent_ode_integration():
    # Reference: scipy's RK45 on the same equation, a current stepping between 3 A and 1 A.
    r20, rth, cth, amb = 1.5, 8.0, 15.0, 25.0
    dt, n = 0.05, 4000
    current = np.where((np.arange(n) // 600) % 2 == 0, 3.0, 1.0)
    ours = temperature_history_c(current, dt, resistance_20c_ohm=r20, thermal_resistance_k_w=rth,
                                 thermal_capacity_j_k=cth, ambient_c=amb)
    ref = solve_ivp(_rhs(lambda t: current[min(int(t / dt + 1e-9), n - 1)], r20, rth, cth, amb, COPPER_TEMPCO_PER_K),
                    (0, n * dt), [amb], t_eval=np.arange(1, n + 1) * dt, max_step=dt / 2, rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(ours, ref.y[0], atol=0.02)    # within 0.02 K


def test_without_tempco_is_the_textbook_first_order_step():
    # With alpha = 0: T = T_amb + I^2 R R_th (1 - exp(-t/tau)), tau = R_th C; 63.2% at t = tau
    # (first-order step response, any control text; references.md uses the same 63.2% for tau_m).
    rth, cth = 5.0, 40.0
    tau = rth * cth
    t = np.arange(1, 2001) * 0.5
    temps = temperature_history_c(np.full(t.size, 2.0), 0.5, resistance_20c_ohm=1.0, thermal_resistance_k_w=rth,
                                  thermal_capacity_j_k=cth, ambient_c=20.0, tempco_per_k=0.0)
    np.testing.assert_allclose(temps, 20.0 + 4.0 * 5.0 * (1 - np.exp(-t / tau)), rtol=1e-9)
    np.testing.assert_allclose(np.interp(tau, t, temps) - 20.0, 0.632 * 20.0, rtol=1e-3)


def test_steady_state_is_the_fixed_point_and_runaway_is_reported():
    r20, rth, amb = 2.0, 12.0, 30.0
    steady = steady_temperature_c(1.2, resistance_20c_ohm=r20, thermal_resistance_k_w=rth, ambient_c=amb)
    # Fixed point of T = T_amb + R_th I^2 R(T), checked by substitution (definition of steady state).
    np.testing.assert_allclose(steady, amb + rth * 1.2**2 * r20 * (1 + COPPER_TEMPCO_PER_K * (steady - 20)), rtol=1e-12)
    long_run = temperature_history_c(np.full(3000, 1.2), 1.0, resistance_20c_ohm=r20, thermal_resistance_k_w=rth,
                                     thermal_capacity_j_k=10.0, ambient_c=amb)
    np.testing.assert_allclose(long_run[-1], steady, rtol=1e-6)
    # Heating beyond 1/alpha per kelvin of cooling has no steady state.
    i_runaway = math.sqrt(1.0 / (rth * r20 * COPPER_TEMPCO_PER_K)) * 1.01
    assert steady_temperature_c(i_runaway, resistance_20c_ohm=r20, thermal_resistance_k_w=rth, ambient_c=amb) == math.inf


def test_scenario_thermal_section_and_defaults():
    sc = load_scenario(overrides=["motor.thermal.ambient=40 degC", "motor.thermal.thermal_resistance=6 K/W"])
    check = winding_check(sc.motor, 1.0)
    assert check["ambient_c"] == 40.0 and check["max_winding_temperature_c"] == 100.0
    # Steady state of references.md "Motor" (C dT/dt = 0): T = T_amb + R_th I^2 R20 (1 + alpha (T - 20)),
    # linear in T, so T = (T_amb + R_th I^2 R20 (1 - 20 alpha)) / (1 - R_th I^2 R20 alpha); copper's
    # alpha = 0.00393 /K near 20 degC (handbook value, from memory). Exact: rtol 1e-12.
    alpha, heat = 0.00393, 6.0 * 1.0**2 * sc.motor.resistance
    np.testing.assert_allclose(check["steady_winding_temperature_c"],
                               (40.0 + heat * (1 - 20 * alpha)) / (1 - heat * alpha), rtol=1e-12)


def test_check_and_sweep_judge_the_winding_on_the_same_basis():
    # Issue 12: check and sweep gave 26.1 vs 30.0 degC for one design (check used the hold's RMS
    # current, sweep the scenario's own trial). Both now use WINDING_BASIS. A design whose own trial
    # (a 3 degree start and a push) draws far more current than holding still tells the bases apart.
    from test_verdicts import fast_raw
    from sim.model.scenario import validate_scenario
    from sim.studies.sweep import point_task
    from sim.studies.thermal import WINDING_BASIS
    from sim.studies.monte_carlo import judge_trial
    from sim.studies.verdicts import run_check
    raw = fast_raw(trial={"duration": "1.5 s", "start": {"angle": "3 deg"}, "seed": 3,
                          "pushes": [{"at": "0.5 s", "impulse": "8 mN*m*s"}]})
    thermal = run_check(raw, "t.yaml", trials=1, workers=1).verdict["thermal"]
    sweep_row = point_task({"raw": raw, "where": "t.yaml", "index": 0, "trials": 0, "assign": []})
    assert thermal["basis"] == WINDING_BASIS
    # the old basis (hold only) is well apart here, so agreement below is not by chance
    assert abs(thermal["hold_steady_winding_temperature_c"] - sweep_row["winding_temperature_c"]) > 5.0
    # same trial, same seed: the very same figure (exact, one code path)
    sc = validate_scenario(raw, where="t.yaml")
    np.testing.assert_allclose(judge_trial(sc, seed=sc.trial.seed)["winding_temperature_c"],
                               thermal["steady_winding_temperature_c"], rtol=1e-12)
    # a sweep point draws its own sensor-noise seed (point index): the same figure within 0.5 K of noise
    np.testing.assert_allclose(sweep_row["winding_temperature_c"], thermal["steady_winding_temperature_c"], atol=0.5)


def test_winding_basis_is_the_same_for_a_run_stopped_at_its_fall_and_one_that_flails_on():
    # sweep stops a trial at the fall, check's nominal run goes on to its end: the basis cuts both at
    # fell_at_s, so a falling design gets one figure. A 60 mN m s push knocks the test pendulum over.
    from test_verdicts import fast_raw
    from sim.model.scenario import validate_scenario
    from sim.studies.thermal import trial_rms_current_a
    from sim.run.trial import run_trial
    sc = validate_scenario(fast_raw(trial={"duration": "1.5 s", "start": {"angle": "3 deg"}, "seed": 3,
                                           "pushes": [{"at": "0.5 s", "impulse": "60 mN*m*s"}]}), where="t.yaml")
    stopped, full = run_trial(sc, stop_early=True), run_trial(sc, stop_early=False)
    assert stopped.outcome == full.outcome == "fell" and full.trace.n > stopped.trace.n
    a = trial_rms_current_a(stopped.trace.view("current"), sc.world.step, stopped.fell_at_s)
    b = trial_rms_current_a(full.trace.view("current"), sc.world.step, full.fell_at_s)
    np.testing.assert_allclose(a, b, rtol=1e-12)
    # the RMS is the plain root-mean-square of the rows before the fall (definition)
    k = int(round(full.fell_at_s / sc.world.step))
    np.testing.assert_allclose(b, np.sqrt(np.mean(full.trace.view("current")[:k] ** 2)), rtol=1e-12)


def test_winding_basis_leaves_out_the_swing_up_before_the_catch():
    # the RMS is taken from the catch: rows before it (a one-off swing-up) do not count (definition
    # of the basis; RMS = sqrt(mean(i^2)) over the rows kept)
    from sim.studies.thermal import trial_rms_current_a
    current = np.concatenate([np.full(2000, 4.0), np.full(3000, 0.5)])
    np.testing.assert_allclose(trial_rms_current_a(current, 0.001, None, 2.0), 0.5, rtol=1e-12)
    np.testing.assert_allclose(trial_rms_current_a(current, 0.001, 4.0, 2.0), 0.5, rtol=1e-12)
    np.testing.assert_allclose(trial_rms_current_a(current, 0.001, None, None),
                               np.sqrt((2000 * 16 + 3000 * 0.25) / 5000), rtol=1e-12)
