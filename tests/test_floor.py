"""The floor mount (`sim.model.floor`, `sim.physics.engine_floor`, `sim.run.floor_contact`) against
outside references: a block tipping about a non-slipping edge, the friction that tipping needs, the
Coulomb friction and the restitution pybullet gives, and the runner's outcomes on the floor.

Sources:
- [MK] Meriam & Kraige, Engineering Mechanics: Dynamics, plane kinetics of rigid bodies, rotation about
  a fixed axis (sum of moments about the axis = I_O alpha; the centre of mass's tangential acceleration
  r alpha and normal acceleration r omega^2 give the axis' reaction from sum F = m a_G). Greenwood,
  Principles of Dynamics, treats the same tipping block.
- [Newton] Newton's law of restitution: the rebound speed is e times the impact speed, so a body dropped
  from h rebounds to e^2 h.
- [Coulomb] a body sliding on a level floor decelerates at mu g (Coulomb's law of friction; any mechanics text).
- scipy.integrate.solve_ivp for the edge-hinged ODE.
"""

from __future__ import annotations

import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.integrate import solve_ivp

from sim.model.device3d import Device3D
from sim.model.floor import face_angle, start_attitude
from sim.model.scenario_yaml import load_scenario
from sim.physics.engine_floor import FloorEngine

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "scenarios" / "floor_cube.yaml"
DT = 1e-3


def _scenario(**sets):
    """The demo cube with `--set`-style overrides (bearing friction off: a free wheel keeps its spin)."""
    overrides = {"wheels[0].bearing_friction.coulomb": "0", "wheels[0].bearing_friction.viscous": "0", **sets}
    return load_scenario(DEMO, overrides=[f"{k}={v}" for k, v in overrides.items()])


def _engine(sc):
    device = Device3D.from_scenario(sc)
    return device, FloorEngine(device, step_s=sc.world.step)


def _edge_ode(device, theta0, t_end):
    """J_edge theta'' = m g d sin(theta) [MK], theta from upright about the edge, from rest."""
    j = device.inertia_about_pivot_kg_m2(with_spin=False)[0, 0]   # a free wheel's spin takes no part
    mgd = device.mass_kg * device.gravity_m_s2 * float(np.hypot(device.com_m[1], device.com_m[2]))
    sol = solve_ivp(lambda t, s: (s[1], mgd * math.sin(s[0]) / j), (0.0, t_end), (theta0, 0.0),
                    rtol=1e-10, atol=1e-12, dense_output=True)
    return sol, mgd / j


def _needed_friction(theta, rate, accel, d, g):
    """|F_t / F_n| at the edge of a block turning about it [MK]: the centre of mass at distance d from
    the edge, at angle theta from the vertical through it, moves with a_t = d theta'' and a_n = d theta'^2
    (toward the edge); horizontal and vertical: a_h = d (theta'' cos - theta'^2 sin),
    a_v = -d (theta'' sin + theta'^2 cos); F_t = m a_h, F_n = m (g + a_v)."""
    a_h = d * (accel * np.cos(theta) - rate ** 2 * np.sin(theta))
    a_v = -d * (accel * np.sin(theta) + rate ** 2 * np.cos(theta))
    return np.abs(a_h) / (g + a_v)


def _fall(sc, theta0, steps):
    device, eng = _engine(sc)
    with eng:
        eng.reset(attitude=start_attitude(sc, device)[0] if theta0 is None else _tilted(device, theta0))
        read, advance, contact = eng.io()
        rows = []
        for _ in range(steps):
            tx = read()[0]
            x, y, _, touching, ratio = contact()
            rows.append((tx, x, y, touching, ratio))
            advance(None, [0.0])
        return device, np.array(rows)


def _tilted(device, theta):
    from sim.model.massprops3d import rot_x
    return tuple(tuple(r) for r in rot_x(theta) @ np.array(device.upright()))


