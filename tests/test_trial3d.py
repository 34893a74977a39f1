"""The 3D device in pybullet and its trial loop (`sim.physics.engine3d`, `sim.run.trial3d`) against
mechanics: angular momentum, gyroscopic precession, a tilted wheel axis on a hinge, and the planar
device rebuilt on the general path. All devices are invented for the tests."""

from __future__ import annotations

import copy
import json
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from conftest import make_scenario, make_scenario3d, scenario_dict, write_scenario
from sim.cli import main
from sim.model.device3d import Device3D
from sim.physics.engine3d import Engine3D
from sim.run.trial import run_trial

from pathlib import Path

LAWS = Path(__file__).parent / "plugins" / "three_wheel_laws.py"
PD_LAW = Path(__file__).parent / "plugins" / "tilt_pd_law.py"
SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
RING = {"shape": "ring", "outer_radius": 0.05, "inner_radius": 0.01, "thickness": 0.006, "mass": 0.12}
MOTOR = {"speed_constant": "50 rad/s/V", "torque_constant": 0.02, "resistance": 1.0, "inductance": 1e-4, "mass": 0.03}
THREE = [{"at": [0.03, 0.0, 0.1], "axis": [1, 0.2, 0], "parts": [RING]},
         {"at": [0.0, 0.04, 0.07], "axis": [0, 1, 0.3], "parts": [RING]},
         {"at": [-0.02, 0.0, 0.12], "axis": [0.1, 0, 1], "parts": [RING]}]
OFF_AXIS_BODY = {"mount": "ball", "parts": [{"shape": "box", "length": 0.12, "width": 0.08, "thickness": 0.05,
                                             "mass": 0.4, "at": [0.01, -0.02, 0.08], "rotation": [0.2, 0.1, -0.3]}]}


def _momentum_about_pivot(engine) -> np.ndarray:
    """Total angular momentum about the fixed pivot, world frame, N m s: from the engine's state (body
    attitude and rate, wheel speeds) and our own inertias: L = R (J w_b + sum I_s,i phi_d,i a_i), J the
    whole device about the pivot with the wheels locked (Goldstein, Classical Mechanics, ch. 5:
    L = I w for a rigid body about a fixed point, plus each rotor's spin relative to its carrier)."""
    rate, speeds = engine.body_rate_world(), engine.wheel_speeds()
    dev = engine.device
    rot = np.array(engine.attitude())
    w_body = rot.T @ np.array(rate)
    inner = dev.inertia_about_pivot_kg_m2(with_spin=True) @ w_body
    for w, s in zip(dev.wheels, speeds):
        inner = inner + w.spin_inertia_kg_m2 * s * np.array(w.axis)
    return rot @ inner


def _momentum_run(*, step_s: float, tilt, wheel_speed):
    sc = make_scenario3d(THREE, world={"gravity": 0.0, "step": step_s}, body=OFF_AXIS_BODY, motor=MOTOR,
                         drive={"supply": 6.0}, sensors={"rate": 1.0 / (2 * step_s)},
                         strategy={"kind": "fixed_voltage", "volts": 4.0},
                         trial={"duration": 0.5, "start": {"tilt": tilt, "wheel_speed": wheel_speed}})
    samples = []
    result = run_trial(sc, on_step=lambda k, eng: samples.append(_momentum_about_pivot(eng)) if k % 25 == 0 else None)
    return result, np.array(samples)


def test_momentum_from_rest_stays_zero_with_wheels_driven():
    # Gravity off, a fixed pivot: only internal torques act, so L about the pivot is conserved
    # (any mechanics text, e.g. Meriam & Kraige, Dynamics, angular-momentum principle). From rest
    # it stays 0 while the wheels spin up to ~150 rad/s and the body turns about all three axes.
    result, L = _momentum_run(step_s=1e-3, tilt=[0.3, -0.2], wheel_speed=0.0)
    spin_scale = max(w.spin_inertia_kg_m2 for w in result.device.wheels) * abs(result.trace.w1_speed[result.trace.n - 1])
    assert spin_scale > 1e-3                              # the wheels did spin up
    assert np.ptp(result.trace.tilt_x[: result.trace.n]) > 0.1   # and the body did turn
    assert np.max(np.abs(L)) < 1e-12 * spin_scale         # solver precision (measured ~1e-16 N m s)


