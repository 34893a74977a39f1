"""Coulomb friction at a ball mount (`sim.physics.ball_friction`, `body.pivot_friction.coulomb`).

Coulomb's law of dry friction: sliding, the friction has the constant magnitude mu N and opposes the
motion; sticking, it holds any load up to mu N (common practice, no source). For a rigid body
turning on a fixed pivot under that torque alone, Euler's law dL/dt = tau (Goldstein, Classical
Mechanics, ch. 5) gives a constant deceleration tau_c / I about a principal axis, to a stop in
w0 I / tau_c, and a momentum that changes at |dL/dt| = tau_c whatever the direction of the rate.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from conftest import make_scenario3d
from sim.model.device3d import Device3D
from sim.physics.engine3d import Engine3D

BOX = {"a": 0.10, "b": 0.10, "c": 0.06, "m": 0.5}        # body: a box centred on the z axis (invented)
DISK = {"r": 0.04, "h": 0.006, "m": 0.1}                   # one wheel, axis x, on the z axis
TAU_C = 0.004                                              # N m


def _device(*, gravity: float = 0.0, coulomb: float = TAU_C) -> Device3D:
    body = {"mount": "ball", "parts": [{"shape": "box", "length": BOX["a"], "width": BOX["b"],
                                        "thickness": BOX["c"], "mass": BOX["m"], "at": 0.05}],
            "pivot_friction": {"coulomb": coulomb}}
    wheel = {"at": [0, 0, 0.1], "axis": [1, 0, 0],
             "parts": [{"shape": "disk", "radius": DISK["r"], "thickness": DISK["h"], "mass": DISK["m"]}]}
    sc = make_scenario3d([wheel], body=body, world={"gravity": gravity}, strategy={"kind": "coast"})
    return Device3D.from_scenario(sc)


def _spin(device, rate_world, steps: int, *, attitude=None):
    """Rates (world, rad/s) and momenta about the pivot (world, N m s) after each step, wheels free."""
    eng = Engine3D(device, step_s=1e-3)
    try:
        eng.reset(attitude=attitude or ((1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 0.0, 1.0)), rate_world=rate_world)
        read, advance = eng.io()
        rates, moms = [], []
        for _ in range(steps):
            read()
            advance(None, [0.0])
            rates.append(eng.body_rate_world())
            rot = np.array(eng.attitude())
            w_b = rot.T @ np.array(rates[-1])
            inner = device.inertia_about_pivot_kg_m2(with_spin=True) @ w_b
            inner = inner + device.wheels[0].spin_inertia_kg_m2 * eng.wheel_speeds()[0] * np.array(device.wheels[0].axis)
            moms.append(rot @ inner)
        return np.array(rates), np.array(moms)
    finally:
        eng.close()


def test_a_spinning_body_decelerates_at_tau_over_i_and_stops():
    # Izz about the pivot from handbook formulas (box m(b^2+c^2)/12 about its length, which lies
    # along z; thin disk about a diameter m(3r^2+h^2)/12; Meriam & Kraige, Dynamics, table of
    # moments of inertia), both centred on z.
    izz = BOX["m"] * (BOX["b"] ** 2 + BOX["c"] ** 2) / 12 + DISK["m"] * (3 * DISK["r"] ** 2 + DISK["h"] ** 2) / 12
    w0 = 1.5
    rates, _ = _spin(_device(), (0.0, 0.0, w0), 1500)
    t = np.arange(1, len(rates) + 1) * 1e-3
    stop_s = w0 * izz / TAU_C
    sliding = t < 0.9 * stop_s
    slope, icpt = np.polyfit(t[sliding], rates[sliding, 2], 1)
    assert_allclose(-slope, TAU_C / izz, rtol=1e-3)                 # constant deceleration tau_c / I (measured: 1e-15)
    assert np.max(np.abs(rates[sliding, 2] - (icpt + slope * t[sliding]))) < 1e-6 * w0   # a straight line
    assert 0.1 < stop_s < 1.4                                        # the stop falls inside the run
    stopped = t > stop_s + 0.01
    assert np.max(np.abs(rates[stopped])) < 1e-6                    # and it stays stopped
    assert np.max(np.abs(rates[:, :2])) < 1e-9                      # about a principal axis: no wobble


def test_friction_is_tau_c_against_the_rate_in_any_direction():
    # Rate along no principal axis: pybullet's spherical motor capped at tau_c per axis would let the
    # friction reach up to sqrt(3) tau_c; the law's sliding friction is tau_c, opposite the rate.
    rates, moms = _spin(_device(), (0.8, -0.6, 0.7), 200)
    dl = np.diff(moms, axis=0) / 1e-3
    assert_allclose(np.linalg.norm(dl, axis=1), TAU_C, rtol=2e-3)   # measured: within 0.03%
    cosines = np.sum(dl * rates[1:], axis=1) / (np.linalg.norm(dl, axis=1) * np.linalg.norm(rates[1:], axis=1))
    assert np.min(-cosines) > 0.995                                 # opposes the rate


@pytest.mark.parametrize("ratio, holds", [(1.3, True), (0.7, False)])
def test_a_tilted_body_sticks_when_gravity_torque_is_below_tau_c(ratio, holds):
    # Coulomb's stick-slip rule: held if the load torque m g d sin(tilt) < tau_c, falling otherwise.
    # The tilt is about x, a principal axis of this body, where the hold's cap is exactly tau_c.
    tilt = math.radians(10)
    free = _device(gravity=9.81, coulomb=1e-9)
    load = free.gravity_torque_coeff_n_m * math.sin(tilt)
    dev = _device(gravity=9.81, coulomb=ratio * load)
    from sim.core.frames import matmul, rotation_about_x_y
    att = matmul(rotation_about_x_y(tilt, 0.0), dev.upright())
    rates, _ = _spin(dev, (0.0, 0.0, 0.0), 500, attitude=att)
    peak = float(np.max(np.linalg.norm(rates, axis=1)))
    if holds:
        assert peak < 1e-6
    else:
        assert np.linalg.norm(rates[-1]) > 0.3
