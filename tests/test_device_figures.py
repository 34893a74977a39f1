"""`validate`'s derived figures (sim/model/device_figures.py) against hand formulas on a device of our own."""

from __future__ import annotations

import math

from numpy.testing import assert_allclose

from sim.cli import main
from sim.model.device import Device
from sim.model.device_figures import device_figures
from sim.model.scenario_yaml import load_scenario
from conftest import scenario_dict, write_scenario


def test_figures_follow_the_dc_motor_and_static_balance_formulas(tmp_path):
    sc = load_scenario(write_scenario(tmp_path / "s.yaml", scenario_dict()))
    d = Device.from_scenario(sc)
    f = device_figures(d)
    mgd = d.mbar_kg_m * d.gravity_m_s2
    # DC motor: no-load speed V / k_e, stall torque k_t V / R, capped by k_t I_max
    # (references.md, "DC motor"); 1 rpm = 2 pi / 60 rad/s (definition)
    assert_allclose(f["no_load_speed_rad_s"], sc.drive.supply / sc.motor.k_e, rtol=1e-12)
    assert_allclose(f["no_load_speed_rpm"], sc.drive.supply / sc.motor.k_e * 60 / (2 * math.pi), rtol=1e-12)
    assert_allclose(f["stall_torque_supply_only_n_m"], d.k_t_n_m_a * sc.drive.supply / sc.motor.resistance, rtol=1e-12)
    i_max = sc.motor.current_limit if sc.motor.current_limit is not None else math.inf
    assert_allclose(f["stall_torque_with_current_limit_n_m"],
                    d.k_t_n_m_a * min(sc.drive.supply / sc.motor.resistance, i_max), rtol=1e-12)
    # static balance: the motor holds the body while k_t I >= mbar g sin(theta) (common practice, no source)
    holdable = math.asin(min(1.0, f["stall_torque_with_current_limit_n_m"] / mgd))
    assert_allclose(f["largest_holdable_angle_rad"], holdable, rtol=1e-12)
    assert_allclose(f["open_loop_pole_rad_s"], math.sqrt(mgd / d.J_kg_m2), rtol=1e-12)
    assert_allclose(f["centre_of_mass_from_pivot_m"] * f["mass_kg"], d.mbar_kg_m, rtol=1e-12)


def test_validate_prints_the_figures_and_the_strategy_defaults_in_use(tmp_path, capsys):
    from sim.strategies.pid import default_pd_gains

    path = write_scenario(tmp_path / "s.yaml", scenario_dict(strategy={"kind": "pid", "kd": 0.5}))
    assert main(["validate", str(path)]) == 0
    out = capsys.readouterr().out
    d = Device.from_scenario(load_scenario(path))
    kp = default_pd_gains(d)[0]
    assert f"kp = {kp:.6g} (default)" in out and "kd = 0.5 (scenario)" in out
    assert "rpm" in out and "open-loop pole" in out and "largest angle the motor can hold" in out
    assert "with the current limit" in out and "from the supply alone" in out
