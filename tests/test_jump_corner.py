"""`kind: jump` on a floor device balancing on its corner (`sim.strategies.jump_corner.JumpToCorner`): from
the edge up to the corner, and from a face through the edge to the corner. The devices are our own
invention (scenarios/floor_corner_jump.yaml and a hand-built cube)."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from sim.model.device3d import Device3D
from sim.model.linear3d import WheelUnit
from sim.model.scenario_yaml import load_scenario
from sim.run.trial import run_trial
from sim.strategies.jump_figures import edge_to_corner

DEMO = Path(__file__).resolve().parents[1] / "scenarios" / "floor_corner_jump.yaml"
G = 9.81


def _symmetric_cube(a=0.15, m_b=0.8, m_w=0.3, inset=0.015, spin=1.2e-3, transverse=0.65e-3) -> Device3D:
    """A cube of side a with its corner at the origin and edges along x, y, z: a shell of mass m_b whose
    inertia about its centre is 5 m_b a^2 / 18 about every axis (Meriam & Kraige plate formulas,
    shared/references.md), and three equal wheels on the body axes, `inset` inside the faces away from
    the corner. Our own numbers."""
    ic = 5.0 * m_b * a ** 2 / 18.0
    units = []
    for ax in ((1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 0.0, 1.0)):
        at = tuple(0.5 * a + (0.5 * a - inset) * v for v in ax)
        units.append(WheelUnit(at_m=at, axis=ax, mass_kg=m_w, spin_inertia_kg_m2=spin, transverse_inertia_kg_m2=transverse,
                               k_e_v_s_rad=0.0477, k_t_n_m_a=0.0477, resistance_ohm=1.2, inductance_h=3e-4,
                               current_limit_a=8.0, supply_v=24.0, brake_torque_n_m=20.0, coulomb_n_m=0.0,
                               viscous_n_m_s=0.0))
    return Device3D(mount="ball", gravity_m_s2=G, body_mass_kg=m_b, body_com_m=(a / 2, a / 2, a / 2),
                    body_inertia_com_kg_m2=((ic, 0, 0), (0, ic, 0), (0, 0, ic)), wheels=tuple(units),
                    pivot_coulomb_n_m=0.0, pivot_viscous_n_m_s=0.0, control_rate_hz=500.0, delay_s=0.0, supply_v=24.0)


def test_needed_edge_to_corner_speed_against_the_momentum_and_energy_relation_by_hand():
    # The relation (Gajamohan, Merz, Thommen & D'Andrea, "The Cubli: a cube that can jump up and balance",
    # IROS 2012; shared/references.md "Jump-up by braking"), written out here for a symmetric cube by hand:
    # the whole centre of mass C lies on the cube's diagonal, C = C0 (1, 1, 1), so it rises from
    # sqrt(2) C0 (above the edge) to sqrt(3) C0 (above the corner); the turn is about n = (0, -1, 1)/sqrt(2),
    # at right angles to C, so Theta_0 = n.J.n is the parallel-axis sum (Meriam & Kraige) of
    #   the shell:   I_c + m_b |c_b|^2                     (c_b . n = 0)
    #   wheel x:     I_t + m_w |p_x|^2                     (axis and p_x at right angles to n)
    #   wheels y, z: (I_s + I_t) / 2 + m_w (|p|^2 - (p.n)^2)  (axis at 45 deg to n)
    # The brake hands the wheels' momentum along n, I_s (w_z - w_y) / sqrt(2), to the body: Theta_0 rate;
    # 1/2 Theta_0 rate^2 = M g rise; the y and z wheels share it equally (w_z = -w_y = w).
    a, m_b, m_w, inset, i_s, i_t = 0.15, 0.8, 0.3, 0.015, 1.2e-3, 0.65e-3
    dev = _symmetric_cube(a, m_b, m_w, inset, i_s, i_t)
    far = a - inset
    p_x, p_y, p_z = np.array([far, a / 2, a / 2]), np.array([a / 2, far, a / 2]), np.array([a / 2, a / 2, far])
    n = np.array([0.0, -1.0, 1.0]) / math.sqrt(2.0)
    theta0 = 5.0 * m_b * a ** 2 / 18.0 + m_b * 3 * (a / 2) ** 2
    theta0 += i_t + m_w * p_x @ p_x
    theta0 += sum(0.5 * (i_s + i_t) + m_w * (p @ p - (p @ n) ** 2) for p in (p_y, p_z))
    mass = m_b + 3 * m_w
    c0 = (m_b * a / 2 + m_w * (far + a)) / mass
    rise = (math.sqrt(3.0) - math.sqrt(2.0)) * c0
    rate = math.sqrt(2.0 * mass * G * rise / theta0)
    w = theta0 * rate / (math.sqrt(2.0) * i_s)
    fig = edge_to_corner(dev)
    assert_allclose(fig.rise_m, rise, rtol=1e-12)
    assert_allclose(fig.inertia_kg_m2, theta0, rtol=1e-12)
    assert_allclose(fig.needed_wheel_speed_rad_s, w, rtol=1e-12)   # hand algebra: only rounding
    assert_allclose(fig.wheel_speeds_rad_s, [0.0, -w, w], rtol=1e-12, atol=1e-12)


def _demo(*overrides):
    res = run_trial(load_scenario(DEMO, overrides=list(overrides)))
    return res, res.strategy.extra_metrics


def _edge_state(res):
    """(|u_b . x|, tilt about the edge from edge balance) at the trial's last row, from the recorded tilts:
    u_b = R0^T Rx(tx)^T Ry(ty)^T z (the corner's upright R0; sim.core.frames' convention, worked by hand)."""
    tr, dev = res.trace, res.device
    tx, ty = tr.tilt_x[tr.n - 1], tr.tilt_y[tr.n - 1]
    ry_t_z = np.array([-math.sin(ty), 0.0, math.cos(ty)])
    rx_t = np.array([[1, 0, 0], [0, math.cos(tx), math.sin(tx)], [0, -math.sin(tx), math.cos(tx)]])
    up = np.array(dev.upright()).T @ (rx_t @ ry_t_z)
    c = np.asarray(dev.com_m)
    return abs(up[0]), math.atan2(up[1], up[2]) - math.atan2(c[1], c[2])


@pytest.mark.parametrize("margin,balanced", [(1.1, True), (0.9, False)])
def test_ten_percent_over_ends_on_the_corner_and_ten_under_falls_back_to_the_edge(margin, balanced):
    res, m = _demo("trial.start.resting_on=edge", f"strategy.margin={margin}", "strategy.max_attempts=1",
                   "trial.duration=4 s")
    assert m["jump_attempts"] == 1 and m["face_jump_attempts"] == 0
    assert m["needed_wheel_speed_rad_s"] == pytest.approx(edge_to_corner(res.device).needed_wheel_speed_rad_s, rel=1e-12)
    assert m["reached_wheel_speed_rad_s"] == pytest.approx(margin * m["needed_wheel_speed_rad_s"], rel=0.02)
    if balanced:
        assert res.outcome == "balanced" and res.trace.tilt[res.trace.n - 1] < math.radians(2)
        assert res.floor["slip_m"] < 1e-3 and res.caught_at_s > m["braked_at_s"]
    else:
        assert res.outcome != "balanced"
        assert m["jump_energy_ratios"][0] < 1.0
        level, edge_tilt = _edge_state(res)   # back on its balance edge, held there by the edge law
        assert level < math.sin(math.radians(2)) and abs(edge_tilt) < math.radians(3)
        assert res.strategy.phase == "edge"


def test_a_short_corner_jump_is_corrected_by_the_energy_it_reached():
    res, m = _demo("trial.start.resting_on=edge", "strategy.margin=0.8", "strategy.max_attempts=3",
                   "trial.duration=5 s")
    assert res.outcome == "balanced" and m["jump_attempts"] == 2
    # the lossless need, scaled by 0.8, reaches at most 0.8^2 of the rise's energy; losses take more
    assert 0.3 < m["jump_energy_ratios"][0] < 0.8 ** 2


def test_the_bundled_demo_gets_from_its_face_through_its_edge_onto_its_corner():
    # scenarios/floor_corner_jump.yaml: its comment gives these figures
    res, m = _demo()
    assert res.outcome == "balanced" and res.trace.tilt[res.trace.n - 1] < math.radians(2)
    assert m["face_jump_attempts"] == 1 and m["jump_attempts"] == 1
    assert m["face_needed_wheel_speed_rad_s"] == pytest.approx(328.5, rel=1e-3)   # `validate` prints 328
    assert m["face_reached_wheel_speed_rad_s"] > m["face_needed_wheel_speed_rad_s"]
    assert m["reached_wheel_speed_rad_s"] > m["needed_wheel_speed_rad_s"] and m["jump_margin"] > 0
    assert res.floor["slip_m"] < 1e-3 and res.floor["lift_off_s"] == 0.0
    phases = res.trace.phases
    assert phases.index("face: brake") < phases.index("edge") < phases.index("corner: brake") < phases.index("corner balance")


def test_a_corner_device_without_a_wheel_to_hold_the_edge_fails_as_an_outcome():
    # only the y and z wheels: nothing holds the edge while they spin up; the law says so at build
    from sim.model.scenario import validate_scenario
    from sim.model.scenario_yaml import load_raw
    raw, where = load_raw(DEMO)
    raw["wheels"] = raw["wheels"][1:]
    raw["trial"]["duration"] = 0.1
    res = run_trial(validate_scenario(raw, where=where))
    assert res.outcome == "strategy_failed" and "hold the edge" in res.message


def test_a_wheel_along_the_edge_that_reads_a_rounding_sized_share_still_holds_the_edge():
    # with the battery 35 mm up, n = c x u comes out with an x part of about 1e-16 (exactly 0 in exact
    # arithmetic: u has no x part), so the x wheel reads a need of about 3e-14 rad/s; it must still be the
    # wheel that holds the edge, not a corner wheel (seen on a cube of our own before the threshold)
    res, m = _demo("body.parts[1].at=[75 mm, 75 mm, 35 mm]", "trial.start.resting_on=edge", "trial.duration=3 s")
    assert abs(edge_to_corner(res.device).wheel_speeds_rad_s[0]) > 0.0       # the rounding is there
    assert res.outcome == "balanced" and m["jump_attempts"] == 1
