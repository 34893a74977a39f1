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
