"""A motor given by a datasheet torque-speed curve (`sim.physics.curve`). Tables invented for the tests."""

from __future__ import annotations

import numpy as np
from numpy.testing import assert_allclose
from scipy.optimize import brentq

from conftest import make_scenario
from sim.physics.curve import TorqueCurve
from sim.run.trial import run_trial

K_E, K_T, R = 0.031831, 0.033, 2.0     # conftest's motor: 300 rpm/V, 0.033 N m/A, 2 ohm


def test_a_straight_table_is_the_linear_motor_at_every_voltage_and_speed():
    # the DC motor's steady torque k_t (V - k_e w) / R [references.md "Motor"]; the table holds it at 12 V
    w_nl = 12.0 / K_E
    curve = TorqueCurve(voltage=12.0, k_t=K_T, points=[(w, K_T * (12.0 - K_E * w) / R) for w in (0.0, 0.5 * w_nl, w_nl)])
    for volts in (12.0, 5.0, 0.7, 0.0, -3.0, -12.0):
        for w in (-200.0, 0.0, 100.0, 250.0, 420.0, 800.0):     # plugging, driving, generating
            assert_allclose(curve.torque(volts, w), K_T * (volts - K_E * w) / R, rtol=1e-12, atol=1e-15)
            assert_allclose(curve.current(volts, w), (volts - K_E * w) / R, rtol=1e-12, atol=1e-15)


def test_locked_wheel_settles_where_the_curved_torque_meets_the_friction():
    # steady state: T(V, w) = b w (bearing viscous friction b); the root found by scipy's brentq on the
    # same table at the scaled speed (T(V, w) = (V / V_r) T_r(w V_r / V), the module's scaling)
    b = 2e-4
    table = [("0 rpm", 0.2), ("1500 rpm", 0.15), ("3000 rpm", 0.07), ("3600 rpm", 0.0)]
    points = [{"speed": s, "torque": t} for s, t in table]
    sc = make_scenario(body={"locked": True}, wheel={"bearing_friction": {"viscous": b}},
                       motor={"curve": {"voltage": 12.0, "points": points}},
                       strategy={"kind": "fixed_voltage", "volts": 9.0}, trial={"duration": 4.0})
    res = run_trial(sc)
    speeds = [p.speed for p in sc.motor.curve.points]
    torques = [p.torque for p in sc.motor.curve.points]
    k = 9.0 / 12.0
    w_star = brentq(lambda w: k * np.interp(w / k, speeds, torques) - b * w, 0.0, k * speeds[-1])
    tr = res.trace
    assert_allclose(tr.wheel_speed[tr.n - 1], w_star, rtol=1e-3)
    assert_allclose(tr.torque[tr.n - 1], b * w_star, rtol=1e-2)
