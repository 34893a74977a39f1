"""`fit` on 3D devices (sim/fit/bench3d.py): one wheel of several, a hinge swinging about its hinge.

Logs are simulated from a two-wheel hinge scenario of our own whose figures are known (the second
wheel has its own motor and a 20 degree tilted axis), seeded noise is added, and the fit must find
the figures within its own stated uncertainty; then fit -> patch.yaml -> apply -> validate end to end.
"""

from __future__ import annotations

import json
import math
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
import yaml
from numpy.testing import assert_allclose

from sim.cli import main
from sim.fit.bench_tests import fit_log
from sim.fit.logs import read_log, wheel_aliases
from sim.model.device3d import Device3D
from sim.model.scenario_yaml import load_scenario

SCENARIO = """\
# two wheels on a hinge (our own invention): the second has its own motor and an axis 20 deg off the hinge
name: two-wheel bench
body:
  parts:
    - {name: arm, shape: box, length: 220 mm, width: 20 mm, thickness: 6 mm, material: aluminium, at: 110 mm}
  locked: true      # the bench clamps the body (body.locked): each wheel turns its own inertia
wheels:
  - at: 200 mm
    axis: [1, 0, 0]
    parts:
      - {name: rim, shape: ring, outer_radius: 60 mm, inner_radius: 50 mm, thickness: 6 mm, material: PLA}
    bearing_friction: {coulomb: 0.5 mN*m, viscous: 2e-6 N*m*s/rad}
  - at: [0, 30 mm, 150 mm]
    axis: [0.9396926, 0.3420201, 0]
    inertia_correction: 2e-5 kg*m^2
    parts:
      - {name: rim, shape: ring, outer_radius: 70 mm, inner_radius: 55 mm, thickness: 8 mm, material: PLA}
    bearing_friction: {coulomb: 1.2 mN*m, viscous: 5e-6 N*m*s/rad}
    motor:
      speed_constant: 400 rpm/V   # wheel 2's own
      resistance: 2.5 ohm
      inductance: 0.1 mH
      rotor_inertia: 5e-6 kg*m^2
motor:
  speed_constant: 300 rpm/V   # shared: wheel 1's
  resistance: 1.8 ohm
  inductance: 0.2 mH
  rotor_inertia: 8e-6 kg*m^2
drive: {supply: 12 V}
strategy: {kind: fixed_voltage, volts: 6 V}
trial: {duration: 4 s, start: {angle: 0 deg}}
"""
SIGMAS = 3.0          # a fitted value lies within 3 of its stated standard deviations of the truth


def _scenario(tmp_path: Path, text: str = SCENARIO, name: str = "two.yaml") -> Path:
    path = tmp_path / name
    path.write_text(text)
    return path


def _noisy_trace(tmp_path: Path, scenario: Path, overrides: tuple, *, noise: dict, seed: int) -> Path:
    """The scenario's trial as a CSV trace with seeded Gaussian noise on the named columns (SI), log.csv;
    the trace without noise is clean.csv beside it."""
    from sim.run.trace3d import write_csv3d
    from sim.run.trial import run_trial

    result = run_trial(load_scenario(scenario, overrides=overrides))
    clean = tmp_path / "clean.csv"
    write_csv3d(result.trace, clean)
    head = clean.read_text().splitlines()[0].split(",")
    keep = [h for h in head if h != "mode"]
    data = np.genfromtxt(clean, delimiter=",", names=True, usecols=[head.index(h) for h in keep])
    rng = np.random.default_rng(seed)
    cols = [data[h] + (rng.normal(0.0, noise[h], len(data)) if h in noise else 0.0) for h in keep]
    path = tmp_path / "log.csv"
    np.savetxt(path, np.column_stack(cols), delimiter=",", header=",".join(keep), comments="")
    return path


def _within(result, key: str, truth: float) -> None:
    value, sigma = result.values[key]
    assert abs(value - truth) <= SIGMAS * sigma, f"{key}: {value:.6g} +- {sigma:.2g} against {truth:.6g}"


