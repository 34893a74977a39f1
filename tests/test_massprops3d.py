"""3D mass properties (`sim.model.massprops3d`) and the 3D device (`sim.model.device3d`) against hand formulas.

Sources: rotation of axes I' = R I R^T and the parallel-axis theorem in tensor form
I_O = I_C + m (|r|^2 E - r r^T) (Meriam & Kraige, Engineering Mechanics: Dynamics, Appendix B,
products of inertia; Goldstein, Classical Mechanics, ch. 5; the component forms below are written
out by hand); solid box m (b^2 + c^2) / 12 (Meriam & Kraige, Table D/4).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.testing import assert_allclose

from conftest import make_scenario, make_scenario3d
from sim.core.frames import matrix_to_quat, quat_to_matrix, rotation_about_x_y, smallest_rotation_to_z, tilt_angles
from sim.model.device import Device
from sim.model.device3d import Device3D
from sim.model.massprops3d import combine, part_items, rotation_matrix


def _box(**extra):
    # thickness along x, width along y, length along z (sim.model.massprops's part axes)
    return make_scenario(body={"parts": [{"shape": "box", "length": 0.12, "width": 0.08, "thickness": 0.05,
                                          "mass": 0.6, **extra}]}).body.parts[0]


def _box_diag(m=0.6, t=0.05, w=0.08, length=0.12):
    return np.array([m * (length**2 + w**2) / 12, m * (length**2 + t**2) / 12, m * (w**2 + t**2) / 12])


def test_rotation_about_x_mixes_y_and_z_as_the_hand_formula():
    a = math.radians(30)
    (_, _, inertia), = part_items(_box(rotation=a))
    ix, iy, iz = _box_diag()
    c, s = math.cos(a), math.sin(a)
    # rotation of axes by hand: I'_yy = Iy c^2 + Iz s^2, I'_zz = Iy s^2 + Iz c^2, I'_yz = (Iy - Iz) c s
    expected = np.array([[ix, 0, 0], [0, iy * c * c + iz * s * s, (iy - iz) * c * s],
                         [0, (iy - iz) * c * s, iy * s * s + iz * c * c]])
    assert_allclose(inertia, expected, rtol=1e-12, atol=1e-15)


def test_quarter_turn_about_z_swaps_x_and_y():
    (_, _, inertia), = part_items(_box(rotation=[0, 0, "90 deg"]))
    ix, iy, iz = _box_diag()
    assert_allclose(inertia, np.diag([iy, ix, iz]), atol=1e-15)


def test_rotation_order_is_x_then_y_then_z():
    a, b, c = 0.3, -0.4, 0.5
    rot = rotation_matrix((a, b, c))
    # applied in order about fixed axes: v' = Rz (Ry (Rx v)); check on a vector by hand-built matrices
    rx = np.array([[1, 0, 0], [0, math.cos(a), -math.sin(a)], [0, math.sin(a), math.cos(a)]])
    ry = np.array([[math.cos(b), 0, math.sin(b)], [0, 1, 0], [-math.sin(b), 0, math.cos(b)]])
    rz = np.array([[math.cos(c), -math.sin(c), 0], [math.sin(c), math.cos(c), 0], [0, 0, 1]])
    v = np.array([0.2, -0.7, 1.1])
    assert_allclose(rot @ v, rz @ (ry @ (rx @ v)), rtol=1e-14)


def test_offset_point_masses_by_hand():
    # two point masses; about their common centre of mass and about the pivot, written out by hand
    m1, r1, m2, r2 = 0.3, np.array([0.02, -0.05, 0.1]), 0.1, np.array([-0.04, 0.03, 0.02])
    props = combine([(m1, r1, np.zeros((3, 3))), (m2, r2, np.zeros((3, 3)))])
    com = (m1 * r1 + m2 * r2) / (m1 + m2)
    assert_allclose(props.com_m, com, rtol=1e-14)

    def point(m, r):  # I = m [[y^2+z^2, -xy, -xz], [-xy, x^2+z^2, -yz], [-xz, -yz, x^2+y^2]]
        x, y, z = r
        return m * np.array([[y * y + z * z, -x * y, -x * z], [-x * y, x * x + z * z, -y * z],
                             [-x * z, -y * z, x * x + y * y]])
    assert_allclose(props.about_pivot(), point(m1, r1) + point(m2, r2), rtol=1e-12, atol=1e-16)
    assert_allclose(props.inertia_com_kg_m2, point(m1, r1 - com) + point(m2, r2 - com), rtol=1e-12, atol=1e-16)


def test_one_wheel_written_as_wheels_matches_the_planar_device():
    # the same device given the planar way and the 3D way: the same mass, first moment, inertia
    planar = make_scenario()
    wheel = dict(planar.model_dump()["wheel"])
    sc3 = make_scenario3d([{"at": [0, 0, 0.2], "parts": [{"shape": "disk", "radius": 0.05, "thickness": 0.005,
                                                          "mass": 0.1}]}])
    assert wheel["at"] == 0.2 and not sc3.is_planar
    d2, d3 = Device.from_scenario(planar), Device3D.from_scenario(sc3)
    assert_allclose(d3.body_mass_kg, d2.body.mass_kg, rtol=1e-14)
    assert_allclose(d3.body_com_m[2], d2.body.com_m, rtol=1e-14)
    assert_allclose(d3.inertia_about_pivot_kg_m2(with_spin=False)[0, 0], d2.J_kg_m2, rtol=1e-12)
    assert_allclose(d3.wheels[0].spin_inertia_kg_m2, d2.I_w_kg_m2, rtol=1e-14)
    assert_allclose(d3.gravity_torque_coeff_n_m, d2.gravity_torque_coeff_n_m, rtol=1e-12)
    spec = d3.linear_spec()
    assert spec.mount == "hinge" and len(spec.wheels) == 1 and tuple(spec.wheels[0].axis) == (1.0, 0.0, 0.0)


def test_frames_round_trip_and_upright():
    rot = rotation_matrix((0.3, -0.2, 1.1))
    q = matrix_to_quat(tuple(map(tuple, rot)))
    assert_allclose(np.array(quat_to_matrix(q)), rot, atol=1e-14)
    assert_allclose(tilt_angles(tuple(map(tuple, rot))), (0.3, -0.2, 1.1), atol=1e-14)
    # the smallest rotation taking a direction to +z: maps it there, about an axis normal to both
    v = (0.1, -0.2, 0.3)
    r0 = np.array(smallest_rotation_to_z(v))
    assert_allclose(r0 @ (np.array(v) / np.linalg.norm(v)), [0, 0, 1], atol=1e-15)
    assert_allclose(r0 @ np.array([0.2, 0.1, 0.0]), [0.2, 0.1, 0.0], atol=1e-15)   # the axis v x z stays put
    assert_allclose(np.array(rotation_about_x_y(0.2, 0.3)), rotation_matrix((0.2, 0.3, 0.0)), atol=1e-15)


def test_cube_on_a_corner_is_upright_along_its_diagonal():
    sc = make_scenario3d(
        [{"at": [0.075, 0.075, 0.075], "axis": axis,
          "parts": [{"shape": "disk", "radius": 0.05, "thickness": 0.005, "mass": 0.1}]}
         for axis in ([1, 0, 0], [0, 1, 0], [0, 0, 1])],
        body={"mount": "ball", "parts": [{"shape": "hollow_box", "length": 0.15, "width": 0.15,
                                                         "thickness": 0.15, "wall": 0.003, "mass": 1.0,
                                                         "at": [0.075, 0.075, 0.075]}]},
        trial={"duration": 0.1, "start": {"angle": 0.0, "tilt": [0.0, 0.0]}})
    dev = Device3D.from_scenario(sc)
    r0 = np.array(dev.upright())
    assert_allclose(r0 @ (np.ones(3) / math.sqrt(3)), [0, 0, 1], atol=1e-15)
    # m g d with d the half diagonal 0.075 sqrt(3) m (statics)
    assert_allclose(dev.gravity_torque_coeff_n_m, 1.3 * 9.81 * 0.075 * math.sqrt(3), rtol=1e-12)
