"""Multi-input LQR (`design_lqr_spec`, the delay predictor with several inputs) and the multi-wheel
`lqr` law, against python-control, scipy and explicit propagation of the model.

Devices: the corner cube and the tilted-axis hinge of tests/test_linear3d.py (our own numbers).
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import control
import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.integrate import solve_ivp

from sim.model.device import Device
from sim.model.linear3d import LinearSpec, spec_from_device
from sim.model.scenario_yaml import default_scenario_path, load_scenario
from sim.strategies import resolve_spec
from sim.strategies.base import Reading
from sim.strategies.lqr import LqrBalance, MultiWheelLqr
from sim.strategies.lqr_design import DelayPredictor, bryson_limits, design_lqr, design_lqr_spec, spec_weights
from test_linear3d import _hinge, corner_cube, wheel


def two_wheel_hinge() -> LinearSpec:
    """A hinge body with two wheels sharing the load, one on the hinge axis, one 20 deg off it."""
    tilt = math.radians(20.0)
    wheels = (wheel((0.0, 0.0, 0.2), (1.0, 0.0, 0.0)),
              wheel((0.0, 0.0, 0.15), (math.cos(tilt), 0.0, math.sin(tilt)), supply_v=8.0))
    return LinearSpec(mount="hinge", gravity_m_s2=9.81, body_mass_kg=0.2, body_com_m=(0.0, 0.0, 0.12),
                      body_inertia_com_kg_m2=((5e-4, 0, 0), (0, 5e-4, 0), (0, 0, 2e-5)), wheels=wheels,
                      pivot_coulomb_n_m=0.0, pivot_viscous_n_m_s=2e-4, control_rate_hz=400.0, delay_s=0.0)


SPECS = {"corner cube": corner_cube, "tilted hinge": lambda: _hinge(20.0, transverse=6.5e-5),
         "two-wheel hinge": two_wheel_hinge}


@pytest.mark.parametrize("name", SPECS)
@pytest.mark.parametrize("weights,effort", [(None, None), ([50.0, 2.0, 1e-3], 0.02)])
def test_gains_match_python_control(name, weights, effort):
    spec = SPECS[name]()
    des = design_lqr_spec(spec, weights=weights, effort=effort)
    model = spec.linear_model()
    n, m = model.B.shape
    assert des.K_discrete.shape == des.K_continuous.shape == (m, n)
    # python-control lqr (references.md "LQR"): K, S, E = lqr(A, B, Q, R), law u = -K x
    K, _, E = control.lqr(model.A, model.B, des.Q, des.R)
    assert_allclose(des.K_continuous, K, rtol=1e-6, atol=1e-6 * np.abs(K).max())
    assert_allclose(np.sort_complex(des.poles_continuous), np.sort_complex(E), rtol=1e-6)
    # python-control: zero-order hold at the loop period, then dlqr (references.md "LQR")
    sysd = control.c2d(control.ss(model.A, model.B, np.eye(n), np.zeros((n, m))), 1.0 / spec.control_rate_hz,
                       method="zoh")
    assert_allclose(des.Ad, sysd.A, rtol=1e-9, atol=1e-12)
    assert_allclose(des.Bd, sysd.B, rtol=1e-9, atol=1e-12)
    Kd, _, Ed = control.dlqr(sysd.A, sysd.B, des.Q, des.R)
    assert_allclose(des.K_discrete, Kd, rtol=1e-6, atol=1e-6 * np.abs(Kd).max())
    # the closed loop A_d - B_d K is stable (every pole inside the unit circle)
    poles = np.linalg.eigvals(des.Ad - des.Bd @ des.K_discrete)
    assert np.max(np.abs(poles)) < 1.0
    assert_allclose(np.sort_complex(poles), np.sort_complex(Ed), rtol=1e-6)


def test_bryson_defaults_per_state_and_per_wheel():
    # Bryson & Ho 1975: Q_ii = 1/x_i,max^2, R_jj = 1/u_j,max^2; the limits are ours (lqr_design)
    spec = two_wheel_hinge()
    model = spec.linear_model()
    x_max, u_max = bryson_limits(spec, model)
    assert_allclose(x_max, [math.radians(3.0), 0.5, 0.5 * 12.0 / 0.02, 0.5 * 8.0 / 0.02], rtol=1e-12)
    assert_allclose(u_max, [12.0, 8.0])
    q, r = spec_weights(spec, model)
    assert_allclose(q, 1 / x_max**2, rtol=1e-12)
    assert_allclose(r, 1 / u_max**2, rtol=1e-12)
    # three weights apply per kind of state: every angle, every rate, every wheel speed
    q3, r3 = spec_weights(corner_cube(), corner_cube().linear_model(), weights=[1.0, 2.0, 3.0], effort=0.5)
    assert_allclose(q3, [1, 1, 2, 2, 2, 3, 3, 3])
    assert_allclose(r3, [0.5, 0.5, 0.5])
    with pytest.raises(ValueError, match="give 3"):
        spec_weights(spec, model, weights=[1.0, 2.0])


def test_one_wheel_spec_design_equals_todays_design():
    # the same model and the same Bryson rule by two paths (Device and LinearSpec); scipy both times
    device = Device.from_scenario(load_scenario(default_scenario_path()))
    old, new = design_lqr(device), design_lqr_spec(spec_from_device(device))
    assert_allclose(new.K_discrete.ravel(), old.K_discrete, rtol=1e-9)
    assert_allclose(new.K_continuous.ravel(), old.K_continuous, rtol=1e-9)


def _explicit_present_state(model, x_meas, held, period_s, delay_s):
    """x at the present tick by integrating x' = A x + B u over the delay (scipy solve_ivp, tight
    tolerances), each held command applied over its own slice: the oldest over the fractional part,
    then one per whole period. Independent of the predictor's matrix exponentials."""
    n = int(math.floor(delay_s / period_s + 1e-9))
    frac = delay_s - n * period_s
    pieces = [(frac, held[0])] + [(period_s, u) for u in held[1:]]
    x = np.array(x_meas, dtype=float)
    for length, u in pieces:
        if length <= 0:
            continue
        sol = solve_ivp(lambda t, s: model.A @ s + model.B @ u, (0.0, length), x, rtol=1e-11, atol=1e-13)
        x = sol.y[:, -1]
    return x