def test_tips_about_the_edge_as_on_a_hinge():
    # high friction: the edge holds, and the body turns as a body hinged at the edge [MK] until it lands
    sc = _scenario(**{"floor.friction": "2"})
    device = Device3D.from_scenario(sc)
    land = face_angle(device.floor.shapes, device.upright(), 1)
    theta0 = math.radians(5.0)
    sol, _ = _edge_ode(device, theta0, 2.0)
    t_land = next(t for t in np.arange(0, 2.0, DT) if sol.sol(t)[0] >= land)
    steps = int(t_land / DT) - 5
    _, rows = _fall(sc, theta0, steps)
    t = np.arange(steps) * DT
    # pybullet's semi-implicit Euler step leaves the angle about half a step ahead of the rate; a 1 ms
    # step keeps the angle within 0.5% of the ODE's over the 0.35 s fall from 5 deg to 42.7 deg (seen:
    # 0.36% at most, 2.4 mrad)
    assert_allclose(rows[:, 0], sol.sol(t)[0], rtol=5e-3, atol=2e-4)
    assert rows[-1, 0] > 0.9 * land
    travel = np.hypot(rows[:, 1] - rows[0, 1], rows[:, 2] - rows[0, 2])
    assert travel.max() < 1e-4      # the edge stayed put (under 0.1 mm)
    assert rows[1:, 3].min() == 1.0  # and on the floor


def test_friction_needed_at_the_start_of_the_fall():
    sc = _scenario(**{"floor.friction": "2"})
    device = Device3D.from_scenario(sc)
    theta0 = math.radians(8.0)
    d, g = float(np.hypot(device.com_m[1], device.com_m[2])), device.gravity_m_s2
    sol, k = _edge_ode(device, theta0, 0.2)
    needed0 = float(_needed_friction(theta0, 0.0, k * math.sin(theta0), d, g))
    # the engine's |F_t / F_n| is the fixed-axis ratio [MK] within 1% once the contact has settled (its
    # first two steps, from a body placed exactly on the floor, ask up to 5x: seen), here 5-30 ms
    _, rows = _fall(sc, theta0, 31)
    t = np.arange(5, 31) * DT
    th, rate = sol.sol(t)
    expected = _needed_friction(th, rate, k * np.sin(th), d, g)
    assert_allclose(rows[5:31, 4], expected, rtol=1e-2)
    # the need grows as the body speeds up; over the first 60 ms it stays under 1.25 x the start's
    t60 = np.arange(0, 61) * DT
    th, rate = sol.sol(t60)
    assert np.max(_needed_friction(th, rate, k * np.sin(th), d, g)) < 1.25 * needed0
    # friction 0.7 x the need slides at once (seen: mm in 60 ms); 1.4 x holds for those 60 ms (seen: 12 um,
    # the settling of the first two steps)
    for factor, slides in ((0.7, True), (1.4, False)):
        _, rows = _fall(_scenario(**{"floor.friction": f"{factor * needed0:.6f}"}), theta0, 61)
        travel = float(np.max(np.hypot(rows[:, 1] - rows[0, 1], rows[:, 2] - rows[0, 2])))
        assert (travel > 1e-3) if slides else (travel < 5e-5), (factor, travel)


def test_friction_coefficient_is_the_floors():
    # pybullet multiplies the two bodies' coefficients; the plane has 1, so a body sliding flat
    # decelerates at mu g [Coulomb]
    for mu in (0.2, 0.6):
        sc = _scenario(**{"floor.friction": str(mu), "trial.start.angle": "0", "trial.start.resting_on": "face"})
        device, eng = _engine(sc)
        with eng:
            eng.reset(attitude=start_attitude(sc, device)[0])
            eng.pb.resetBaseVelocity(eng.body_id, [1.0, 0.0, 0.0], [0.0, 0.0, 0.0], physicsClientId=eng.client)
            speeds = []
            for _ in range(120):
                eng.pb.stepSimulation(physicsClientId=eng.client)
                speeds.append(eng.pb.getBaseVelocity(eng.body_id, physicsClientId=eng.client)[0][0])
        decel = (speeds[10] - speeds[110]) / (100 * DT)
        assert_allclose(decel, mu * device.gravity_m_s2, rtol=2e-2)


