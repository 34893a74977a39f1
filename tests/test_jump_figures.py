"""The jump-up figures (`sim.strategies.jump_figures`) against the published momentum-and-energy
relation and against independent derivations (sympy, hand algebra)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import sympy as sp
from numpy.testing import assert_allclose

from sim.model.device3d import Device3D
from sim.model.linear3d import WheelUnit
from sim.strategies.jump_figures import (edge_to_corner, face_to_edge, jump_margin, reachable_wheel_speed,
                                         wheel_reach)

# The one-dimensional jump-up prototype of Gajamohan, Merz, Thommen & D'Andrea, "The Cubli: a cube that
# can jump up and balance", IROS 2012. The parameter values are FROM MEMORY (not re-read from the paper):
# l = 0.085 m (pivot to wheel centre), l_b = 0.075 m (pivot to body centre of mass), m_b = 0.419 kg,
# m_w = 0.204 kg, Theta_b = 3.34e-3 kg m^2 (body about the pivot), Theta_w = 0.57e-3 kg m^2 (wheel),
# rising 45 degrees. The rest (wheel transverse inertia, motor, g = 9.81 m/s^2) is our own choice.
L, L_B, M_B, M_W, THETA_B, THETA_W = 0.085, 0.075, 0.419, 0.204, 3.34e-3, 0.57e-3
G = 9.81


def _unit(*, at, axis, spin, mass=M_W, transverse=0.3e-3, **motor) -> WheelUnit:
    fig = dict(k_e_v_s_rad=0.0477, k_t_n_m_a=0.0477, resistance_ohm=1.0, inductance_h=1e-4, current_limit_a=10.0,
               supply_v=24.0, brake_torque_n_m=2.0, coulomb_n_m=0.0, viscous_n_m_s=0.0)
    fig.update(motor)
    return WheelUnit(at_m=at, axis=axis, mass_kg=mass, spin_inertia_kg_m2=spin, transverse_inertia_kg_m2=transverse,
                     **fig)


def _prototype() -> Device3D:
    """The prototype as a Device3D on a hinge at its pivot: the body's centre of mass on z at l_b, its
    inertia about the pivot's x axis Theta_b (so about its own centre Theta_b - m_b l_b^2), the wheel
    at l on z spinning about x."""
    own = THETA_B - M_B * L_B ** 2
    return Device3D(mount="hinge", gravity_m_s2=G, body_mass_kg=M_B, body_com_m=(0.0, 0.0, L_B),
                    body_inertia_com_kg_m2=((own, 0, 0), (0, own, 0), (0, 0, 0.5 * own)),
                    wheels=(_unit(at=(0.0, 0.0, L), axis=(1.0, 0.0, 0.0), spin=THETA_W),),
                    pivot_coulomb_n_m=0.0, pivot_viscous_n_m_s=0.0, control_rate_hz=500.0, delay_s=0.0,
                    supply_v=24.0)


def test_needed_speed_is_the_published_relation_on_the_published_prototype():
    # Gajamohan et al. 2012 (shared/references.md "Jump-up by braking"): momentum Theta_w w = Theta_0 rate,
    # Theta_0 = Theta_b + m_w l^2 + Theta_w; energy 1/2 Theta_0 rate^2 = (m_b l_b + m_w l) g (1 - cos 45 deg).
    # Solved here with sympy from the two balances, not from our formula.
    w, rate = sp.symbols("w rate", positive=True)
    th0 = sp.Rational(334, 100000) + sp.Rational(204, 1000) * sp.Rational(85, 1000) ** 2 + sp.Rational(57, 100000)
    mgl = (sp.Rational(419, 1000) * sp.Rational(75, 1000) + sp.Rational(204, 1000) * sp.Rational(85, 1000)) * sp.Rational(981, 100)
    sol = sp.solve([sp.Eq(sp.Rational(57, 100000) * w, th0 * rate),
                    sp.Eq(sp.Rational(1, 2) * th0 * rate ** 2, mgl * (1 - sp.cos(sp.pi / 4)))], [w, rate], dict=True)
    expected = float(sol[0][w])
    fig = face_to_edge(_prototype(), rest_tilt_rad=math.radians(45))
    assert_allclose(fig.needed_wheel_speed_rad_s, expected, rtol=1e-9)
    assert_allclose(fig.inertia_kg_m2, float(th0), rtol=1e-12)


def test_the_rest_tilt_sign_only_picks_the_sense():
    a = face_to_edge(_prototype(), rest_tilt_rad=math.radians(40))
    b = face_to_edge(_prototype(), rest_tilt_rad=-math.radians(40))
    assert_allclose(a.wheel_speeds_rad_s[0], -b.wheel_speeds_rad_s[0], rtol=1e-15)
    # a tilt of +40 deg about x comes back with a negative rate about x: the wheel spins that way too
    # (the brake hands its momentum to the body in the wheel's own sense)
    assert a.wheel_speeds_rad_s[0] < 0 and a.axis[0] < 0


def _cube(wheel_axes) -> Device3D:
    """A 15 cm cube of our own invention with its corner at the origin and edges along x, y, z: a
    0.8 kg shell (inertia about its centre 5 m a^2 / 18 about every axis, Meriam & Kraige plate
    formulas; references.md) and wheels of 0.1 kg, 0.6e-3 kg m^2, 2 cm inside the faces away from the corner."""
    a, m = 0.15, 0.8
    ic = 5.0 * m * a ** 2 / 18.0
    units = []
    for ax in wheel_axes:
        at = tuple(0.5 * a + (0.5 * a - 0.02) * v for v in ax)
        units.append(_unit(at=at, axis=ax, spin=0.6e-3, mass=0.1, transverse=0.3e-3))
    return Device3D(mount="ball", gravity_m_s2=G, body_mass_kg=m, body_com_m=(a / 2, a / 2, a / 2),
                    body_inertia_com_kg_m2=((ic, 0, 0), (0, ic, 0), (0, 0, ic)), wheels=tuple(units),
                    pivot_coulomb_n_m=0.0, pivot_viscous_n_m_s=0.0, control_rate_hz=500.0, delay_s=0.0, supply_v=24.0)


def test_edge_to_corner_rise_and_axis_for_a_cube():
    # Geometry by hand: a cube of side a balanced on an edge has its centre a/sqrt(2) above the edge;
    # on a corner a sqrt(3)/2 above it; the turn between is atan(1/sqrt(2)) = 35.26 deg, about the
    # horizontal axis at right angles to the edge, here (0, -1, 1)/sqrt(2) for the edge along x.
    dev = _cube([(1.0, 0, 0), (0, 1.0, 0), (0, 0, 1.0)])
    fig = edge_to_corner(dev)
    c = np.asarray(dev.com_m)
    side = 2.0 * c[0]          # the whole device's centre is still on the cube's diagonal (symmetric wheels)
    assert_allclose(c, [side / 2] * 3, rtol=1e-12)
    assert_allclose(fig.rise_m, side * (math.sqrt(3) / 2 - 1 / math.sqrt(2)), rtol=1e-12)
    assert_allclose(fig.rise_angle_rad, math.atan(1 / math.sqrt(2)), rtol=1e-12)
    assert_allclose(np.abs(fig.axis), [0, 1 / math.sqrt(2), 1 / math.sqrt(2)], atol=1e-15)
    # the axis turns the centre of mass towards the vertical u = (0, 1, 1)/sqrt(2): n x c has a -x part
    assert np.cross(fig.axis, c)[0] < 0
    # momentum along n: the y and z wheels share it equally and the x wheel takes none
    w = fig.wheel_speeds_rad_s
    assert w[0] == 0.0 and abs(w[1]) == pytest.approx(abs(w[2]), rel=1e-12)
    # the momentum balance by hand: Theta_0 rate = I (c_y w_y + c_z w_z), c = a . n
    theta0 = float(np.asarray(fig.axis) @ dev.inertia_about_pivot_kg_m2() @ np.asarray(fig.axis))
    lhs = theta0 * math.sqrt(2 * dev.mass_kg * G * fig.rise_m / theta0)
    rhs = 0.6e-3 * (fig.axis[1] * w[1] + fig.axis[2] * w[2])
    assert_allclose(rhs, lhs, rtol=1e-12)


def test_a_wheel_at_an_angle_to_the_edge_needs_more_speed_by_its_cosine():
    # Only the component of the wheel's momentum along the edge passes to the body about it: a wheel
    # axis at 30 deg to the edge needs 1/cos(30 deg) the speed (the momentum balance, hand algebra).
    # The two devices are built alike (same masses and inertia about x) so that only the axis differs.
    straight = face_to_edge(_cube([(1.0, 0, 0)]), rest_tilt_rad=math.radians(45))
    tilted_dev = _cube([(1.0, 0, 0)])
    u = tilted_dev.wheels[0]
    axis = (math.cos(math.radians(30)), math.sin(math.radians(30)), 0.0)
    # a wheel with equal spin and transverse inertia: its tensor is isotropic, so turning it leaves
    # J_lock unchanged
    iso = dict(k_e_v_s_rad=u.k_e_v_s_rad, k_t_n_m_a=u.k_t_n_m_a, resistance_ohm=1.0, inductance_h=1e-4,
               current_limit_a=10.0, supply_v=24.0, brake_torque_n_m=2.0, coulomb_n_m=0.0, viscous_n_m_s=0.0)
    a = WheelUnit(at_m=u.at_m, axis=(1.0, 0, 0), mass_kg=0.1, spin_inertia_kg_m2=0.6e-3, transverse_inertia_kg_m2=0.6e-3, **iso)
    b = WheelUnit(at_m=u.at_m, axis=axis, mass_kg=0.1, spin_inertia_kg_m2=0.6e-3, transverse_inertia_kg_m2=0.6e-3, **iso)
    import dataclasses
    fa = face_to_edge(dataclasses.replace(tilted_dev, wheels=(a,)), rest_tilt_rad=math.radians(45))
    fb = face_to_edge(dataclasses.replace(tilted_dev, wheels=(b,)), rest_tilt_rad=math.radians(45))
    assert_allclose(fb.needed_wheel_speed_rad_s, fa.needed_wheel_speed_rad_s / math.cos(math.radians(30)), rtol=1e-12)
    assert straight.needed_wheel_speed_rad_s > 0


def test_reachable_speed_and_margin():
    # references.md "Motor" check value: Kv 100 rpm/V, 12 V, R 1 ohm -> k_e 0.095493, no-load 125.66 rad/s.
    k_e = 60.0 / (2 * math.pi * 100.0)
    assert_allclose(reachable_wheel_speed(k_t_n_m_a=k_e, k_e_v_s_rad=k_e, resistance_ohm=1.0, current_limit_a=5.0,
                                          supply_v=12.0), 125.66, rtol=1e-4)
    # with bearing friction: the speed where k_t (V - k_e w)/R = T_c + b w (solved here with sympy)
    w = sp.symbols("w")
    tc, b = 0.01, 1e-4
    expect = float(sp.solve(sp.Eq(k_e * (12 - k_e * w) / 1.0, tc + b * w), w)[0])
    got = reachable_wheel_speed(k_t_n_m_a=k_e, k_e_v_s_rad=k_e, resistance_ohm=1.0, current_limit_a=5.0, supply_v=12.0,
                                coulomb_n_m=tc, viscous_n_m_s=b)
    assert_allclose(got, expect, rtol=1e-12)
    # a current limit too weak for the bearing's Coulomb friction: the wheel never turns
    assert reachable_wheel_speed(k_t_n_m_a=k_e, k_e_v_s_rad=k_e, resistance_ohm=1.0, current_limit_a=0.1,
                                 supply_v=12.0, coulomb_n_m=0.01) == 0.0
    assert_allclose(jump_margin([100.0, -50.0, 0.0], [130.0, 60.0, 1.0]), 0.2, rtol=1e-12)
    assert jump_margin(200.0, 125.66) < 0
    assert_allclose(wheel_reach(_prototype().wheels[0]), 24.0 / 0.0477, rtol=1e-12)
