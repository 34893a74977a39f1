"""`check` on 3D devices (`sim.studies.check3d`, `verdicts3d`, `verdict_report3d`) through the CLI.

The devices are invented for these tests: a 0.5 kg frame on a ball socket with three aluminium
rings on orthogonal axes; the same with a torque-starved motor; and a lopsided one whose y wheel
is a small ring.
"""

from __future__ import annotations

import json
import math

import pytest
from numpy.testing import assert_allclose

from conftest import scenario_dict, write_scenario
from sim.cli import main
from sim.core.safety import SAFETY_NOTES
from sim.model.device3d import Device3D
from sim.model.scenario import validate_scenario
from sim.studies import check3d

RING = {"shape": "ring", "outer_radius": 0.045, "inner_radius": 0.005, "thickness": 0.005, "material": "aluminium"}
FOUR = {"+x": 0, "+y": 90, "-x": 180, "-y": 270}   # fewer push axes than the default eight: a lean test


def ball_raw(*, k_t: float = 0.03, current_limit: float = 6.0, wheels=None) -> dict:
    raw = scenario_dict(
        world={"step": 0.002},
        body={"mount": "ball", "parts": [{"name": "frame", "shape": "box", "length": 0.12, "width": 0.1,
                                          "thickness": 0.1, "mass": 0.5, "at": 0.06}],
              "pivot_friction": {"viscous": 1e-4}},
        motor={"speed_constant": "40 rad/s/V", "torque_constant": k_t, "resistance": 1.0, "inductance": 2e-4,
               "current_limit": current_limit, "rotor_inertia": 1e-5, "mass": 0.05},
        drive={"supply": 12.0},
        sensors={"rate": 250.0, "delay": 0.004, "angle": {"noise": 0.0005}, "rate_gyro": {"noise": 0.005}},
        strategy={"kind": "lqr"},
        requirements={"hold_time": 2.0, "run_time": 30.0, "min_push": 0.01},
        trial={"duration": 2.0, "start": {"tilt": [0.03, -0.02]}})
    raw.pop("wheel")
    raw["wheels"] = wheels or [
        {"at": [0.0, 0.0, 0.1], "axis": [1, 0, 0], "parts": [dict(RING, name="wheel x")]},
        {"at": [0.0, 0.0, 0.11], "axis": [0, 1, 0], "parts": [dict(RING, name="wheel y")]},
        {"at": [0.0, 0.0, 0.13], "axis": [0, 0, 1], "parts": [dict(RING, name="wheel z")]}]
    return raw


def _check(tmp_path, raw, monkeypatch) -> tuple[int, dict]:
    monkeypatch.setattr(check3d, "BALL_DIRECTIONS", FOUR)
    path = write_scenario(tmp_path / "ball.yaml", raw)
    code = main(["check", str(path), "--trials", "2", "--workers", "1", "--out", str(tmp_path / "out")])
    return code, json.loads((tmp_path / "out" / "verdict.json").read_text())


def test_check_passes_a_strong_three_wheel_ball_device(tmp_path, monkeypatch):
    code, v = _check(tmp_path, ball_raw(), monkeypatch)
    assert code == 0 and v["passed"], [c for c in v["criteria"] if not c["passed"]]
    names = [c["name"] for c in v["criteria"]]
    assert names == ["hold_max_tilt_rad", "settle_time_s", "max_push_survived_n_m_s", "wheel_speed_margin",
                     "wheel_runaway_time_s", "voltage_headroom", "current_headroom", "winding_temperature_c",
                     "wheel_burst_safety_factor", "monte_carlo_pass_fraction", "step_halving_change"]
    # the nominal trial again at half the step moves little (step-halving, common practice, no source)
    assert v["step_convergence"]["converged"] and v["step_convergence"]["half_step_s"] == pytest.approx(1e-3)
    assert set(v["pushes"]) == set(FOUR) and v["max_push_direction"] in FOUR
    assert [w["wheel"] for w in v["wheels"]] == [1, 2, 3]
    assert {h["axis"] for h in v["runaway_holds"]} == {"x", "y"} and len(v["runaway_holds"]) == 4
    # the hold starts off upright, so the law had to work: its tilt starts at the hold's 1 degree
    assert_allclose(v["runs"]["hold"]["peak_tilt_rad"], check3d.HOLD_TILT_RAD, rtol=0.05)
    # burst: each wheel at its own runaway speed; a thin-ish aluminium ring's bore stress from the
    # rotating-disk formula (Timoshenko & Goodier; references.md) gives a safety factor far above 4
    assert all(w["burst"]["runaway_speed_rad_s"] == pytest.approx(12.0 * 40.0) for w in v["wheels"])
    report = (tmp_path / "out" / "report.md").read_text()
    assert "## Each wheel" in report and "## Bias holds" in report
    # every hold carries the linear loop's prediction beside the simulated wheels (sim/studies/runaway3d.py;
    # its numbers are checked in tests/test_runaway3d.py)
    assert all(len(h["wheels"]) == 3 and all(w["predicted_steady_speed_rad_s"] is not None for w in h["wheels"])
               for h in v["runaway_holds"])
    assert "### Linear prediction beside the holds" in report
    assert "the law predicts a steady wheel offset" in next(c["note"] for c in v["criteria"]
                                                            if c["name"] == "wheel_runaway_time_s")
    assert all(note in report for note in SAFETY_NOTES)
    for name in ("nominal.png", "hold.png", "pushes.png", "monte_carlo.csv"):
        assert (tmp_path / "out" / name).stat().st_size > 100


