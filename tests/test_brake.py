"""The wheel brake (`sim.physics.brake`, `drive.brake_engage_time`): a Coulomb friction torque that
slips, not an instant lock, ramped over its engagement time, on the planar and 3D runners."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from conftest import make_scenario, make_scenario3d
from sim.core.errors import ScenarioError
from sim.physics.brake import ramp_mean
from sim.run.trial import run_trial

LAW = f"{Path(__file__).parent / 'plugins' / 'brake_laws.py'}:BrakeAt"
W0, T_B, T_E = 100.0, 0.05, 0.1


def _expected(t, *, w0, torque, engage, inertia):
    """Speed of a wheel slipping against a brake whose torque rises linearly from 0 to `torque` over
    `engage` s, then stays (constant-acceleration kinematics integrated by hand; any dynamics text):
    w0 - T t^2 / (2 t_e I) while t <= t_e, then w0 - T t_e / (2 I) - T (t - t_e) / I."""
    t = np.asarray(t)
    ramp = w0 - torque * t ** 2 / (2 * engage * inertia) if engage else w0 + 0 * t
    after = w0 - torque * engage / (2 * inertia) - torque * (t - engage) / inertia
    return np.where(t <= engage, ramp, after)


def test_ramp_means_sum_to_the_ramp_integral():
    # the sum of the step means is the integral of min(1, t/t_e): t^2/(2 t_e) up to t_e, then t - t_e/2
    dt = 0.001
    for engage in (0.1, 0.0105):
        for n in (7, 100, 250):
            got = sum(ramp_mean(j, dt, engage) for j in range(n)) * dt
            t = n * dt
            assert_allclose(got, t * t / (2 * engage) if t <= engage else t - engage / 2, rtol=1e-12)
    assert ramp_mean(0, dt, 0.0) == 1.0


@pytest.mark.parametrize("engage", [None, T_E])
def test_a_planar_brake_slips_as_a_coulomb_torque_ramped_over_its_engagement(engage):
    # a locked body, so the wheel alone turns against the brake (I = the wheel's spin inertia)
    drive = {"supply": 12.0, "brake_torque": T_B}
    if engage is not None:
        drive["brake_engage_time"] = engage
    sc = make_scenario(body={"locked": True}, drive=drive, strategy={"plugin": LAW},
                       trial={"duration": 0.4, "start": {"angle": 0.0, "wheel_speed": W0}})
    res = run_trial(sc, isolate=False)
    tr, dev = res.trace, res.device
    t = np.arange(tr.n) * tr.step_s
    expect = _expected(t, w0=W0, torque=T_B, engage=engage or 0.0, inertia=dev.I_w_kg_m2)
    moving = expect > 1.0
    # pybullet's capped velocity motor gives each step the impulse cap * dt while the wheel slips
    assert_allclose(tr.wheel_speed[: tr.n][moving], expect[moving], rtol=0, atol=1e-6 * W0)
    # and once stopped the brake holds it (a Coulomb torque: no reversal)
    assert abs(tr.wheel_speed[tr.n - 1]) < 1e-6


def test_without_the_key_the_brake_is_unchanged():
    # the same trial with and without drive.brake_engage_time: 0 s gives exactly today's instant brake
    base = {"supply": 12.0, "brake_torque": T_B}
    runs = [run_trial(make_scenario(body={"locked": True}, drive=d, strategy={"plugin": LAW},
                                    trial={"duration": 0.3, "start": {"wheel_speed": W0}}), isolate=False)
            for d in (base, {**base, "brake_engage_time": 0.0})]
    assert np.array_equal(runs[0].trace.wheel_speed[: runs[0].trace.n], runs[1].trace.wheel_speed[: runs[1].trace.n])


RING = {"shape": "ring", "outer_radius": 0.05, "inner_radius": 0.01, "thickness": 0.006, "mass": 0.12}


def _wheel_1_ramped(sc):
    """Run `sc` and check wheel 1 (on the hinge axis x) against the ramped brake's kinematics, its speed
    relative to the body falling at T (1/I_w + 1/J_x); return the result."""
    res = run_trial(sc)
    dev, tr = res.device, res.trace
    inv = 1.0 / dev.wheels[0].spin_inertia_kg_m2 + 1.0 / dev.inertia_about_pivot_kg_m2(with_spin=False)[0, 0]
    t = np.arange(tr.n) * tr.step_s
    expect = _expected(t, w0=W0, torque=T_B, engage=T_E, inertia=1.0 / inv)
    moving = expect > 1.0
    assert_allclose(tr.w1_speed[: tr.n][moving], expect[moving], rtol=0, atol=1e-4 * W0)
    return res


def test_a_3d_wheel_brake_ramps_per_wheel():
    # Gravity off, a hinge body: the wheel's speed relative to the body falls at T (1/I_w + 1/J_x)
    # (two bodies and one internal torque: I_w phi_dd = -T, J theta_dd = +T for a wheel on the hinge axis).
    # Wheel 1 has its own engagement time, wheel 2 the drive's (instant here: none given).
    wheels = [{"at": [0.0, 0.0, 0.1], "axis": [1, 0, 0], "parts": [RING], "brake_engage_time": T_E},
              {"at": [0.0, 0.0, 0.05], "axis": [0, 1, 0], "parts": [RING]}]
    sc = make_scenario3d(wheels, world={"gravity": 0.0}, drive={"supply": 12.0, "brake_torque": T_B},
                         strategy={"plugin": LAW}, trial={"duration": 0.3, "start": {"wheel_speed": [W0, 50.0]}})
    res = _wheel_1_ramped(sc)
    dev, tr = res.device, res.trace
    t = np.arange(tr.n) * tr.step_s
    # wheel 2 (axis across the hinge: the bearing holds the body) is braked at once, at T / I_w
    w2 = _expected(t, w0=50.0, torque=T_B, engage=0.0, inertia=dev.wheels[1].spin_inertia_kg_m2)
    m2 = w2 > 1.0
    assert_allclose(tr.w2_speed[: tr.n][m2], w2[m2], rtol=0, atol=1e-4 * 50.0)


@pytest.mark.parametrize("drive,wheels,key", [
    ({"supply": 12.0, "brake_engage_time": 0.05}, None, "drive.brake_engage_time"),
    ({"supply": 12.0, "brake_torque": 0.1, "brake_engage_time": -0.01}, None, "drive.brake_engage_time"),
    ({"supply": 12.0}, [{"at": 0.1, "parts": [RING], "brake_engage_time": 0.05}], "wheels[0].brake_engage_time"),
])
def test_bad_engagement_times_name_the_key(drive, wheels, key):
    with pytest.raises(ScenarioError, match=key.replace("[", r"\[").replace("]", r"\]").replace(".", r"\.")):
        if wheels is None:
            make_scenario(drive=drive)
        else:
            make_scenario3d(wheels, drive=drive)


def test_per_wheel_flags_ramp_only_the_engaged_wheel():
    # the strategy's brake as one flag per wheel: wheel 1 braked through its ramp, wheel 2 left coasting
    # (frictionless bearings: it keeps its speed, the hinge body being held about y by the bearing)
    wheels = [{"at": [0.0, 0.0, 0.1], "axis": [1, 0, 0], "parts": [RING]},
              {"at": [0.0, 0.0, 0.05], "axis": [0, 1, 0], "parts": [RING]}]
    sc = make_scenario3d(wheels, world={"gravity": 0.0}, drive={"supply": 12.0, "brake_torque": T_B,
                                                               "brake_engage_time": T_E},
                         strategy={"plugin": LAW, "flags": [True, False]},
                         trial={"duration": 0.2, "start": {"wheel_speed": [W0, 50.0]}})
    tr = _wheel_1_ramped(sc).trace
    assert_allclose(tr.w2_speed[: tr.n], 50.0, rtol=1e-9)
