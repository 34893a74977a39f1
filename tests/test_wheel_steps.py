"""`sim.run.wheel_steps`: the 3D loop's per-step wheel work, written out for n wheels, gives exactly
the numbers of the plain loop it stands for (`MotorDrive.update` per wheel, the net torque less the
bearing's viscous friction, the speed check), step by step, the current limit's crossing included.

No outside reference applies: this pins a speed path to the plain path, bit for bit (the motor's own
physics is checked against the DC-motor equations in tests/test_motor.py).
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest

from sim.physics.motor import MotorDrive
from sim.run.wheel_steps import command_records, motor_steps, wheel_records

# windings of our own: with inductance (the limit's crossing solved mid-step), with none (a
# quasi-static current), and one that rings (complex eigenvalues of the winding and its inertia)
WINDINGS = [dict(inductance_h=0.3e-3, resistance_ohm=1.2, current_limit_a=8.0, k=0.048, inertia=2e-4),
            dict(inductance_h=0.0, resistance_ohm=0.8, current_limit_a=3.0, k=0.02, inertia=5e-5),
            dict(inductance_h=5e-3, resistance_ohm=0.5, current_limit_a=2.0, k=0.1, inertia=1e-5)]


def _motor(w: dict) -> MotorDrive:
    figures = SimpleNamespace(k_e_v_s_rad=w["k"], k_t_n_m_a=w["k"] * 1.1, resistance_ohm=w["resistance_ohm"],
                              inductance_h=w["inductance_h"], current_limit_a=w["current_limit_a"],
                              I_w_kg_m2=w["inertia"], J_kg_m2=math.inf, locked=True)
    return MotorDrive(figures, step_s=1e-3)


@pytest.mark.parametrize("n", [1, 2, 3])
def test_motor_steps_equal_motor_drive_updates(n):
    rng = np.random.default_rng(11 + n)
    steps = 3000
    plain = [_motor(WINDINGS[j]) for j in range(n)]
    fused = [_motor(WINDINGS[j]) for j in range(n)]
    viscous = [2e-6 * (j + 1) for j in range(n)]
    currents, torques = [np.zeros(steps) for _ in range(n)], [np.zeros(steps) for _ in range(n)]
    drive = motor_steps(fused, viscous_n_m_s=viscous, current_columns=[memoryview(c) for c in currents],
                        torque_columns=[memoryview(t) for t in torques])
    limited = 0
    for k in range(steps):
        # volts jumping across the supply (the limit reached mid-step, and left), speeds up to past no-load
        volts = tuple(float(v) for v in rng.choice([-24.0, -3.0, 0.0, 5.0, 24.0], size=n) + rng.normal(0, 0.5, n))
        speeds = tuple(float(s) for s in rng.normal(0, 200.0, n))
        if k % 500 == 0:    # an open winding resets a motor's current between steps: both paths see it
            plain[0].current = fused[0].current = 0.0
        expected = []
        for j, (m, v, s) in enumerate(zip(plain, volts, speeds)):
            end = m.end[0] * m.current + m.end[1] * s + m.end[2] * v
            limited += not -m.i_max <= end <= m.i_max
            i, torque = m.update(v, s)
            expected.append((i, torque, torque - viscous[j] * s))
        net = drive(k, volts, speeds)
        assert isinstance(net, tuple) and len(net) == n
        for j in range(n):
            assert (currents[j][k], torques[j][k], net[j]) == expected[j], (n, k, j)
            assert fused[j].current == plain[j].current, (n, k, j)
    assert limited > 100      # the limit's path was taken


def test_wheel_records_store_and_check():
    angles, speeds = np.zeros((3, 5)), np.zeros((3, 5))
    record = wheel_records(speed_limits_rad_s=[10.0, 20.0, 30.0], angle_columns=[memoryview(a) for a in angles],
                           speed_columns=[memoryview(s) for s in speeds])
    assert record(2, (0.1, 0.2, 0.3), (9.0, -19.0, 29.0)) is True
    assert angles[:, 2].tolist() == [0.1, 0.2, 0.3] and speeds[:, 2].tolist() == [9.0, -19.0, 29.0]
    assert record(3, (0.0, 0.0, 0.0), (10.0, 0.0, 0.0)) is False      # strictly inside
    assert record(4, (0.0, 0.0, 0.0), (0.0, math.nan, 0.0)) is False
    assert speeds[1, 4] != speeds[1, 4]       # stored before the check, as the loop records a bad state
    one = wheel_records(speed_limits_rad_s=[5.0], angle_columns=[memoryview(angles[0])],
                        speed_columns=[memoryview(speeds[0])])
    assert one(0, (1.5,), (-4.0,)) is True and angles[0, 0] == 1.5


def test_lengths_must_agree():
    with pytest.raises(ValueError, match="one entry per wheel"):
        wheel_records(speed_limits_rad_s=[1.0, 2.0], angle_columns=[None], speed_columns=[None, None])
    with pytest.raises(ValueError, match="one entry per wheel"):
        motor_steps([], viscous_n_m_s=[], current_columns=[], torque_columns=[])


def test_command_records_store_and_flag_the_supply():
    columns = np.full((2, 4), np.nan)
    record = command_records(at_supply_v=12.0, voltage_columns=[memoryview(c) for c in columns])
    assert record(0, (3.0, -11.9), False) is False and columns[:, 0].tolist() == [3.0, -11.9]
    assert record(1, (3.0, -12.0), False) is True                  # at the supply counts
    assert record(2, (12.5, 0.0), True) is True and columns[:, 2].tolist() == [0.0, 0.0]   # open: 0 recorded
    # the plain loop it stands for (each command, the tick saturated if any is at the supply), on random ticks
    rng = np.random.default_rng(4)
    for k in range(200):
        volts = tuple(float(v) for v in rng.uniform(-13.0, 13.0, 2))
        at_limit = any(v >= 12.0 or v <= -12.0 for v in volts)
        assert record(3, volts, False) is at_limit and columns[:, 3].tolist() == list(volts)