def test_check_fails_a_torque_starved_device_and_names_the_cause(tmp_path, monkeypatch):
    raw = ball_raw(k_t=0.0015, current_limit=1.0)
    dev = Device3D.from_scenario(validate_scenario(raw, where="t"))
    # statics (common practice, no source): holding a tilt theta takes m g d sin(theta) about the
    # tilt axis; tilted evenly about x and y, the x and y wheels give at most sqrt(2) k_t I_max there
    assert math.sqrt(2) * 0.0015 * 1.0 < dev.gravity_torque_coeff_n_m * math.sin(check3d.HOLD_TILT_RAD)
    code, v = _check(tmp_path, raw, monkeypatch)
    assert code == 1 and not v["passed"]
    crit = {c["name"]: c for c in v["criteria"]}
    assert not crit["hold_max_tilt_rad"]["passed"] and "current_at_limit" in crit["hold_max_tilt_rad"]["note"]
    assert v["runs"]["hold"]["cause"] == "current_at_limit"
    assert not crit["max_push_survived_n_m_s"]["passed"]
    assert crit["wheel_burst_safety_factor"]["passed"]          # the wheels themselves are sound


def test_the_push_search_finds_the_weak_direction_of_a_lopsided_device():
    wheels = [{"at": [0.0, 0.0, 0.1], "axis": [1, 0, 0], "parts": [dict(RING, name="big wheel x")]},
              {"at": [0.0, 0.0, 0.11], "axis": [0, 1, 0], "parts": [dict(RING, name="small wheel y", outer_radius=0.025)]}]
    sc = validate_scenario(ball_raw(wheels=wheels), where="t")
    dev = Device3D.from_scenario(sc)
    dirs = check3d.push_directions(dev)
    pushes = {d: check3d.max_push3d(sc, dirs[d], seed=1)["max_survived_n_m_s"] for d in ("+x", "+y")}
    assert min(pushes, key=pushes.get) == "+y"
    assert pushes["+y"] < 0.7 * pushes["+x"]          # measured: 6.1 against 14.4 mN m s
    # angular-momentum principle (Meriam & Kraige, Dynamics): the push about y ends up in the y wheel,
    # which takes at most I_s w_no-load from rest (gravity's impulse over the recovery is small against it)
    y = dev.wheels[1]
    assert pushes["+y"] < y.spin_inertia_kg_m2 * y.no_load_speed_rad_s


def test_a_tilted_wheel_axis_costs_its_hinge_share(tmp_path):
    # statics: a hinge turns with the component of the wheel's torque along it, cos(20 deg) of it
    from pathlib import Path

    from sim.model.device_figures3d import holdable_tilt
    from sim.model.scenario_yaml import load_raw
    raw, where = load_raw(Path(__file__).resolve().parents[1] / "scenarios" / "tilted_axis.yaml", ())
    dev = Device3D.from_scenario(validate_scenario(raw, where=where))
    twin = Device3D.from_scenario(validate_scenario(check3d.aligned_raw(raw), where=where))
    assert_allclose(check3d.hinge_shares(dev), [math.cos(math.radians(20))], rtol=1e-6)   # the file gives 7 digits
    assert check3d.hinge_shares(twin) == [1.0]
    assert_allclose(twin.gravity_torque_coeff_n_m, dev.gravity_torque_coeff_n_m, rtol=1e-12)
    # largest holdable tilt: sin(theta) = share x stall torque / (m g d)
    assert_allclose(math.sin(holdable_tilt(dev)[0]) / math.sin(holdable_tilt(twin)[0]), check3d.hinge_shares(dev)[0],
                    rtol=1e-9)


def test_a_bad_key_in_a_3d_check_is_one_line_and_writes_nothing(tmp_path, capsys):
    path = write_scenario(tmp_path / "ball.yaml", ball_raw())
    code = main(["check", str(path), "--set", "requirements.min_pus=0.1", "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err.strip()
    assert code == 2 and len(err.splitlines()) == 1 and "min_pus" in err, err
    assert not (tmp_path / "out").exists()