@pytest.mark.parametrize("e", [0.0, 0.5, 0.8])
def test_drop_bounces_to_e_squared(e):
    # [Newton]: rebound to e^2 h. pybullet's tolerance, measured: with its contact threshold at 0 (set by
    # the engine) this cube dropped flat 10 cm rebounds to 1.13 e^2 h (e = 0.5) and 1.03 e^2 h (e = 0.8);
    # bare boxes and spheres 1.1-1.3 e^2 h over drops of 5-20 cm (its penetration recovery adds a
    # little); e = 0 rebounds 0.14% of h. Asserted: within 0.85..1.4 x e^2 h, and under 3% of h for e = 0.
    h = 0.1
    sc = _scenario(**{"floor.restitution": str(e), "trial.start.angle": "0", "trial.start.resting_on": "face"})
    device, eng = _engine(sc)
    with eng:
        attitude = start_attitude(sc, device)[0]
        eng.reset(attitude=attitude)
        rest = eng.com_m()[2]
        eng.reset(attitude=attitude, height_m=h)
        z = []
        for _ in range(int(2.5 * math.sqrt(2 * h / device.gravity_m_s2) / DT)):
            eng.pb.stepSimulation(physicsClientId=eng.client)
            z.append(eng.com_m()[2])
    z = np.array(z)
    hit = int(np.argmin(z[: int(math.sqrt(2 * h / device.gravity_m_s2) / DT) + 20]))
    rebound = (z[hit:].max() - rest) / h
    if e == 0.0:
        assert rebound < 0.03
    else:
        assert 0.85 * e ** 2 < rebound < 1.4 * e ** 2, rebound


def test_resting_on_a_face_stays_there_and_names_it():
    from sim.run.trial import run_trial
    for side, face in ((1, "-y face"), (-1, "-z face")):
        sc = _scenario(**{"trial.start.angle": "0", "trial.start.resting_on": "face", "trial.start.side": str(side),
                          "trial.duration": "0.3 s", "trial.pushes": "[]", "strategy.kind": "coast"})
        result = run_trial(sc)
        assert result.floor["rest_face"] == face
        assert result.floor["slip_m"] == 0.0 and result.floor["lift_off_s"] == 0.0
        # the resting tilt is where a second corner of the cube reaches the floor: the face's angle
        device = result.device
        assert_allclose(result.trace.tilt[: result.trace.n],
                        face_angle(device.floor.shapes, device.upright(), side), atol=2e-3)


def test_demo_balances_without_slipping():
    from sim.run.metrics3d import trial_metrics3d
    from sim.run.trial import run_trial
    result = run_trial(load_scenario(DEMO))
    m = trial_metrics3d(result)
    assert m["outcome"] == "balanced" and m["mount"] == "floor"
    assert m["slip_m"] < 0.2 * m["slip_limit_m"]     # the push's tap slides it well under a millimetre
    assert m["lift_off_s"] == 0.0 and m["rest_face"] is None
    assert m["pushes"][0]["survived"]


def test_low_friction_slips_with_a_cause():
    from sim.run.trial import run_trial
    result = run_trial(_scenario(**{"floor.friction": "0.1", "trial.duration": "2.5 s"}))
    assert result.outcome == "slipped"
    assert result.cause == "contact_slipped"
    assert result.floor["slip_m"] > result.floor["slip_limit_m"]
    assert 2.0 <= result.floor["slipped_at_s"] < 2.5     # at the tap


def test_fall_names_the_face():
    from sim.run.trial import run_trial
    result = run_trial(_scenario(**{"trial.start.angle": "-25 deg", "trial.duration": "1.5 s", "trial.pushes": "[]"}))
    assert result.outcome == "fell"
    assert result.floor["rest_face"] == "-z face"
    assert "-z face" in result.cause_detail