def test_momentum_drift_with_spinning_wheels_shrinks_with_the_step():
    # With momentum already stored in the wheels the body's gyroscopic coupling is integrated by
    # pybullet's first-order step: L drifts, by an amount that falls about in proportion to the
    # step (measured: 5.0% of |L| at 1 ms, 1.5% at 0.25 ms over 0.5 s).
    drift = []
    for step in (1e-3, 2.5e-4):
        _, L = _momentum_run(step_s=step, tilt=[0.3, -0.2], wheel_speed=[50.0, -30.0, 20.0])
        drift.append(np.max(np.linalg.norm(L - L[0], axis=1)) / np.linalg.norm(L[0]))
    assert drift[0] < 0.08
    assert drift[1] < drift[0] / 2.5


def test_spinning_wheel_precesses_at_tau_over_L():
    # A gyroscope: a wheel spinning at w on a horizontal axle, ball-mounted at one end, under
    # gravity. tau = Omega x L gives the precession rate Omega = m g d / (I_s w) about the vertical
    # (Meriam & Kraige, Dynamics, gyroscopic motion; references.md). Started at rest the axle nutates
    # about the steady precession; a straight-line fit over the second averages it out.
    # At a 1 ms step pybullet's explicit gyroscopic term made this device diverge within 0.5 s
    # (the rod's own inertia about the axle is tiny against the wheel's momentum): 0.1 ms here.
    spin = 2000.0
    disk = {"shape": "disk", "radius": 0.05, "thickness": 0.01, "mass": 0.2}
    sc = make_scenario3d([{"at": [0, 0, 0.1], "axis": [0, 0, 1], "parts": [disk]}],
                         body={"mount": "ball", "parts": [{"shape": "rod", "length": 0.1, "radius": 0.005,
                                                                     "mass": 0.05, "at": 0.05}]},
                         motor={"speed_constant": "500 rad/s/V", "torque_constant": 0.002}, drive={"supply": 12.0},
                         world={"step": 1e-4}, sensors={"rate": 1000.0}, strategy={"kind": "coast"},
                         trial={"duration": 1.0, "start": {"tilt": ["90 deg", 0.0], "wheel_speed": spin}})
    dev = Device3D.from_scenario(sc)
    headings = []

    def azimuth(k, eng):
        axis = np.array(eng.attitude()) @ np.array([0.0, 0.0, 1.0])
        headings.append(math.atan2(axis[1], axis[0]))
    result = run_trial(sc, on_step=azimuth)
    t = np.arange(len(headings)) * sc.world.step
    rate = np.polyfit(t, np.unwrap(headings), 1)[0]
    mgd = dev.gravity_torque_coeff_n_m
    expected = mgd / (dev.wheels[0].spin_inertia_kg_m2 * spin)
    assert result.outcome == "completed"
    assert 0.3 < expected < 0.6                    # a visible precession, ~0.44 rad/s
    assert_allclose(rate, expected, rtol=0.005)     # measured: 0.04% off
    assert np.max(result.trace.tilt[: result.trace.n]) < math.radians(92)   # the axle holds up
    # pybullet's 100 rad/s joint-speed clamp is off: the free wheel keeps its 2,000 rad/s
    assert_allclose(result.trace.w1_speed[result.trace.n - 1], spin, rtol=1e-3)


@pytest.mark.parametrize("axis", [(math.cos(math.radians(20)), math.sin(math.radians(20)), 0.0),
                                  (math.cos(math.radians(20)), 0.0, math.sin(math.radians(20)))])
def test_tilted_axis_only_the_hinge_component_turns_the_body(axis):
    # A wheel whose axis is 20 deg from the hinge: by Lagrange's equations for the body angle and
    # the wheel angle (written out by hand; Goldstein, ch. 1-2), J' theta_dd = -a_x tau, with J' the
    # device about the hinge with the wheel's spin inertia left out: only the torque's component
    # along the hinge turns the body; the rest is taken by the hinge bearing (statics).
    sc = make_scenario3d([{"at": [0, 0.01, 0.2], "axis": list(axis), "parts": [RING]}],
                         world={"gravity": 0.0, "step": 1e-3})
    dev = Device3D.from_scenario(sc)
    tau = 0.01
    with Engine3D(dev, step_s=1e-3) as eng:
        eng.reset(attitude=None)
        read, advance = eng.io()
        for _ in range(200):
            read()
            advance(None, [tau])
        rate = read()[4]
    j_prime = dev.inertia_about_pivot_kg_m2(with_spin=False)[0, 0]
    assert_allclose(rate[0], -axis[0] * tau / j_prime * 0.2, rtol=1e-9)
    # the full torque would have turned it by 1/cos(20 deg) = 6.4% more
    assert abs(rate[0] / (-tau / j_prime * 0.2) - math.cos(math.radians(20))) < 1e-9


