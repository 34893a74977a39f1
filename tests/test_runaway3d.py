"""The multi-wheel LQR's steady state under sensor offsets (sim/studies/runaway3d.py).

Checked against independent computations of the same steady state (the continuous-time equilibrium
solved with numpy, python-control's DC gain of the discrete closed loop) and against the simulated
bias holds of `check` (sim/studies/criteria3d.py) on the demo devices.
"""

from __future__ import annotations

from pathlib import Path

import control as ct
import numpy as np
import pytest
from numpy.testing import assert_allclose

from sim.model.device3d import Device3D
from sim.model.scenario_yaml import load_scenario
from sim.studies import criteria3d
from sim.studies.runaway3d import measurement_offsets, predict_bias_response3d

SCENARIOS = Path(__file__).parent.parent / "scenarios"
NO_COULOMB = tuple(f"wheels[{i}].bearing_friction.coulomb=0" for i in range(3))


def _law(sc, dev):
    s = sc.strategy.build(dev, rng=np.random.default_rng(0))
    G_x, _ = s.predictor.folded_gains(s.K)
    return s, G_x


@pytest.mark.parametrize("name, overrides, bias", [
    ("cube_corner.yaml", NO_COULOMB, (0.01, -0.004)),            # ball, three wheels, pivot viscous friction
    ("tilted_axis.yaml", NO_COULOMB[:1], (-0.012,)),              # hinge, one wheel 20 deg off the hinge
])
def test_steady_state_matches_the_continuous_equilibrium_and_python_control(name, overrides, bias):
    sc = load_scenario(SCENARIOS / name, overrides=overrides)
    dev = Device3D.from_scenario(sc)
    p = predict_bias_response3d(sc, dev, angle_bias_rad=bias, hold_s=5.0, horizon_s=50.0)
    s, G_x = _law(sc, dev)
    d = measurement_offsets(sc, dev, angle_bias_rad=bias)
    n, m = s.design.B.shape
    wheels = [i for i, name_ in enumerate(s.design.state_names) if name_.endswith("_speed")]
    # (1) the continuous model's equilibrium with the sampled law held: A x + B u = 0, u = -K x - G_x d
    # (a zero-order-hold equilibrium is one of the continuous model: Ad - I = A M, Bd = M B, M the
    # integral of exp(A s) over a period; Franklin, Powell & Workman, Digital Control, ch. 4, from memory)
    M = np.block([[s.design.A, s.design.B], [s.K, np.eye(m)]])
    x_u = np.linalg.solve(M, np.concatenate([np.zeros(n), -G_x @ d]))
    # (2) python-control: the DC gain of the discrete closed loop from the offsets to the wheel speeds
    loop = ct.ss(s.design.Ad - s.design.Bd @ s.K, -s.design.Bd @ G_x, np.eye(n)[wheels], np.zeros((len(wheels), n)),
                 dt=s.design.period_s)
    predicted = [w.steady_speed_rad_s for w in p.wheels]
    assert_allclose(predicted, x_u[wheels], rtol=1e-6, atol=1e-9)
    assert_allclose(predicted, np.atleast_1d(ct.dcgain(loop) @ d), rtol=1e-6, atol=1e-9)
    # upright again at the end: gravity's torque must vanish with every wheel at a steady speed
    assert_allclose(p.steady_tilt_rad, 0.0, atol=1e-12)
    assert all(w.limit_time_s is None for w in p.wheels)


def test_a_frictionless_ball_keeps_its_vertical_momentum_at_zero():
    # No pivot friction: the angular momentum about the vertical is conserved (neither gravity nor the
    # wheels' internal torques have a vertical moment; Euler's laws, any dynamics text). The steady
    # state must keep the hold's zero: sum over wheels of I_s a_z (w_i + a_i . omega) + (I_O omega)_z = 0.
    sc = load_scenario(SCENARIOS / "cube_corner.yaml", overrides=NO_COULOMB + ("body.pivot_friction.viscous=0",))
    dev = Device3D.from_scenario(sc)
    p = predict_bias_response3d(sc, dev, angle_bias_rad=(0.01, 0.0), hold_s=5.0, horizon_s=50.0)
    s, G_x = _law(sc, dev)
    assert s.design.conserved.shape[0] == 1
    model = dev.linear_spec().linear_model()
    d = measurement_offsets(sc, dev, angle_bias_rad=(0.01, 0.0))
    n, m = s.design.B.shape
    # independent: the continuous equilibrium with the conserved row appended, least squares on the
    # stacked (consistent) system; the conserved row itself from the null space of [A B]^T
    C = s.design.conserved
    M = np.vstack([np.block([[model.A, model.B], [s.K, np.eye(m)]]), np.hstack([C, np.zeros((1, m))])])
    rhs = np.concatenate([np.zeros(n), -G_x @ d, [0.0]])
    x_u, *_ = np.linalg.lstsq(M, rhs, rcond=None)
    assert_allclose(M @ x_u, rhs, atol=1e-9)        # consistent: an equilibrium exists
    wheels = [i for i, name in enumerate(model.state_names) if name.endswith("_speed")]
    assert_allclose([w.steady_speed_rad_s for w in p.wheels], x_u[wheels], rtol=1e-6, atol=1e-9)
    # a steady turn about the vertical is allowed there (nothing brakes it); the momentum stays zero
    assert abs(float((C @ x_u[:n])[0])) < 1e-9


