"""The power chain (`sim.physics.drive.PowerChain`) on constructed command sequences, and in trials.

The test device is conftest's (invented numbers); the chain is driven directly through its per-step
call with a fixed wheel speed where the mechanics do not matter."""

from __future__ import annotations

import math

import numpy as np
from numpy.testing import assert_allclose

from conftest import make_scenario
from sim.model.device import Device
from sim.physics.drive import PowerChain
from sim.run.metrics import trial_metrics
from sim.run.trial import run_trial

DT = 1e-4


def chain_for(**drive):
    sc = make_scenario(drive=drive, body={"locked": True}, world={"step": DT}, sensors={"rate": 1000.0},
                       **({"strategy": {"kind": "fixed_current"}} if drive.get("mode") == "current" else {}))
    dev = Device.from_scenario(sc)
    return sc, dev, PowerChain(sc, dev, step_s=DT)


def test_current_step_reaches_63_percent_in_one_loop_time_constant():
    # first-order loop of bandwidth f_bw: 1 - 1/e of a step after 1/(2 pi f_bw) [references.md,
    # "Power and drive", common practice]
    f_bw = 1.0 / (2 * math.pi * 1e-3)          # tau = 1 ms = 10 steps
    sc, dev, chain = chain_for(mode="current", current_bandwidth=f_bw)
    means = [chain.update(1.0, 0.0)[0] for _ in range(10)]
    assert_allclose(chain.i_loop, 1.0 - math.exp(-1.0), rtol=1e-9)
    # each step's current is that step's mean of the exponential: their average is the integral's
    t = 10 * DT
    assert_allclose(np.mean(means), 1.0 - (1e-3 / t) * (1.0 - math.exp(-t / 1e-3)), rtol=1e-9)
    i, torque = chain.update(1.0, 0.0)
    assert_allclose(torque, dev.k_t_n_m_a * i, rtol=1e-12)       # tau = k_t i


def test_back_emf_caps_the_current_at_speed():
    # the bus can drive only (V_bus - k_e w) / R into the winding [references.md, "Motor"]
    sc, dev, chain = chain_for(mode="current", current_bandwidth=5000.0)
    w = 0.9 * 12.0 / dev.k_e_v_s_rad            # back-EMF at 90% of the supply
    for _ in range(200):
        i, torque = chain.update(5.0, w)         # 5 A asked, far beyond what 1.2 V of headroom gives
    cap = (12.0 - dev.k_e_v_s_rad * w) / dev.resistance_ohm
    assert_allclose(i, cap, rtol=1e-12)
    assert_allclose(chain.applied_v, 12.0, rtol=1e-12)
    assert_allclose(torque, dev.k_t_n_m_a * cap, rtol=1e-12)
    for _ in range(200):                         # slower wheel: the asked current is met again
        i, _ = chain.update(0.5, 0.0)
    assert_allclose(i, 0.5, rtol=1e-9)


def test_reversal_holds_the_command_at_zero_for_the_delay():
    # our model of a driver that needs time to turn round (the statement; no source)
    sc, dev, chain = chain_for(supply=12.0, reversal_delay=0.002)     # 20 steps
    applied = []
    for cmd in [3.0] * 10 + [-3.0] * 30 + [3.0] * 5:
        chain.update(cmd, 0.0)
        applied.append(chain.applied_v)
    applied = np.array(applied)
    assert np.all(applied[:10] == 3.0)
    assert np.all(applied[10:30] == 0.0)          # held at zero for exactly the delay
    assert np.all(applied[30:40] == -3.0)
    assert np.all(applied[40:] == 0.0)            # and again on the way back
    # a command that comes back to the old direction during the wait needs no turn
    sc, dev, chain = chain_for(supply=12.0, reversal_delay=0.002)
    seq = [3.0] * 5 + [-3.0] * 5 + [2.0] * 5
    out = []
    for cmd in seq:
        chain.update(cmd, 0.0)
        out.append(chain.applied_v)
    assert out[5:10] == [0.0] * 5 and out[10:] == [2.0] * 5


def test_trip_switches_off_for_its_recovery_and_counts():
    # our model of an over-current trip (the statement; no source): above 3 A for 1 ms (10
    # steps) trips, 5 ms (50 steps) off, then driving again
    sc, dev, chain = chain_for(supply=12.0, trip={"current": 3.0, "time": 0.001, "recovery": 0.005})
    currents = np.array([chain.update(12.0, 0.0)[0] for _ in range(100)])   # stall: 6 A
    assert np.all(currents[:10] > 3.0)
    assert np.all(currents[10:60] == 0.0)
    assert np.all(currents[60:70] > 3.0)         # recovered, and over the limit again
    assert np.all(currents[70:] == 0.0)
    assert chain.trips == 2
    assert [code for _, code in chain.events] == ["driver_tripped"] * 2
    assert_allclose([t for t, _ in chain.events], [0.001, 0.007], rtol=1e-9)
    # without a recovery the driver stays off for good
    sc, dev, chain = chain_for(supply=12.0, trip={"current": 3.0, "time": 0.0})
    currents = np.array([chain.update(12.0, 0.0)[0] for _ in range(200)])
    assert currents[0] > 3.0 and np.all(currents[1:] == 0.0) and chain.trips == 1