def test_general_path_reproduces_the_planar_device():
    # The test pendulum given with `wheels:` runs on the 3D runner; driven by the same voltage from
    # a tilt, its rates and wheel speeds follow the planar runner's (the same pybullet model and
    # motor equations, so agreement to rounding is expected).
    common = dict(strategy={"kind": "fixed_voltage", "volts": 3.0}, trial={"duration": 0.5, "start": {"angle": 0.2}})
    planar = run_trial(make_scenario(**common))
    general = run_trial(make_scenario3d([{"at": 0.2, "parts": scenario_dict()["wheel"]["parts"]}], **common))
    n = planar.trace.n
    assert general.trace.n == n
    assert_allclose(general.trace.rate_x[:n], planar.trace.rate[:n], rtol=1e-9, atol=1e-12)
    assert_allclose(general.trace.w1_speed[:n], planar.trace.wheel_speed[:n], rtol=1e-9, atol=1e-12)
    assert_allclose(general.trace.w1_current[:n], planar.trace.current[:n], rtol=1e-9, atol=1e-12)


def test_a_law_returning_the_wrong_number_of_volts_fails_the_trial():
    sc = make_scenario3d(THREE, body=OFF_AXIS_BODY, motor=MOTOR, world={"gravity": 0.0},
                         strategy={"plugin": f"{LAWS}:TwoVolts"},
                         trial={"duration": 0.1, "start": {"tilt": [0.0, 0.0]}})
    result = run_trial(sc)
    assert result.outcome == "strategy_failed" and result.cause == "strategy_failed"
    assert "2 voltages for a device with 3 wheels" in result.message


def test_a_tilt_law_holds_a_ball_mounted_body_with_three_wheels():
    # not the LQR (it comes with the multi-input design): a PD on the two tilts, mapped to the wheels
    # through their axes, is enough to show the loop's signs and axes are right: the body is held
    # and pushed about two axes, a law of the wrong sign would drop it
    sc = make_scenario3d(THREE, body=OFF_AXIS_BODY, motor=MOTOR, drive={"supply": 12.0},
                         strategy={"plugin": f"{PD_LAW}:TiltPD", "kp": 120.0, "kd": 8.0, "kw": 0.01},
                         trial={"duration": 1.5, "start": {"tilt": ["3 deg", "-2 deg"]},
                                "pushes": [{"at": 0.5, "impulse": [0.01, -0.0067, 0.0]}]})
    held = run_trial(sc)
    assert held.outcome == "balanced", held.cause_detail
    k_push = 500
    assert np.max(held.trace.tilt[k_push:held.trace.n]) > held.trace.tilt[k_push] + 0.003   # the push was felt
    wrong = run_trial(sc.model_copy(update={"strategy": sc.strategy.__class__(
        kind=sc.strategy.kind, cls=sc.strategy.cls, params=sc.strategy.params.model_copy(update={"kp": -120.0}))}))
    assert wrong.outcome == "fell"


def test_run_writes_per_axis_and_per_wheel_files(tmp_path):
    raw = scenario_dict(body=OFF_AXIS_BODY, motor=MOTOR, strategy={"kind": "coast"},
                        trial={"duration": 0.2, "start": {"tilt": [0.1, 0.0]}})
    raw.pop("wheel")
    raw["wheels"] = THREE
    path = write_scenario(tmp_path / "three.yaml", raw)
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 0
    metrics = json.loads((tmp_path / "out" / "metrics.json").read_text())
    assert len(metrics["wheels"]) == 3 and metrics["peak_tilt_rad"] > 0.1
    assert metrics["peak_wheel_speed_rad_s"] == max(w["peak_speed_rad_s"] for w in metrics["wheels"])
    header = (tmp_path / "out" / "trace.csv").read_text().splitlines()[0].split(",")
    for name in ("tilt_x_rad", "tilt_y_rad", "heading_rad", "rate_z_rad_s", "wheel3_current_a",
                 "measured_wheel2_speed_rad_s", "mode"):
        assert name in header
    assert (tmp_path / "out" / "summary.png").stat().st_size > 10_000