@pytest.mark.slow
@pytest.mark.parametrize("name, axis, hold_s", [("tilted_axis.yaml", 0, 30.0), ("cube_corner.yaml", 1, 30.0)])
def test_prediction_agrees_with_the_simulated_hold(name, axis, hold_s):
    # The simulated hold has what the linear model leaves out (gyroscopic terms, noise, the drive's
    # limits, the encoder's counts); its mean wheel speeds over the last third must lie within 5% of the
    # largest predicted steady speed (our tolerance; seen: 0.4% on the hinge, 2.2% on the cube at 60 s).
    sc = load_scenario(SCENARIOS / name, overrides=(f"requirements.hold_time={hold_s}",))
    dev = Device3D.from_scenario(sc)
    bias = 0.5 * np.pi / 180.0
    hold = criteria3d.runaway_hold3d(sc, dev, axis=axis, bias_rad=bias, seed=sc.trial.seed)
    assert hold["outcome"] == "balanced"
    p = hold["prediction3d"]
    predicted = np.array([w.steady_speed_rad_s for w in p.wheels])
    simulated = np.array([e["drift"].mean_rad_s for e in hold["wheels"]])
    assert_allclose(simulated, predicted, atol=0.05 * np.max(np.abs(predicted)))
    assert np.max(np.abs(predicted)) > 5.0           # a bias that moves the wheels visibly
    # the hold's note carries the reported wheel's prediction
    assert hold["prediction"].wheel_speed_rad_s == p.wheels[hold["wheel"] - 1].steady_speed_rad_s


def test_a_law_without_a_linear_model_has_no_prediction():
    sc = load_scenario(SCENARIOS / "tilted_axis.yaml", overrides=("strategy.kind=coast",))
    assert predict_bias_response3d(sc, Device3D.from_scenario(sc), angle_bias_rad=(0.01,), hold_s=1.0,
                                   horizon_s=10.0) is None


def test_a_wheel_at_its_limit_is_timed():
    # a bias large enough that the steady offset passes the no-load speed: the linear loop must reach
    # the limit in finite time, the time the first sample of the response at or past it
    sc = load_scenario(SCENARIOS / "tilted_axis.yaml", overrides=NO_COULOMB[:1])
    dev = Device3D.from_scenario(sc)
    small = predict_bias_response3d(sc, dev, angle_bias_rad=(0.01,), hold_s=5.0, horizon_s=600.0)
    per_rad = small.wheels[0].steady_speed_rad_s / measurement_offsets(sc, dev, angle_bias_rad=(0.01,))[0]
    big = 1.5 * dev.wheels[0].no_load_speed_rad_s / abs(per_rad)     # linear: 1.5x the limit at the end
    p = predict_bias_response3d(sc, dev, angle_bias_rad=(big,), hold_s=5.0, horizon_s=600.0)
    w = p.wheels[0]
    assert abs(w.steady_speed_rad_s) > w.limit_rad_s
    assert w.limit_time_s is not None and 0.0 < w.limit_time_s < 600.0


def test_a_rounding_sized_predicted_drift_reads_as_settled():
    # The linear loop's predicted drift over a settled hold is rounding (1e-31 rad/s^2 was printed as
    # "drifting -6.83e-31 rad/s^2"); below NO_DRIFT_RAD_S2 the note says the prediction settled, and a
    # real drift is still printed. Our wording choice; no outside reference applies.
    from sim.studies.runaway import BiasResponse, Drift
    from sim.studies.verdicts import NO_DRIFT_RAD_S2, runaway_note
    import dataclasses
    drift = Drift(**{f.name: 0.1 for f in dataclasses.fields(Drift)})
    hold = {"bias_rad": 0.01, "outcome": "balanced", "drift": drift, "runaway_time_s": None}
    for accel, words in ((-6.83e-31, "settled over the hold's last third"), (0.5 * NO_DRIFT_RAD_S2, "settled"),
                         (2e-3, "drifting 0.002 rad/s^2")):
        hold["prediction"] = BiasResponse(kind="offset", basis="the linear loop", wheel_speed_rad_s=-29.7,
                                          wheel_accel_rad_s2=accel)
        note = runaway_note(hold, 500.0)
        assert words in note and ("drifting" in note.split("predicts")[1]) == (accel >= NO_DRIFT_RAD_S2), note
