"""`check` on floor devices (`sim.studies.check_floor`) through the CLI.

Devices: the demo cubes (scenarios/floor_jump.yaml, a jump law; scenarios/floor_cube.yaml, LQR on an
edge), the jump cube at a 4 V supply (too weak to jump) and the LQR cube on a slippery floor. Trials
are kept short (1 s bias holds, one Monte Carlo trial).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from sim.cli import main
from sim.model.device3d import Device3D
from sim.model.scenario_yaml import load_scenario

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"


def _check(tmp_path, name: str, *sets: str) -> tuple[int, dict]:
    args = ["check", str(SCENARIOS / name), "--out", str(tmp_path / "out"), "--trials", "1", "--workers", "1"]
    for s in sets:
        args += ["--set", s]
    code = main(args)
    return code, json.loads((tmp_path / "out" / "verdict.json").read_text())


def _crit(v: dict) -> dict:
    return {c["name"]: c for c in v["criteria"]}


def _needed_wheel_speed_rad_s(device, rest_tilt_rad: float) -> float:
    """Face-to-edge jump, computed here from the device's mass properties (wheel axis along the edge, x):
    the brake locks the wheel to the body, angular momentum about the edge is kept (the edge's impulse has
    no moment about it): J_w w_w = Theta_0 w_b; then energy: Theta_0 w_b^2 / 2 = M g d (1 - cos theta_0).
    Gajamohan, Merz, Thommen & D'Andrea, IROS 2012, the jump-up relations (from memory); the energy and
    momentum balances are those of any rigid-body dynamics text (e.g. Meriam & Kraige, Dynamics)."""
    wheels = device.wheels
    masses = [device.body_mass_kg] + [w.mass_kg for w in wheels]
    centres = [np.asarray(device.body_com_m)] + [np.asarray(w.at_m) for w in wheels]
    m_total = sum(masses)
    com = sum(m * c for m, c in zip(masses, centres)) / m_total
    d = math.hypot(com[1], com[2])
    theta0 = device.body_inertia_com_kg_m2[0][0] + device.body_mass_kg * (centres[0][1] ** 2 + centres[0][2] ** 2)
    for w, c in zip(wheels, centres[1:]):
        theta0 += w.spin_inertia_kg_m2 + w.mass_kg * (c[1] ** 2 + c[2] ** 2)   # parallel axes
    body_rate = math.sqrt(2 * m_total * device.gravity_m_s2 * d * (1 - math.cos(rest_tilt_rad)) / theta0)
    return theta0 * body_rate / sum(w.spin_inertia_kg_m2 for w in wheels)


def test_a_jump_device_that_reaches_passes_the_jump_criteria(tmp_path):
    code, v = _check(tmp_path, "floor_jump.yaml")
    crit = _crit(v)
    for name in ("jump_up_time_s", "jump_attempts", "jump_margin", "fall_recovered_attempts"):
        assert crit[name]["passed"], crit[name]
    assert code == 0 and v["passed"], [c for c in v["criteria"] if not c["passed"]]
    assert v["runs"]["nominal"]["outcome"] == "balanced" and v["runs"]["recover"]["outcome"] == "balanced"
    assert v["runs"]["recover"]["jump_attempts"] >= 1          # it really fell onto a face and jumped again
    assert crit["jump_margin"]["limit"] == pytest.approx(0.2)
    # the needed speed the law worked from, against the momentum-and-energy relation computed here for a
    # cube lying on a face (centre of mass at the cube's centre: 45 deg from above the edge)
    device = Device3D.from_scenario(load_scenario(SCENARIOS / "floor_jump.yaml"))
    need = _needed_wheel_speed_rad_s(device, math.radians(45.0))
    assert v["runs"]["nominal"]["needed_wheel_speed_rad_s"] == pytest.approx(need, rel=0.03)
    assert (tmp_path / "out" / "report.md").read_text().count("jump_margin") >= 1
    # Monte Carlo of the jump-up over the default tolerances: one trial here, its row in monte_carlo.csv
    assert v["monte_carlo"]["trials"] == 1 and crit["monte_carlo_pass_fraction"]["passed"]
    rows = (tmp_path / "out" / "monte_carlo.csv").read_text().splitlines()
    assert len(rows) == 2 and rows[1].split(",")[-3] == "True"


def _wilson(k: int, n: int) -> tuple[float, float]:
    """Wilson score interval, written out here from Wilson, JASA 22 (1927) 209-212 (shared/references.md), at
    95%: z the standard normal's 97.5% quantile (1.95996..., from the standard library)."""
    from statistics import NormalDist
    z = NormalDist().inv_cdf(0.975)
    p = k / n
    centre, half = p + z * z / (2 * n), z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    return (centre - half) / (1 + z * z / n), (centre + half) / (1 + z * z / n)