@pytest.mark.parametrize("delay_s", [0.005, 0.006])    # 2.5 and 3 periods at 500 Hz
def test_delay_predictor_with_several_inputs_against_explicit_propagation(delay_s):
    spec = corner_cube(delay_s=delay_s)
    des = design_lqr_spec(spec)
    pred = DelayPredictor(des, delay_s=delay_s)
    assert pred.n == int(delay_s * 500 + 1e-9) and pred.several
    rng = np.random.default_rng(1)
    commands = rng.uniform(-6, 6, size=(pred.n + 4, 3))
    for u in commands:
        pred.record(u)
    x_meas = np.array([0.02, -0.01, 0.1, -0.05, 0.02, 30.0, -20.0, 5.0])
    held = commands[-(pred.n + 1):]
    expect = _explicit_present_state(spec.linear_model(), x_meas, held, des.period_s, delay_s)
    got = pred.present_state(x_meas)
    assert_allclose(got, expect, rtol=1e-7, atol=1e-9 * np.abs(expect).max())
    # the folded gains give K times the predicted state (linearity, common practice, no source)
    G_x, G_u = pred.folded_gains(des.K_discrete)
    folded = G_x @ x_meas + sum(G @ u for G, u in zip(G_u, pred.u))
    assert_allclose(folded, des.K_discrete @ got, rtol=1e-9, atol=1e-9 * np.abs(folded).max())


def _params(**kw):
    return resolve_spec({"kind": "lqr", **kw}, base_dir=default_scenario_path().parent).params