@pytest.mark.parametrize("sets, key", [
    ({"floor.friction": "-0.1"}, "floor.friction"),
    ({"floor.restitution": "1.5"}, "floor.restitution"),
    ({"floor.slip_limit": "0 mm"}, "floor.slip_limit"),
    ({"body.balance_on": "face"}, "body.balance_on"),
    ({"trial.start.resting_on": "corner"}, "trial.start.resting_on"),
    ({"trial.start.resting_on": "face"}, "trial.start.resting_on"),      # with the demo's start angle
    ({"trial.start.side": "1"}, "trial.start.side"),
    ({"floor": "null"}, "floor"),
    ({"body.pivot_friction.viscous": "1e-4"}, "body.pivot_friction"),
    ({"body.parts[0].at": "[0, 70 mm, 75 mm]"}, "body.balance_on"),     # the shell reaches below the edge
])
def test_bad_floor_input_is_one_line_exit_2(sets, key, tmp_path):
    argv = ["validate", str(DEMO)] + [a for k, v in sets.items() for a in ("--set", f"{k}={v}")]
    proc = subprocess.run([sys.executable, "-m", "sim.cli", *argv], capture_output=True, text=True, cwd=tmp_path)
    assert proc.returncode == 2, proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in proc.stderr
    assert key in lines[0] and "floor_cube.yaml" in lines[0]


def test_floor_keys_refused_off_the_floor(tmp_path):
    corner = ROOT / "scenarios" / "cube_corner.yaml"
    for sets, key in ((["floor={friction: 0.5, restitution: 0}"], "floor"),
                      (["trial.start.resting_on=face"], "trial.start.resting_on")):
        argv = ["validate", str(corner)] + [a for s in sets for a in ("--set", s)]
        proc = subprocess.run([sys.executable, "-m", "sim.cli", *argv], capture_output=True, text=True, cwd=tmp_path)
        assert proc.returncode == 2 and len(proc.stderr.strip().splitlines()) == 1 and key in proc.stderr


def test_corner_cube_on_the_floor_balances_on_its_corner():
    # the three-wheel corner cube with its socket replaced by a floor: lqr designs as for a ball at the
    # corner and holds it through a push; the corner stays put (no slip) and on the floor
    from sim.run.trial import run_trial
    corner = ROOT / "scenarios" / "cube_corner.yaml"
    sc = load_scenario(corner, overrides=["body.mount=floor", "body.balance_on=corner", "body.pivot_friction.viscous=0",
                                          "floor={friction: 0.6, restitution: 0.1}", "trial.duration=2.5 s",
                                          "trial.pushes=[{at: 2 s, impulse: [30 mN*m*s, 0, 0]}]"])
    assert Device3D.from_scenario(sc).mount == "ball"
    result = run_trial(sc)
    assert result.outcome == "balanced"
    assert result.floor["slip_m"] < 2e-3 and result.floor["lift_off_s"] == 0.0
    # resting on the corner: upright at rest, the corner (origin) on the floor
    rest = load_scenario(corner, overrides=["body.mount=floor", "body.balance_on=corner", "body.pivot_friction.viscous=0",
                                            "floor={friction: 0.6, restitution: 0.1}", "trial.start.tilt=null",
                                            "trial.start.resting_on=corner"])
    device, eng = _engine(rest)
    with eng:
        eng.reset(attitude=start_attitude(rest, device)[0])
        assert abs(eng.origin_m()[2]) < 1e-9
        assert eng.io()[0]()[3] < 1e-9


def test_run_prints_how_the_contact_held(tmp_path, capsys):
    # a user of a floor device sees the slip, the friction used and the time off the floor in the table
    from sim.cli import main
    demo = Path(__file__).resolve().parents[1] / "scenarios" / "floor_cube.yaml"
    code = main(["run", str(demo), "--out", str(tmp_path / "o"), "--set", "trial.duration=0.5", "--set", "trial.pushes=[]"])
    out = capsys.readouterr().out
    assert code == 0
    for row in ("contact slip", "mm while balancing (limit 5 mm)", "friction used", "off the floor"):
        assert row in out, row


def test_gains_names_the_floor_mount_and_the_mount_it_designs_for(capsys):
    import json as _json

    from sim.cli import main
    demo = Path(__file__).resolve().parents[1] / "scenarios" / "floor_cube.yaml"
    assert main(["gains", str(demo)]) == 0
    report = _json.loads(capsys.readouterr().out)
    assert report["mount"] == "floor" and report["design_mount"] == "hinge"