def test_regeneration_into_the_bus_capacitance_follows_the_energy_balance():
    # 1/2 C (V2^2 - V1^2) = energy returned by the wheel minus winding losses [references.md, "Power
    # and drive", energy balance], with k_t = k_e (an ideal motor conserves energy), a bench supply
    # that cannot sink and the wheel braked at half its back-EMF (it regenerates throughout)
    c, w0 = 1e-3, 300.0
    sc = make_scenario(motor={"torque_constant": None}, body={"locked": True},
                       drive={"supply": 12.0, "bus_capacitance": c},
                       strategy={"kind": "fixed_voltage", "volts": 0.5 * w0 * 60 / (300 * 2 * math.pi)},  # k_e w0 / 2
                       trial={"duration": 0.2, "start": {"angle": 0.0, "wheel_speed": w0}})
    res = run_trial(sc)
    tr, dev = res.trace, res.device
    n = tr.n
    assert np.all(tr.bus_current[:n] < 0.0)                      # regenerating all along
    v1, v2 = tr.supply_voltage[0], res.power["peak_supply_voltage_v"]
    w_end = tr.wheel_speed[n - 1] + (tr.wheel_speed[n - 1] - tr.wheel_speed[n - 2])   # the state after the last step
    returned = 0.5 * dev.I_w_kg_m2 * (w0**2 - w_end**2)
    losses = float(np.sum(dev.resistance_ohm * tr.current[:n] ** 2) * sc.world.step)
    assert v2 > 20.0                                             # a rise worth measuring
    # 1%: the chain holds each step's bus voltage from its start (an error of order dt; 0.5% here)
    assert_allclose(0.5 * c * (v2**2 - v1**2), returned - losses, rtol=1e-2)
    m = trial_metrics(res)
    assert m["peak_supply_voltage_v"] == v2 and m["min_supply_voltage_v"] == 12.0


def test_current_mode_lqr_balances_and_records_the_bus():
    # the LQR law designed on current input holds the test device after a small tilt (its linear model
    # with tau = k_t i; discrete LQR as tests/test_lqr.py checks against python-control)
    sc = make_scenario(drive={"supply": 12.0, "mode": "current", "current_bandwidth": 800.0},
                       strategy={"kind": "lqr"}, trial={"duration": 2.0, "start": {"angle": "3 deg"}})
    res = run_trial(sc)
    assert res.outcome == "balanced"
    tr = res.trace
    assert abs(tr.angle[tr.n - 1]) < math.radians(0.5)
    dev = res.device
    # what the drive applied is what the winding needed: V = R i + k_e w (no inductance in the test device)
    k = tr.n // 2
    assert_allclose(tr.voltage[k], dev.resistance_ohm * tr.current[k] + dev.k_e_v_s_rad * tr.wheel_speed[k], rtol=1e-9)
    assert res.power["pwm_dead_band_fraction"] is None and res.power["battery_state_of_charge_end"] is None


def test_coupled_winding_heat_raises_the_resistance_as_copper_does():
    # stalled wheel (a bearing that holds it), 3 V across the winding: C dT/dt = V^2 / R(T) - (T - T_a) / R_th,
    # R(T) = R_20 (1 + 0.00393 (T - 20 degC)) [pub: CRC Handbook, copper's temperature coefficient; from
    # memory], integrated by scipy's solve_ivp as the reference
    from scipy.integrate import solve_ivp
    r_th, c_th, amb, volts, r20 = 10.0, 0.05, 25.0, 3.0, 2.0
    sc = make_scenario(body={"locked": True}, wheel={"bearing_friction": {"coulomb": 1.0}},
                       motor={"thermal": {"thermal_resistance": r_th, "thermal_capacity": c_th, "ambient": amb,
                                          "coupled": True}},
                       strategy={"kind": "fixed_voltage", "volts": volts}, trial={"duration": 2.0})
    res = run_trial(sc)

    def r_of(temp):
        return r20 * (1 + 0.00393 * (temp - 20.0))

    ref = solve_ivp(lambda t, y: [(volts**2 / r_of(y[0]) - (y[0] - amb) / r_th) / c_th], (0.0, 2.0), [amb],
                    rtol=1e-10, atol=1e-10)
    t_end = ref.y[0][-1]
    assert t_end > amb + 30.0                                           # it did heat up
    assert_allclose(res.power["peak_winding_temperature_c"], t_end, rtol=5e-3)
    # the current follows the hot resistance (re-solved each 0.5% of R: within that)
    assert_allclose(res.trace.current[res.trace.n - 1], volts / r_of(t_end), rtol=6e-3)
    assert trial_metrics(res)["peak_winding_temperature_c"] == res.power["peak_winding_temperature_c"]
