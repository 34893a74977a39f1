"""The supply side (`sim.physics.battery`, `sim.model.cells`): components fed fixed current sequences,
then a locked-wheel trial on a pack. Numbers are invented for the tests unless a source is named."""

from __future__ import annotations

import math

from numpy.testing import assert_allclose

from conftest import make_scenario
from sim.model.cells import OCV_TABLES, open_circuit_volts_per_cell
from sim.physics.battery import Battery, BenchSupply
from sim.run.trial import run_trial


def test_lipo_table_meets_the_anchors_references_md_gives():
    # references.md "Power and drive" [common practice, no source]: 4.20 V full, about 3.85 V near
    # half, 3.7 V near 20%, falling steeply below 3.5 V
    assert_allclose(open_circuit_volts_per_cell("lipo", 1.0), 4.20, atol=1e-12)
    assert_allclose(open_circuit_volts_per_cell("lipo", 0.5), 3.85, atol=0.02)
    assert_allclose(open_circuit_volts_per_cell("lipo", 0.2), 3.70, atol=0.02)
    socs = [p[0] for p in OCV_TABLES["lipo"]]
    volts = [p[1] for p in OCV_TABLES["lipo"]]
    slope_low = (volts[1] - volts[0]) / (socs[1] - socs[0])
    slope_mid = (volts[7] - volts[5]) / (socs[7] - socs[5])
    assert slope_low > 3 * slope_mid        # steep below 3.5 V
    for table in OCV_TABLES.values():       # rising in charge: the state of charge can be read back
        assert all(b[0] > a[0] and b[1] > a[1] for a, b in zip(table, table[1:]))


def test_sag_is_r_int_times_the_bus_current_and_charge_is_counted():
    # V_bus = OCV(SoC) - R_int I_bus [references.md "Power and drive"]; SoC falls by I dt / capacity
    # (charge counting, the definition of capacity)
    cap = 0.45 * 3600.0                                  # 450 mAh in coulombs
    pack = Battery(chemistry="lipo", cells=3, capacity_c=cap, resistance_ohm=0.3, soc=0.6, capacitance_f=None)
    currents = [0.0, 4.0, 4.0, -2.0, 1.0]
    dt = 0.01
    for i in currents:
        pack.draw(i, dt)
        assert_allclose(pack.volts, pack.open_circuit_volts() - 0.3 * i, rtol=1e-12)
    assert_allclose(pack.soc, 0.6 - sum(currents) * dt / cap, rtol=1e-12)
    assert_allclose(pack.charge_used_c, sum(currents) * dt, rtol=1e-12)


def test_bus_capacitance_behind_the_pack_relaxes_with_r_c():
    # C dV/dt = (OCV - V)/R - I: first order, V(t) = V_inf + (V0 - V_inf) exp(-t / RC) (circuit theory)
    r, c, dt = 0.5, 2e-3, 1e-4            # RC = 1 ms
    pack = Battery(chemistry="lipo", cells=3, capacity_c=1e9, resistance_ohm=r, soc=1.0, capacitance_f=c)
    v0 = pack.volts
    for _ in range(10):                   # one time constant at 2 A
        pack.draw(2.0, dt)
    v_inf = pack.open_circuit_volts() - r * 2.0
    assert_allclose(pack.volts, v_inf + (v0 - v_inf) * math.exp(-1.0), rtol=1e-9)


def test_bench_supply_cannot_sink_regeneration_charges_the_capacitance():
    # charge balance on the capacitance, C dV = -I dt (definition of capacitance)
    bench = BenchSupply(volts=12.0, capacitance_f=1e-3)
    bench.draw(-1.0, 0.01)                # 10 mC back onto 1 mF: +10 V
    assert_allclose(bench.volts, 22.0, rtol=1e-12)
    bench.draw(1.0, 0.005)                # drawn from the capacitance first
    assert_allclose(bench.volts, 17.0, rtol=1e-12)
    bench.draw(1.0, 0.01)                 # 5 V of it from the capacitance, the rest from the supply
    assert_allclose(bench.volts, 12.0, rtol=1e-12)
    assert_allclose(bench.charge_used_c, 0.005, rtol=1e-9)
    ideal = BenchSupply(volts=12.0, capacitance_f=None)
    ideal.draw(-3.0, 1.0)
    assert ideal.volts == 12.0            # no capacitance: today's ideal source


def test_locked_wheel_at_full_duty_on_a_pack_settles_where_the_motor_equation_says():
    # Steady state of the DC motor [references.md "Motor"] on a sagging source [references.md "Power
    # and drive"]: k_t i = b w (bearing viscous friction b), V_bus = OCV - R_int i (duty 1: I_bus = i),
    # V_bus = R i + k_e w  =>  w = OCV / (k_e + (R + R_int) b / k_t).
    b, r_int = 2e-4, 0.4
    sc = make_scenario(drive={"supply": None}, body={"locked": True},
                       wheel={"bearing_friction": {"viscous": b}},
                       battery={"cells": 3, "chemistry": "lipo", "capacity": "2200 mAh",
                                "internal_resistance": r_int, "state_of_charge": 0.8},
                       strategy={"kind": "fixed_voltage", "volts": 50.0},   # beyond the pack: full duty
                       trial={"duration": 3.0})
    res = run_trial(sc)
    tr, k = res.trace, res.trace.n - 1
    k_e, k_t, r = sc.motor.k_e, sc.motor.k_t, sc.motor.resistance
    soc_end = res.power["battery_state_of_charge_end"]
    ocv = 3 * open_circuit_volts_per_cell("lipo", soc_end)
    w = ocv / (k_e + (r + r_int) * b / k_t)
    assert_allclose(tr.wheel_speed[k], w, rtol=2e-3)
    i = b * w / k_t
    assert_allclose(tr.current[k], i, rtol=5e-3)
    # the supply column sags by R_int I below the open-circuit voltage
    assert_allclose(tr.supply_voltage[k], ocv - r_int * tr.bus_current[k], rtol=1e-6)
    assert_allclose(tr.bus_current[k], tr.current[k], rtol=1e-9)       # duty 1: I_bus = i
    assert tr.supply_voltage[0] - tr.supply_voltage[1] > 1.0             # the start's inrush sags it too
    # full duty on a sagging pack is saturation, though the volts stay below the starting supply
    from sim.run.metrics import trial_metrics
    assert trial_metrics(res)["voltage_saturated_fraction"] == 1.0 and tr.voltage[k] < sc.drive.supply
    # the pack drains as it runs: the settled wheel slows with the open-circuit voltage
    assert tr.wheel_speed[k] < tr.wheel_speed[k - 100]


def test_pack_open_circuit_voltage_is_the_cells_table_at_every_state_of_charge():
    # the pack holds its table segment between steps: across segment edges, both ways, and past the
    # ends (clamped) it must still read cells x the table (sim.model.cells)
    for chem in ("lipo", "li-ion", "nimh"):
        pack = Battery(chemistry=chem, cells=4, capacity_c=1.0, resistance_ohm=0.0, soc=0.97, capacitance_f=None)
        for soc in [0.97 - 0.013 * k for k in range(80)] + [0.05 + 0.021 * k for k in range(50)] + [1.2, -0.3]:
            pack.soc = soc
            assert_allclose(pack.open_circuit_volts(), 4 * open_circuit_volts_per_cell(chem, soc), rtol=1e-12)