def test_fit_refuses_a_free_swing_on_a_ball_mount_without_its_axis(tmp_path, capsys):
    # fit takes 3D devices (tests/test_fit3d.py); a free swing hanging from a ball needs the axis it swings about
    raw = scenario_dict(body=OFF_AXIS_BODY, motor=MOTOR, strategy={"kind": "coast"},
                        trial={"duration": 0.2, "start": {"tilt": [0.1, 0.0]}})
    raw.pop("wheel")
    raw["wheels"] = copy.deepcopy(THREE)
    path = write_scenario(tmp_path / "three.yaml", raw)
    log = tmp_path / "log.csv"
    log.write_text("t_s,angle_rad\n" + "".join(f"{k * 0.01},{0.1 * (-1) ** (k // 20)}\n" for k in range(200)))
    code = main(["fit", str(log), "--test", "free-swing", "--scenario", str(path), "--out", str(tmp_path / "o")])
    err = capsys.readouterr().err.strip()
    assert code == 2
    assert len(err.splitlines()) == 1 and "needs --axis x or y" in err, err
    assert not (tmp_path / "o").exists()


@pytest.mark.parametrize("name, pushes", [("cube_corner.yaml", 2), ("tilted_axis.yaml", 1)])
def test_3d_demos_do_what_their_comments_say(name, pushes):
    # our own demos: the comment at the top of each file states these outcomes
    from sim.model.scenario_yaml import load_scenario
    from sim.run.metrics3d import trial_metrics3d
    sc = load_scenario(SCENARIOS / name)
    m = trial_metrics3d(run_trial(sc))
    assert m["outcome"] == "balanced" and len(m["pushes"]) == pushes
    assert all(p["survived"] for p in m["pushes"])
    assert m["wheel_speed_margin"] > 0.1


def test_a_vector_law_reads_a_planar_device_too():
    # the same TiltPD plug-in on the planar test pendulum and on the same device given with
    # `wheels:` (the 3D runner): the planar runner fills the vector form and takes the law's
    # one-element list as its voltage; both hold the body, along the same path (the runners'
    # angle conventions differ by half a step's motion, so not to rounding)
    law = {"plugin": f"{PD_LAW}:TiltPD", "kp": 60.0, "kd": 6.0, "kw": 0.0}
    common = dict(strategy=law, trial={"duration": 1.0, "start": {"angle": 0.05}})
    planar = run_trial(make_scenario(**common), isolate=False)
    general = run_trial(make_scenario3d([{"at": 0.2, "parts": scenario_dict()["wheel"]["parts"]}], **common))
    assert planar.outcome == general.outcome == "balanced"
    n = planar.trace.n
    assert np.max(np.abs(planar.trace.voltage[:n])) > 1.0       # the law did drive the wheel
    # measured: 0.0096 V apart at most (of 7.9 V), angles 5.6e-5 rad apart: the half-step convention
    assert_allclose(general.trace.w1_voltage[:n], planar.trace.voltage[:n], atol=0.03)
    assert_allclose(general.trace.tilt_x[:n], planar.trace.angle[:n], atol=2e-4)


def test_gains_of_a_3d_device_name_every_wheel_and_state(tmp_path, capsys):
    # `gains` on the corner cube: the multi-input LQR's matrices (sim.studies.gains_multi), one row per wheel
    assert main(["gains", str(SCENARIOS / "cube_corner.yaml")]) == 0
    report = json.loads(capsys.readouterr().out)
    K = report["discrete"]
    assert len(K["rows"]) == 3 and len(K["columns"]) >= 5
    assert np.all(np.isfinite(np.array(K["matrix"] if "matrix" in K else K["values"], dtype=float)))