@pytest.fixture(scope="module")
def bench(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("bench3d")
    path = _scenario(tmp)
    sc = load_scenario(path)
    return tmp, path, sc, Device3D.from_scenario(sc)


def test_spin_up_of_the_second_wheel_recovers_its_motor_and_inertia(bench):
    tmp, path, sc, dev = bench
    log_path = _noisy_trace(tmp, path, (), noise={"wheel2_speed_rad_s": 0.3, "wheel2_current_a": 0.02}, seed=3)
    res = fit_log(read_log(log_path, aliases=wheel_aliases(2)), "spin-up", scenario=sc, wheel=2)
    w = dev.wheels[1]
    assert res.values["wheel_spin_inertia_kg_m2"][1] < 2e-3 * w.spin_inertia_kg_m2     # the check has teeth
    # k_e = 60 / (2 pi Kv) for Kv in rpm/V (a motor's speed constant, common practice, no source)
    assert_allclose(w.k_e_v_s_rad, 60.0 / (2.0 * math.pi * 400.0), rtol=1e-12)
    _within(res, "back_emf_constant_v_s_per_rad", w.k_e_v_s_rad)
    _within(res, "resistance_ohm", w.resistance_ohm)
    _within(res, "wheel_spin_inertia_kg_m2", w.spin_inertia_kg_m2)
    # the wheel's own keys and its own motor, nothing of wheel 1's or the shared motor's
    assert set(res.patch) == {"wheels[1]"}
    assert set(res.patch["wheels[1]"]) == {"motor", "inertia_correction"}
    assert_allclose(res.patch["wheels[1]"]["inertia_correction"], 2e-5,
                    atol=SIGMAS * res.values["wheel_spin_inertia_kg_m2"][1])
    assert "own motor" in res.target_note and "wheels[1].motor" in res.target_note


def test_coast_down_of_the_first_wheel_recovers_its_bearing(bench):
    tmp, path, sc, dev = bench
    log_path = _noisy_trace(tmp, path, ("strategy.kind=coast", "trial.start.wheel_speed=[150, 200]",
                                         "trial.duration=6"), noise={"wheel1_speed_rad_s": 0.2}, seed=4)
    res = fit_log(read_log(log_path, aliases=wheel_aliases(1)), "coast-down", scenario=sc, wheel=1)
    _within(res, "bearing_coulomb_torque_n_m", 0.5e-3)
    _within(res, "bearing_viscous_n_m_s_per_rad", 2e-6)
    assert res.patch == {"wheels[0]": {"bearing_friction": {"coulomb": res.value("bearing_coulomb_torque_n_m"),
                                                            "viscous": res.value("bearing_viscous_n_m_s_per_rad")}}}
    assert res.target_note is None      # no motor values: nothing to say about which motor


SWING = (SCENARIO.replace("  locked: true      # the bench clamps the body (body.locked): each wheel turns its own inertia",
                          "  pivot_friction: {coulomb: 0.3 mN*m, viscous: 1e-4 N*m*s/rad}")
         .replace("body:\n  parts:", "body:\n  inertia_correction: 2e-3 kg*m^2\n  parts:")
         .replace("{coulomb: 0.5 mN*m, viscous: 2e-6 N*m*s/rad}", "{coulomb: 0, viscous: 0}")
         .replace("{coulomb: 1.2 mN*m, viscous: 5e-6 N*m*s/rad}", "{coulomb: 0, viscous: 0}")
         .replace("{kind: fixed_voltage, volts: 6 V}", "{kind: coast}")
         .replace("{duration: 4 s, start: {angle: 0 deg}}", "{duration: 8 s, start: {angle: 140 deg}}"))


@pytest.mark.slow
def test_free_swing_about_the_hinge_recovers_inertia_and_friction(tmp_path):
    # Free bearings keep each wheel's spin momentum, so the swing's inertia is the body's about the
    # hinge with the wheels' spin inertia left out (references.md, free swing); the tilted wheel 2
    # swings with its transverse inertia I_t (1 - a_x^2) and its mass.
    path = _scenario(tmp_path, SWING)
    sc = load_scenario(path)
    dev = Device3D.from_scenario(sc)
    # 1e-3 rad: about a 4096-count encoder's quantisation noise (q / sqrt(12) = 4.4e-4 rad) doubled
    log_path = _noisy_trace(tmp_path, path, (), noise={"tilt_x_rad": 1e-3}, seed=5)
    aliases = wheel_aliases(hinge_angle=True)
    res = fit_log(read_log(log_path, aliases=aliases), "free-swing", scenario=sc)
    truth = float(dev.inertia_about_pivot_kg_m2(with_spin=False)[0, 0])
    _within(res, "body_inertia_about_pivot_kg_m2", truth)
    assert res.values["body_inertia_about_pivot_kg_m2"][1] < 1e-4 * truth     # the check has teeth
    assert_allclose(res.patch["body"]["inertia_correction"], 2e-3,
                    atol=SIGMAS * res.values["body_inertia_about_pivot_kg_m2"][1])
    # the two frictions are told apart only roughly under that noise (their sigmas are ~30%); from the
    # clean trace, pybullet's per-step friction within the one-wheel round trip's 5% (tests/test_fitting.py)
    clean = fit_log(read_log(tmp_path / "clean.csv", aliases=aliases), "free-swing", scenario=sc)
    assert_allclose(clean.value("coulomb_torque_n_m"), 3e-4, rtol=0.05)
    assert_allclose(clean.value("pivot_viscous_n_m_s_per_rad"), 1e-4, rtol=0.05)


def test_cli_fit_patch_apply_validate_end_to_end(tmp_path, capsys):
    path = _scenario(tmp_path)
    log_path = _noisy_trace(tmp_path, path, (), noise={"wheel2_speed_rad_s": 0.3, "wheel2_current_a": 0.02}, seed=6)
    out = tmp_path / "fit"
    assert main(["fit", str(log_path), "--test", "spin-up", "--scenario", str(path), "--wheel", "2",
                 "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "note: wheel 2 has its own motor: motor values go to wheels[1].motor" in printed
    patch = yaml.safe_load((out / "patch.yaml").read_text())
    assert set(patch) == {"wheels[1]"}
    fitted = tmp_path / "fitted.yaml"
    assert main(["apply", str(path), str(out / "patch.yaml"), "--out", str(fitted)]) == 0
    text = fitted.read_text()
    assert "speed_constant: 400 rpm/V" not in text and "speed_constant: 300 rpm/V   # shared" in text
    assert "# two wheels on a hinge (our own invention)" in text          # comments kept
    assert main(["validate", str(fitted)]) == 0
    before, after = Device3D.from_scenario(load_scenario(path)), Device3D.from_scenario(load_scenario(fitted))
    assert after.wheels[0] == before.wheels[0]                              # wheel 1 untouched
    k_e = patch["wheels[1]"]["motor"]["back_emf_constant"]
    assert after.wheels[1].k_e_v_s_rad == k_e and after.wheels[1].resistance_ohm == patch["wheels[1]"]["motor"]["resistance"]
    assert_allclose(after.wheels[1].spin_inertia_kg_m2, before.wheels[1].spin_inertia_kg_m2, rtol=5e-3)
    assert (out / "scenario_fitted.yaml").read_text().endswith(text)


def test_cli_shared_motor_is_named(tmp_path, capsys):
    path = _scenario(tmp_path)
    log_path = _noisy_trace(tmp_path, path, ("trial.duration=1.5",), noise={}, seed=7)
    out = tmp_path / "fit"
    assert main(["fit", str(log_path), "--test", "spin-up", "--scenario", str(path), "--wheel", "1",
                 "--out", str(out)]) == 0
    assert "wheel 1 has no motor of its own: motor values go to the shared motor, which wheel 1 uses" \
        in capsys.readouterr().out
    patch = yaml.safe_load((out / "patch.yaml").read_text())
    assert set(patch) == {"motor", "wheels[0]"}


@pytest.mark.parametrize("args, words", [
    (["--test", "spin-up"], "--wheel: "),
    (["--test", "spin-up", "--wheel", "3"], "--wheel 3: "),
    (["--test", "spin-up", "--wheel", "0"], "--wheel 0: "),
    (["--test", "free-swing", "--wheel", "1"], "--wheel 1: free-swing fits the body's swing"),
])
def test_cli_bad_wheel_is_one_line_exit_2(tmp_path, capsys, args, words):
    path = _scenario(tmp_path)
    log = tmp_path / "log.csv"
    log.write_text("t_s,wheel1_speed_rad_s,wheel1_voltage_v\n" + "".join(f"{k * 0.01},{k},6\n" for k in range(50)))
    out = tmp_path / "o"
    assert main(["fit", str(log), *args, "--scenario", str(path), "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and words in err, err
    assert not out.exists()


def test_apply_refuses_a_wheel_the_scenario_does_not_have(tmp_path, capsys):
    path = _scenario(tmp_path)
    patch = tmp_path / "p.yaml"
    patch.write_text("wheels[2]:\n  inertia_correction: 1e-5\n")
    out = tmp_path / "x.yaml"
    assert main(["apply", str(path), str(patch), "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "wheels[2]" in err and "2 items" in err, err
    assert not out.exists()


def test_wheel_columns_are_read_for_the_named_wheel_only(tmp_path):
    log = tmp_path / "log.csv"
    log.write_text("t_ms,wheel1_speed_rpm,wheel2_speed_rad_s,wheel2_voltage_v,tilt_x_deg\n"
                   + "".join(f"{k},{60 * k},{2 * k},6,{k}\n" for k in range(20)))
    two = read_log(log, aliases=wheel_aliases(2))
    assert_allclose(two.columns["wheel_speed_rad_s"], 2.0 * np.arange(20))
    one = read_log(log, aliases=wheel_aliases(1, hinge_angle=True))
    # 60 rpm = 2 pi rad/s (definition of the unit)
    assert_allclose(one.columns["wheel_speed_rad_s"], 2.0 * math.pi * np.arange(20))
    assert_allclose(one.columns["angle_rad"], np.radians(np.arange(20)))
    assert "voltage_v" not in one.columns and "angle_rad" not in two.columns
    plain = read_log(log)
    assert set(plain.columns) == set()   # numbered columns are ignored unless a wheel is named
    assert replace(plain).t_s[1] == pytest.approx(1e-3)


BALL = """\
# a box hanging from a ball socket (our own invention), one wheel on x with a free bearing
name: ball swing
body:
  mount: ball
  inertia_correction: 1e-3 kg*m^2
  parts:
    - {name: box, shape: box, length: 60 mm, width: 40 mm, thickness: 160 mm, mass: 300 g, at: 100 mm}
  pivot_friction: {coulomb: 0.3 mN*m, viscous: 1e-4 N*m*s/rad}
wheels:
  - at: [0, 0, 150 mm]
    axis: [1, 0, 0]
    parts: [{name: rim, shape: ring, outer_radius: 50 mm, inner_radius: 40 mm, thickness: 6 mm, material: PLA}]
    bearing_friction: {coulomb: 0, viscous: 0}
motor: {speed_constant: 300 rpm/V, resistance: 1.8 ohm, inductance: 0.2 mH, rotor_inertia: 8e-6 kg*m^2}
drive: {supply: 12 V}
strategy: {kind: coast}
trial: {duration: 8 s, start: {tilt: [90 deg, 0]}}
"""


@pytest.mark.slow
def test_free_swing_on_a_ball_about_world_x(tmp_path, capsys):
    # The box is symmetric about its own x and y, so a swing about world x (body x, upright) stays one
    # pendulum (the trace's tilt_y stays 0); J about x with the wheel's spin left out (free bearing,
    # references.md). Released 90 deg from hanging (a ball's start tilt is at most 90 deg), the fit reads
    # J 5.6e-4 low, as it does for the hinge device above from 90 deg (5.7e-4; 1.4e-5 from 40 deg), the
    # same at a quarter of the step: the free-swing fit's own large-amplitude bias, so 1e-3 allowed here.
    from sim.fit.bench3d import ball_swing_inertia
    path = _scenario(tmp_path, BALL, "ball.yaml")
    sc = load_scenario(path)
    dev = Device3D.from_scenario(sc)
    _noisy_trace(tmp_path, path, (), noise={}, seed=8)
    out = tmp_path / "fit"
    assert main(["fit", str(tmp_path / "clean.csv"), "--test", "free-swing", "--scenario", str(path), "--axis", "x",
                 "--out", str(out)]) == 0
    report = json.loads((out / "fit.json").read_text())
    j_model, n = ball_swing_inertia(dev, "x")
    assert_allclose(n, [1.0, 0.0, 0.0], atol=1e-12)
    assert_allclose(j_model, dev.inertia_about_pivot_kg_m2(with_spin=False)[0, 0], rtol=1e-12)   # no coupling here
    assert_allclose(report["fitted"]["body_inertia_about_pivot_kg_m2"]["value"], j_model, rtol=1e-3)
    assert_allclose(report["patch"]["body"]["inertia_correction"], 1e-3, atol=1e-3 * j_model)
    # pybullet's per-step friction: the one-wheel round trip's 5% (tests/test_fitting.py)
    assert_allclose(report["fitted"]["coulomb_torque_n_m"]["value"], 3e-4, rtol=0.05)
    assert_allclose(report["fitted"]["pivot_viscous_n_m_s_per_rad"]["value"], 1e-4, rtol=0.05)


@pytest.mark.parametrize("text, args, words", [
    (BALL.replace("at: 100 mm}", "at: 100 mm, rotation: [0, 0, 30 deg]}"), ["--axis", "x"],
     "does not swing about world x alone"),
    (BALL, [], "needs --axis x or y"),
    (SWING, ["--axis", "x"], "a hinge swings about its hinge"),
    (BALL, ["--axis", "z"], "--axis 'z': expected x or y"),
])
def test_cli_ball_swing_axis_refusals(tmp_path, capsys, text, args, words):
    # a box turned 30 deg about the vertical has products of inertia between world x and y: the
    # effective horizontal inertia is not diagonal there (rotated tensor R I R^T, any dynamics text)
    path = _scenario(tmp_path, text, "s.yaml")
    log = tmp_path / "log.csv"
    log.write_text("t_s,angle_rad\n" + "".join(f"{k * 0.01},{math.pi + 0.3 * math.cos(k * 0.1)}\n" for k in range(400)))
    out = tmp_path / "o"
    assert main(["fit", str(log), "--test", "free-swing", "--scenario", str(path), *args, "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and words in err, err
    assert not out.exists()