def _stub(spec):
    """The least a multi-wheel device offers the law: `linear_spec()` and the strategy base's `supply_v`."""
    return SimpleNamespace(linear_spec=lambda: spec, supply_v=max(w.supply_v for w in spec.wheels))


def _reading(spec, x) -> Reading:
    r = Reading()
    names = spec.linear_model().state_names
    k = 2 if spec.mount == "ball" else 1
    r.angles_rad = tuple(x[:k])
    rates = [x[names.index(n)] if n in names else 0.0 for n in (("rate_x", "rate_y", "rate_z") if k == 2 else ("body_rate",))]
    r.rates_rad_s = tuple(rates)
    r.wheel_speeds_rad_s = tuple(x[len(names) - len(spec.wheels):])
    return r


def test_lqr_kind_dispatches_to_the_multi_wheel_law_and_its_volts_are_minus_k_x():
    spec = corner_cube()
    law = LqrBalance(device=_stub(spec), params=_params(), rng=None)
    assert type(law) is MultiWheelLqr and law.phase == "balance"
    x = np.array([0.03, -0.02, 0.2, 0.1, -0.05, 10.0, -4.0, 2.0])
    volts = law.decide(_reading(spec, x))
    assert isinstance(volts, list) and len(volts) == 3
    assert_allclose(volts, -design_lqr_spec(spec).K_discrete @ x, rtol=1e-12)
    # today's one-wheel device keeps today's law
    device = Device.from_scenario(load_scenario(default_scenario_path()))
    assert type(LqrBalance(device=device, params=_params(), rng=None)) is LqrBalance
    # a device whose linear_spec() is a plain mapping is told what to return
    with pytest.raises(Exception, match="as_linear_spec"):
        LqrBalance(device=SimpleNamespace(linear_spec=lambda: {"mount": "ball"}, supply_v=12.0), params=_params(),
                   rng=None)
    # a reading without the vector form is refused in words, not with a numpy error
    with pytest.raises(Exception, match="wheel speeds"):
        law.decide(Reading())


@pytest.mark.parametrize("name,delay_periods", [("corner cube", 0), ("corner cube", 2), ("two-wheel hinge", 1)])
def test_closed_loop_on_the_zoh_model_settles(name, delay_periods):
    """The law in the loop of its own ZOH model (measurements delayed by whole periods) brings a
    tilted device back upright: a check on the reading's mapping, the signs and the predictor."""
    T_rate = SPECS[name]().control_rate_hz
    spec = SPECS[name]().__class__(**{**SPECS[name]().__dict__, "delay_s": delay_periods / T_rate})
    law = LqrBalance(device=_stub(spec), params=_params(), rng=None)
    des = law.design
    x = np.zeros(des.Ad.shape[0])
    x[0] = math.radians(2.0)
    if spec.mount == "ball":
        x[1] = -math.radians(1.5)
    past = [x.copy()] * (delay_periods + 1)
    supplies = law.supplies_v
    peak = 0.0
    for _ in range(int(3.0 * T_rate)):
        u = np.clip(law.decide(_reading(spec, past[0])), -supplies, supplies)
        peak = max(peak, float(np.max(np.abs(u))))
        x = des.Ad @ x + des.Bd @ u
        past = past[1:] + [x.copy()]
    n_angles = 2 if spec.mount == "ball" else 1
    # upright again: the tilts within 3% of the start after 3 s (the slowest tilt-related mode, the
    # body leaning to unload the wheels, has a time constant of about 1.4 s with Bryson's weights)
    assert np.max(np.abs(x[:n_angles])) < 0.03 * math.radians(2.0)
    assert peak > 0.1                                   # the wheels did the work


def test_commands_held_by_the_predictor_are_clamped_to_each_wheels_supply():
    spec = corner_cube(delay_s=0.004)
    law = LqrBalance(device=_stub(spec), params=_params(), rng=None)
    x = np.array([0.5, 0.5, 0, 0, 0, 0, 0, 0])          # far out: the law asks for more than 12 V
    volts = law.decide(_reading(spec, x))
    assert np.max(np.abs(volts)) > 12.0
    assert_allclose(law.held_commands()[-1], np.clip(volts, -12.0, 12.0))