def test_a_pole_with_no_wheel_about_the_vertical_holds_while_its_heading_turns():
    # Two wheels on x and y at the top of a ball-mounted pole: nothing acts about the vertical, so
    # pushes and the wheels' gyroscopic coupling set the heading turning. Gravity is the same at
    # every heading (a turn about the vertical), so the law designed at heading 0 must hold at any
    # heading when it reads the tilts' rates in the heading frame (sim.core.frames); read in the world
    # frame, they mix x and y once the heading has turned, and this pole fell at 6.5 s.
    web = {"shape": "disk", "radius": 0.04, "thickness": 0.002, "material": "PLA"}
    ring = {"shape": "ring", "outer_radius": 0.05, "inner_radius": 0.04, "thickness": 0.006, "material": "steel"}
    wheel = {"parts": [ring, web], "bearing_friction": {"coulomb": 5e-4}}
    sc = make_scenario3d(
        [{**wheel, "at": [0.04, 0.0, 0.38], "axis": [1, 0, 0]}, {**wheel, "at": [0.0, 0.04, 0.38], "axis": [0, 1, 0]}],
        body={"mount": "ball", "pivot_friction": {"viscous": 5e-5}, "parts": [
            {"shape": "rod", "length": 0.4, "radius": 0.006, "material": "aluminium", "at": 0.2},
            {"shape": "box", "length": 0.06, "width": 0.06, "thickness": 0.004, "material": "PLA",
             "at": [0.0, 0.0, 0.38], "rotation": ["90 deg", 0, 0]},
            {"shape": "box", "length": 0.05, "width": 0.03, "thickness": 0.015, "mass": 0.09, "at": [0.0, 0.015, 0.12]}]},
        motor={"speed_constant": "250 rpm/V", "resistance": 1.5, "inductance": 2.5e-4, "current_limit": 5.0,
               "rotor_inertia": 1e-5, "mass": 0.07},
        drive={"supply": 16.8},
        sensors={"rate": 500, "delay": 0.001, "angle": {"noise": "0.03 deg"}, "rate_gyro": {"noise": 0.01},
                 "wheel": {"counts_per_rev": 4096}},
        strategy={"kind": "lqr"},
        trial={"duration": 8.0, "seed": 0, "start": {"tilt": ["2 deg", "2 deg"]},
               "pushes": [{"at": 3.0, "impulse": [0.0, 0.02, 0.0]}, {"at": 5.0, "impulse": [0.015, 0.015, 0.0]}]})
    result = run_trial(sc)
    heading = result.trace.heading[: result.trace.n]
    assert np.max(np.abs(heading)) > math.radians(30), "the constructed pole must turn its heading"
    assert result.outcome == "balanced", result.cause_detail


def test_a_run_that_blows_up_after_the_fall_stays_a_fall_with_its_cause():
    # After a fall a ball-mounted body tumbles with its wheels spinning, and the engine's explicit
    # gyroscopic terms can blow up seconds later. The fall came first and has a cause: it stays the outcome
    # (before, the run read "diverged" and the cause of the fall was lost). The blow-up is forced here:
    # once the body is past its release angle, its rate is set absurd
    from sim.model.scenario_yaml import load_scenario
    from sim.physics.engine3d import BODY
    from sim.run.trial import run_trial
    sc = load_scenario(SCENARIOS / "cube_corner.yaml", overrides=("trial.start.tilt=[25 deg, 0 deg]",
                                                                "trial.pushes=[]", "trial.duration=2 s"))
    seen = {}

    def blow_up(k, engine):
        read = seen.setdefault("read", engine.io()[0])
        if read()[3] > math.radians(60) and "k" not in seen:     # well past the release angle (30 deg)
            seen["k"] = k
            engine.pb.resetJointStateMultiDof(engine.body_id, BODY, targetValue=[0, 0, 0, 1],
                                              targetVelocity=[1e6, 0, 0], physicsClientId=engine.client)
    res = run_trial(sc, stop_early=False, on_step=blow_up)
    assert "k" in seen and res.fell_at_s is not None and res.fell_at_s < seen["k"] * sc.world.step
    assert res.outcome == "fell" and "non-finite or absurd" in res.message and res.cause not in (None, "diverged")
    assert res.trace.n == seen["k"] + 1 and res.ended_at_s == pytest.approx(res.fell_at_s)