def test_the_corner_jump_demo_passes_check_and_recovers_from_a_push_off_its_corner(tmp_path):
    args = ["check", str(SCENARIOS / "floor_corner_jump.yaml"), "--out", str(tmp_path / "out"), "--trials", "2",
            "--workers", "1"]
    code = main(args)
    v = json.loads((tmp_path / "out" / "verdict.json").read_text())
    crit = _crit(v)
    assert code == 0 and v["passed"], [c for c in v["criteria"] if not c["passed"]]
    assert v["balance_on"] == "corner" and v["runs"]["nominal"]["jump_attempts"] == 1
    rec = v["runs"]["recover"]
    assert rec["outcome"] == "balanced" and rec["jump_attempts"] >= 1   # it fell off its corner and jumped again
    assert "off its corner" in crit["fall_recovered_attempts"]["note"]
    mc = v["monte_carlo"]
    assert mc["trials"] == 2 and crit["monte_carlo_pass_fraction"]["value"] == mc["passed_trials"] / 2
    np.testing.assert_allclose([mc["pass_fraction_low"], mc["pass_fraction_high"]], _wilson(mc["passed_trials"], 2),
                               rtol=1e-12)   # hand formula: only rounding
    assert "## Monte Carlo" in (tmp_path / "out" / "report.md").read_text()


def test_too_weak_a_motor_fails_on_jump_margin(tmp_path):
    code, v = _check(tmp_path, "floor_jump.yaml", "drive.supply=4 V")
    crit = _crit(v)
    assert code == 1 and not v["passed"]
    assert not crit["jump_margin"]["passed"] and crit["jump_margin"]["value"] < 0
    # a DC motor cannot turn faster than its no-load speed Kv * V (motor handbook relation; Kv 200 rpm/V here)
    no_load = 200 * 4 * 2 * math.pi / 60
    need = v["runs"]["nominal"]["needed_wheel_speed_rad_s"]
    assert crit["jump_margin"]["value"] <= no_load / need - 1 + 1e-9
    assert not crit["jump_up_time_s"]["passed"] and v["runs"]["nominal"]["outcome"] != "balanced"


@pytest.mark.parametrize("friction, slips", [(0.5, False), (0.15, True)])
def test_an_lqr_floor_device_on_a_slippery_floor_fails_the_slip_criterion(tmp_path, friction, slips):
    # the same cube and law; the scenario's 20 mN m s push slides the edge more on the slipperier floor
    # (Coulomb friction: the contact holds while |F_t| < mu F_n, Meriam & Kraige, Statics, ch. 6)
    code, v = _check(tmp_path, "floor_cube.yaml", f"floor.friction={friction}", "requirements.hold_time=1 s")
    crit = _crit(v)
    slip = crit["contact_slip_m"]
    assert slip["limit"] == pytest.approx(0.005)
    assert slip["passed"] is (not slips) and (slip["value"] > slip["limit"]) is slips, slip
    assert v["runs"]["nominal"]["outcome"] == ("slipped" if slips else "balanced")
    ratio = crit["peak_friction_ratio"]
    assert ratio["limit"] == pytest.approx(friction) and ratio["passed"] == (ratio["value"] < friction)
    assert code == (0 if v["passed"] else 1) and (not slips or not v["passed"])


def test_a_jump_cube_on_a_slippery_floor_with_a_noisy_gyro_recovers_from_a_fall(tmp_path):
    # Before: the fall was started by a push, which the floor engine applies as a horizontal force at the
    # centre of mass over one step; on a floor of friction 0.5 it slid the cube or knocked it past its face,
    # and with 0.03 rad/s of gyro noise the law never saw it at rest to jump again: the criterion failed
    # with the recovery never tested. Now the cube starts on its edge turning about it (an ideal kick)
    code, v = _check(tmp_path, "floor_jump.yaml", "floor.friction=0.5", "sensors.rate_gyro.noise=0.03 rad/s")
    crit = _crit(v)
    assert crit["fall_recovered_attempts"]["passed"], crit["fall_recovered_attempts"]
    rec = v["runs"]["recover"]
    assert rec["outcome"] == "balanced" and rec["jump_attempts"] >= 1
    assert v["recover_kick_n_m_s"] > 0 and v["recover_tries"][-1]["jump_attempts"] >= 1
