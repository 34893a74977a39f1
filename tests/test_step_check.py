"""Step-halving: a result that moves when the physics step halves is flagged (common practice in
numerical integration, no source: a first-order method's error shrinks in proportion to the step,
so a converged answer changes little when the step halves). Devices are our own test fixtures."""

from __future__ import annotations

import math

import pytest

from conftest import make_scenario3d
from sim.studies.step_check import step_convergence, step_note

DISK = {"shape": "disk", "radius": 0.05, "thickness": 0.01, "mass": 0.2}


def _gyroscope(step_s: float):
    """A 2,000 rad/s wheel on a light ball-mounted rod held out horizontally: a gyroscope. pybullet takes
    the gyroscopic term explicitly, so this stiff case needs a short step (README, 3D devices)."""
    return make_scenario3d([{"at": [0, 0, 0.1], "axis": [0, 0, 1], "parts": [DISK]}],
                           body={"mount": "ball", "parts": [{"shape": "rod", "length": 0.1, "radius": 0.005,
                                                             "mass": 0.05, "at": 0.05}]},
                           motor={"speed_constant": "500 rad/s/V", "torque_constant": 0.002}, drive={"supply": 12.0},
                           world={"step": step_s}, sensors={"rate": 500.0}, strategy={"kind": "coast"},
                           trial={"duration": 0.6, "start": {"tilt": ["90 deg", 0.0], "wheel_speed": 2000.0}})


@pytest.mark.parametrize("step_s", [2e-3, 1e-3])
def test_a_gyroscope_at_a_long_step_is_flagged(step_s):
    # measured: at 2 ms both steps diverge; at 1 ms the coarse one diverges and the fine one does not
    conv = step_convergence(_gyroscope(step_s))
    assert not conv["converged"]
    assert "shorten world.step" in step_note(conv)


def test_the_same_gyroscope_at_a_short_step_converges():
    # measured at 0.2 ms vs 0.1 ms: peak tilt 92.0 vs 90.6 deg, traces within 1.5 deg
    conv = step_convergence(_gyroscope(2e-4))
    assert conv["converged"], step_note(conv)
    assert conv["peak_tilt_rad"][1] < math.radians(95)      # the axle holds up, as the gyroscope equation says


def test_the_corner_cube_demo_converges_at_its_step():
    from sim.model.scenario_yaml import load_scenario
    from pathlib import Path
    sc = load_scenario(Path(__file__).resolve().parents[1] / "scenarios" / "cube_corner.yaml",
                       overrides=("trial.duration=4.5",))
    conv = step_convergence(sc)
    assert conv["converged"], step_note(conv)
    assert conv["outcomes"] == ["balanced", "balanced"]


def test_a_fall_is_compared_up_to_the_fall():
    # The corner cube knocked over by a push it cannot take: both steps fall at the same time; after the
    # fall the cube tumbles on its socket with its wheels spinning, a chaotic path that parts at any step
    # (measured: the whole traces 30.5 deg apart, which flagged the step before this rule), so only the
    # motion up to the earlier fall is compared (measured: 0.02 deg apart, fell at 1.108 s both).
    from sim.model.scenario_yaml import load_scenario
    from pathlib import Path
    sc = load_scenario(Path(__file__).resolve().parents[1] / "scenarios" / "cube_corner.yaml",
                       overrides=("trial.duration=3.0", "trial.pushes=[{at: 1 s, impulse: [0.2, 0.1, 0]}]"))
    conv = step_convergence(sc)
    assert conv["outcomes"] == ["fell", "fell"]
    assert conv["compared_until_s"] == pytest.approx(1.108, abs=0.01)
    assert conv["converged"], step_note(conv)
    assert conv["peak_tilt_rad"][0] < math.radians(35)     # the peaks up to the fall (release angle 30 deg)
    assert "the motion after a fall is not compared" in step_note(conv)


def test_a_fall_at_another_time_is_flagged(monkeypatch):
    # a fine-step trial whose fall comes 0.2 s later than the coarse one's (stood in for by the same cube
    # pushed 0.2 s later, at the half step) parts the tilt traces before the earlier fall: flagged
    from sim.model.scenario_yaml import load_scenario
    import sim.run.trial as trial_module
    from pathlib import Path
    path = Path(__file__).resolve().parents[1] / "scenarios" / "cube_corner.yaml"
    sc = load_scenario(path, overrides=("trial.duration=3.0", "trial.pushes=[{at: 1 s, impulse: [0.2, 0.1, 0]}]"))
    later = trial_module.run_trial(load_scenario(path, overrides=(
        "trial.duration=3.0", "trial.pushes=[{at: 1.2 s, impulse: [0.2, 0.1, 0]}]", "world.step=0.0005")))
    original, steps = trial_module.run_trial, []

    def run_trial(scenario, **kw):
        steps.append(scenario.world.step)
        return later if scenario.world.step < 1e-3 else original(scenario, **kw)
    monkeypatch.setattr(trial_module, "run_trial", run_trial)
    conv = step_convergence(sc)
    assert steps == [1e-3, 5e-4]
    assert conv["outcomes"] == ["fell", "fell"] and conv["fell_at_s"][1] > conv["fell_at_s"][0] + 0.15
    assert not conv["converged"] and "shorten world.step" in step_note(conv)
