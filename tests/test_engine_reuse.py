"""A pybullet body reused from the previous trial in this process gives exactly the numbers a
newly built one gives (the engine resets joints and friction instead of rebuilding the same device);
a client reused by a 3D engine (its body always built anew) gives exactly the numbers of a new client.
No outside reference applies: these pin a speed path to the path it stands in for, bit for bit."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from sim.model.scenario import validate_scenario
from sim.model.scenario_yaml import load_raw
from sim.physics import engine as engine_mod
from sim.run.trial import run_trial
from conftest import make_scenario


def _demo(*overrides, path=None):
    raw, where = load_raw(path, tuple(overrides))
    return validate_scenario(raw, where=where)


SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"


def _columns(result):
    return {name: result.trace.view(name).copy() for name in result.trace.FLOAT_COLUMNS} | {
        "mode": result.trace.view("mode").copy()}


def _fresh(scenario, seed):
    engine_mod._IDLE_CLIENTS.clear()          # nothing to reuse: connect and build anew
    return run_trial(scenario, seed=seed)


CASES = {
    # (warm-up trial that leaves the body spinning, fast and braked; the trial compared)
    "balance after a swing-up": (lambda: _demo(), lambda: _demo("strategy={kind: lqr}", "trial.start.angle=4 deg")),
    "swing-up after a push trial": (lambda: _demo("strategy={kind: lqr}", "trial.start.angle=4 deg"), lambda: _demo()),
    "locked body after a free one": (lambda: make_scenario(strategy={"kind": "fixed_voltage", "volts": 6.0}),
                                     lambda: make_scenario(body={"locked": True}, strategy={"kind": "fixed_voltage", "volts": 6.0})),
    "the same device twice, other start": (lambda: make_scenario(strategy={"kind": "fixed_voltage", "volts": 12.0}),
                                           lambda: make_scenario(trial={"start": {"angle": 0.3, "rate": -1.0}})),
    # 3D engines take the idle client and build their body anew in it
    "ball cube after a floor cube": (lambda: _demo("trial.duration=0.4", "trial.pushes=[]", path=SCENARIOS / "floor_cube.yaml"),
                                     lambda: _demo("trial.duration=0.6", "trial.pushes=[]", path=SCENARIOS / "cube_corner.yaml")),
    "floor cube after a ball cube": (lambda: _demo("trial.duration=0.4", "trial.pushes=[]", path=SCENARIOS / "cube_corner.yaml"),
                                     lambda: _demo("trial.duration=0.6", "trial.pushes=[]", path=SCENARIOS / "floor_cube.yaml")),
    "one wheel after a 3D device": (lambda: _demo("trial.duration=0.4", "trial.pushes=[]", path=SCENARIOS / "tilted_axis.yaml"),
                                    lambda: _demo("strategy={kind: lqr}", "trial.start.angle=4 deg")),
    "3D device after one wheel": (lambda: _demo(), lambda: _demo("trial.duration=0.6", "trial.pushes=[]", path=SCENARIOS / "tilted_axis.yaml")),
}


@pytest.mark.parametrize("case", list(CASES))
def test_reused_body_gives_the_numbers_of_a_new_one(case):
    warm, compared = CASES[case]
    first, second = warm(), compared()
    expected = _columns(_fresh(second, seed=11))
    _fresh(first, seed=5)                       # leaves its client and body idle for the next trial
    assert engine_mod._IDLE_CLIENTS, "the warm-up trial did not hand its client back"
    idle = engine_mod._IDLE_CLIENTS[0][0]
    reused = run_trial(second, seed=11)
    assert engine_mod._IDLE_CLIENTS[0][0] == idle, "the trial did not run on the idle client"
    got = _columns(reused)
    for name, column in expected.items():
        assert np.array_equal(got[name], column), f"column {name} differs on a reused body"


def test_same_device_is_reused_and_another_is_rebuilt():
    a = make_scenario()
    b = make_scenario(wheel={"parts": [{"name": "disk", "shape": "disk", "radius": 0.06, "thickness": 0.005, "mass": 0.1}]})
    _fresh(a, seed=1)
    (cid, _, body), = engine_mod._IDLE_CLIENTS
    built = []
    real = engine_mod.EngineModel._build
    engine_mod.EngineModel._build = lambda self, visual: built.append(1) or real(self, visual)
    try:
        run_trial(a, seed=1)
        assert built == [] and engine_mod._IDLE_CLIENTS[0][0] == cid   # same client, same body
        run_trial(b, seed=1)
        assert built == [1]                                              # a different wheel: rebuilt
    finally:
        engine_mod.EngineModel._build = real


@pytest.mark.parametrize("locked", [False, True])
def test_positional_torque_command_matches_the_keyword_form(locked):
    """The engine sends torques with every argument positional (targets and gains filled in, ignored
    in torque mode); the states must be exactly those of pybullet's documented keyword form."""
    from sim.model.device import Device

    sc = make_scenario(body={"locked": locked, "pivot_friction": {"coulomb": 0.002, "viscous": 1e-4}},
                       wheel={"bearing_friction": {"coulomb": 0.001}})
    device = Device.from_scenario(sc)

    def run(keyword: bool) -> list:
        engine_mod._IDLE_CLIENTS.clear()
        engine = engine_mod.EngineModel(device, step_s=1e-3, start_angle_rad=0.2)
        try:
            engine.reset(angle_rad=0.2, rate_rad_s=0.5, wheel_speed_rad_s=3.0)
            read, advance = engine.io()
            pb, body, cid = engine.pb, engine.body_id, engine.client
            joints = [1] if locked else [0, 1]
            states = []
            for k in range(400):
                states.append(read())
                pivot, wheel = 0.01 * np.sin(k / 7), 0.02 * np.cos(k / 11)
                if keyword:
                    forces = [wheel] if locked else [pivot, wheel]
                    pb.setJointMotorControlArray(body, joints, pb.TORQUE_CONTROL, forces=forces, physicsClientId=cid)
                    pb.stepSimulation(physicsClientId=cid)
                else:
                    advance(pivot, wheel)
            return states
        finally:
            engine.close()

    assert run(keyword=False) == run(keyword=True)