def test_frictionless_ball_mount_designs_around_the_conserved_vertical_momentum():
    """On a frictionless ball mount the angular momentum about the vertical is conserved whatever the
    wheels do (no external moment about the vertical: Euler's second law, any dynamics text), so the
    full model has no Riccati solution; the design works on the rest of the state."""
    from scipy.linalg import null_space
    from scipy.spatial.transform import Rotation

    spec = corner_cube(pivot_viscous_n_m_s=0.0)
    des = design_lqr_spec(spec)
    assert des.conserved.shape == (1, 8)
    # the conserved row is the vertical angular momentum about the pivot, from the parallel-axis
    # theorem by hand: H_z = e_z . (I_O w + sum I_s a_i w_i), upright frame
    m = np.array([spec.body_mass_kg] + [w.mass_kg for w in spec.wheels])
    r = np.array([spec.body_com_m] + [w.at_m for w in spec.wheels])
    com = m @ r / m.sum()
    R0 = Rotation.align_vectors([[0.0, 0.0, 1.0]], [com / np.linalg.norm(com)])[0].as_matrix()
    I_O = R0 @ np.array(spec.body_inertia_com_kg_m2) @ R0.T
    for mass, at in zip(m, r @ R0.T):
        I_O += mass * (at @ at * np.eye(3) - np.outer(at, at))
    for w in spec.wheels:
        a = R0 @ np.array(w.axis)
        I_O += w.spin_inertia_kg_m2 * np.outer(a, a) + w.transverse_inertia_kg_m2 * (np.eye(3) - np.outer(a, a))
    h_z = np.concatenate([[0.0, 0.0], I_O[2], [w.spin_inertia_kg_m2 * (R0 @ np.array(w.axis))[2] for w in spec.wheels]])
    c = des.conserved[0]
    assert_allclose(abs(c @ h_z), np.linalg.norm(h_z), rtol=1e-9)          # parallel rows
    # the closed loop keeps it and settles everything else
    closed = des.Ad - des.Bd @ des.K_discrete
    assert_allclose(c @ closed, c, atol=1e-9)
    eig = np.sort(np.abs(np.linalg.eigvals(closed)))
    assert_allclose(eig[-1], 1.0, atol=1e-9) and np.all(eig[:-1] < 1.0)
    # python-control dlqr on the rest of the state (scipy's null_space for the complement)
    N = null_space(des.conserved)
    Q_rest = N.T @ des.Q @ N
    K_rest, _, _ = control.dlqr(N.T @ des.Ad @ N, N.T @ des.Bd, (Q_rest + Q_rest.T) / 2, des.R)
    assert_allclose(des.K_discrete, K_rest @ N.T, rtol=1e-6, atol=1e-6 * np.abs(K_rest).max())
    # with pivot friction there is nothing conserved and the full design stands
    assert design_lqr_spec(corner_cube()).conserved.shape == (0, 8)


@pytest.mark.parametrize("pivot_viscous", [1e-12, 1e-11, 1e-10, 1e-9, 1e-6])
def test_a_nearly_frictionless_ball_mount_still_has_a_design(pivot_viscous):
    # between "conserved" and "controllable but slow" the Riccati solvers must not be left without
    # a solution (scipy's solvers gave none at 1e-11 and 1e-12 N m s before the tolerance was set)
    des = design_lqr_spec(corner_cube(pivot_viscous_n_m_s=pivot_viscous))
    closed = np.abs(np.linalg.eigvals(des.Ad - des.Bd @ des.K_discrete))
    assert np.all(np.isfinite(des.K_discrete)) and np.max(closed) < 1.0 + 1e-9
    assert np.sort(closed)[-2] < 0.9999           # every mode but the (nearly) conserved one settles
    assert des.conserved.shape[0] == (1 if pivot_viscous < 5e-10 else 0)