def test_off_floor_finds_the_stretches_inside_the_balancing_episodes():
    # hand-made contact column: row 0 holds no step; off the floor at rows 3-4 (2 steps) and 8-12 (5 steps)
    from sim.run.floor_contact import off_floor
    touch = np.ones(16)
    touch[[0, 3, 4, 8, 9, 10, 11, 12]] = 0.0
    assert off_floor(touch, [(0, 16)], limit_steps=4) == (5, 8)
    assert off_floor(touch, [(0, 16)], limit_steps=5) == (5, None)
    assert off_floor(touch, [(0, 10)], limit_steps=1) == (2, 3)       # the episode ends at row 10
    assert off_floor(touch, [(5, 8), (13, 16)], limit_steps=0) == (0, None)


def test_a_cube_thrown_up_while_balancing_says_it_lifted_off():
    # the floor cube balancing on its edge, given 0.5 m/s upwards at t = 1 s: it flies clear of the floor for
    # at most 2 v / g = 102 ms (a projectile's time of flight, any mechanics text; the edge leaves the floor
    # a little later and lands a little sooner than the centre of mass's flight), and the result says so
    from sim.run.trial import run_trial
    sc = load_scenario(ROOT / "scenarios" / "floor_cube.yaml", overrides=["trial.pushes=[]", "trial.duration=2 s"])

    def throw(k, eng):
        if k == 1000:
            lin, ang = eng.pb.getBaseVelocity(eng.body_id, physicsClientId=eng.client)
            eng.pb.resetBaseVelocity(eng.body_id, [lin[0], lin[1], 0.5], ang, physicsClientId=eng.client)
    res = run_trial(sc, on_step=throw)
    f = res.floor
    assert f["lifted"] and 1.0 < f["lifted_at_s"] < 1.02 and f["lift_limit_s"] == 0.005
    assert 0.07 < f["longest_lift_off_s"] <= 2 * 0.5 / 9.81 and f["longest_lift_off_s"] <= f["lift_off_s"]
    if res.outcome == "fell":
        assert res.cause == "contact_lifted"
    still = run_trial(sc).floor
    assert not still["lifted"] and still["lifted_at_s"] is None and still["longest_lift_off_s"] == 0.0


def test_a_fall_after_a_lift_off_is_blamed_on_the_lift_off():
    from types import SimpleNamespace

    from sim.run.floor_contact import floor_cause
    floor = {"lifted": True, "lifted_at_s": 1.008, "longest_lift_off_s": 0.09, "lift_limit_s": 0.005,
             "rest_face": "-y face"}
    fell = SimpleNamespace(outcome="fell", fell_at_s=1.3, cause="tilt_runaway", cause_detail="the tilt ran away", floor=floor)
    cause, text = floor_cause(fell)
    assert cause == "contact_lifted" and "t = 1.008 s" in text and "90.0 ms" in text
    assert "then the tilt ran away" in text and text.endswith("-y face")
    # a lift-off after the fall (the fall's bounce) is not the cause
    late = SimpleNamespace(**{**vars(fell), "fell_at_s": 0.9})
    assert floor_cause(late)[0] == "tilt_runaway"


def test_a_balance_regained_after_a_fall_is_measured_afresh():
    # FloorWatch, fed by hand: balancing at x = 0, 1 mm of creep, a fall that carries the contact 40 mm
    # away, then balance again there. The slip of the second balance is its own, not the fall's
    from types import SimpleNamespace

    from sim.run.floor_contact import FloorWatch
    n = 8
    trace = SimpleNamespace(**{c: np.zeros(n) for c in ("contact_x", "contact_y", "contact_z", "in_contact",
                                                      "friction_ratio")})
    floor = SimpleNamespace(slip_limit_m=0.005)
    path = iter([(0.0, True), (0.001, True), (0.02, False), (0.04, False), (0.04, True), (0.041, True),
                 (0.042, True), (0.0425, True)])
    state = {}

    def contact():
        return state["x"], 0.0, 0.0, 1.0, 0.1

    watch = FloorWatch(contact, trace, floor, stop_early=True)
    see = watch.stepper()
    for k, (x, balancing) in enumerate(path):
        state["x"] = x
        assert see(k, balancing) is False, k
    assert watch.slipped_k is None and watch.balance_k == 4
    # past the limit in the new balance it is a slip again
    state["x"] = 0.0460
    assert see(n - 1, True) is True and watch.slipped_k == n - 1
