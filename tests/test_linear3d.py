"""The multi-wheel upright linearisation (`sim.model.linear3d`) against independent derivations.

References: sympy.physics.mechanics (Kane's method) for the three-wheel corner cube; today's
one-wheel `Device.linear_model` (itself the published model of Spong, Corke & Lozano, Automatica
37(11), 2001, pinned in tests/test_lqr.py) for the planar case; statics for a tilted wheel axis.
All device numbers are invented for these tests.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.spatial.transform import Rotation

from sim.model.device import Device
from sim.model.linear3d import LinearSpec, WheelUnit, linearise, spec_from_device, upright_rotation
from sim.model.scenario_yaml import default_scenario_path, load_scenario

CUBE_SIDE_M = 0.15


def wheel(at, axis, **kw) -> WheelUnit:
    figures = dict(mass_kg=0.12, spin_inertia_kg_m2=1.5e-4, transverse_inertia_kg_m2=8e-5, k_e_v_s_rad=0.02,
                   k_t_n_m_a=0.021, resistance_ohm=1.5, inductance_h=1e-4, current_limit_a=5.0, supply_v=12.0,
                   brake_torque_n_m=None, coulomb_n_m=0.0, viscous_n_m_s=2e-6)
    figures.update(kw)
    return WheelUnit(at_m=tuple(at), axis=tuple(axis), **figures)


def corner_cube(**kw) -> LinearSpec:
    """A 15 cm cube on one corner (the pivot at the body origin, edges along body x, y, z), its
    centre of mass on the body diagonal, three wheels on the three body axes; the body's inertia
    tensor has products of inertia on purpose (our own numbers)."""
    a = CUBE_SIDE_M
    wheels = (wheel((0.03, 0.09, 0.09), (1, 0, 0)), wheel((0.09, 0.03, 0.09), (0, 1, 0)),
              wheel((0.09, 0.09, 0.03), (0, 0, 1)))
    figures = dict(mount="ball", gravity_m_s2=9.81, body_mass_kg=0.6, body_com_m=(a / 2, a / 2, a / 2),
                   body_inertia_com_kg_m2=((3.2e-3, 1e-4, -5e-5), (1e-4, 2.9e-3, 8e-5), (-5e-5, 8e-5, 3.0e-3)),
                   wheels=wheels, pivot_coulomb_n_m=0.0, pivot_viscous_n_m_s=1e-4, control_rate_hz=500.0, delay_s=0.0)
    figures.update(kw)
    return LinearSpec(**figures)


def kane_reference(spec: LinearSpec, *, current: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """(A, B) of a ball-mounted body with wheels, by Kane's method in sympy.physics.mechanics.

    Independent of linear3d: the attitude is Rz(heading) Ry(tilt_y) Rx(tilt_x) (sympy's body-fixed
    'zyx' orientation), the upright rotation comes from scipy's Rotation.align_vectors (smallest
    rotation taking the centre of mass to +z), the equations are sympy's (Kane's method, with the
    body's angular velocity components as generalised speeds and each wheel's angle relative to
    the body), and the linearisation is the Jacobian of sympy's forcing vector at rest upright.
    Loads: gravity on each centre of mass, the motor torque k_t (V - k_e w)/R (with `current`, a
    torque-mode drive: k_t i, the inputs being currents) and the bearing's viscous torque between
    each wheel and the body, the pivot's viscous torque on the body.
    Returns the full model on [tilt_x, tilt_y, heading, wheel angles, rates, wheel speeds].
    """
    from sympy.physics import mechanics as me

    n_w = len(spec.wheels)
    q = me.dynamicsymbols(f"tx ty h {' '.join(f'p{i}' for i in range(n_w))}")
    u = me.dynamicsymbols(f"wx wy wz {' '.join(f's{i}' for i in range(n_w))}")
    V = [me.dynamicsymbols(f"V{i}") for i in range(n_w)]
    g = spec.gravity_m_s2
    N, U = me.ReferenceFrame("N"), me.ReferenceFrame("U")
    U.orient_body_fixed(N, (q[2], q[1], q[0]), "zyx")
    w_kinematic = U.ang_vel_in(N)
    U.set_ang_vel(N, u[0] * U.x + u[1] * U.y + u[2] * U.z)

    masses = spec.body_mass_kg + sum(w.mass_kg for w in spec.wheels)
    com = (spec.body_mass_kg * np.array(spec.body_com_m) + sum(w.mass_kg * np.array(w.at_m) for w in spec.wheels)) / masses
    R0 = Rotation.align_vectors([[0.0, 0.0, 1.0]], [com / np.linalg.norm(com)])[0].as_matrix()
    # the body's axes as vectors of the upright-relative frame U (column k of R0 is body axis k)
    b = [sum((float(R0[r, k]) * (U.x, U.y, U.z)[r] for r in range(3)), me.Vector(0)) for k in range(3)]

    def vec(v):
        return sum((float(v[k]) * b[k] for k in range(3)), me.Vector(0))

    O = me.Point("O")
    O.set_vel(N, 0)
    Bc = O.locatenew("Bc", vec(spec.body_com_m))
    Bc.v2pt_theory(O, N, U)
    Ib = np.array(spec.body_inertia_com_kg_m2)
    inertia = sum((float(Ib[j, k]) * (b[j] | b[k]) for j in range(3) for k in range(3)), me.Dyadic(0))
    bodies = [me.RigidBody("body", Bc, U, spec.body_mass_kg, (inertia, Bc))]
    loads = [(Bc, -spec.body_mass_kg * g * N.z), (U, -spec.pivot_viscous_n_m_s * U.ang_vel_in(N))]
    unit = (U.x | U.x) + (U.y | U.y) + (U.z | U.z)
    for i, w in enumerate(spec.wheels):
        axis = vec(w.axis)
        W = me.ReferenceFrame(f"W{i}")
        W.orient_axis(U, axis, q[3 + i])
        centre = O.locatenew(f"Wc{i}", vec(w.at_m))
        centre.v2pt_theory(O, N, U)
        Iw = w.transverse_inertia_kg_m2 * unit + (w.spin_inertia_kg_m2 - w.transverse_inertia_kg_m2) * (axis | axis)
        bodies.append(me.RigidBody(f"wheel{i}", centre, W, w.mass_kg, (Iw, centre)))
        motor = (w.k_t_n_m_a * V[i] if current
                 else w.k_t_n_m_a * (V[i] - w.k_e_v_s_rad * u[3 + i]) / w.resistance_ohm)
        torque = motor - w.viscous_n_m_s * u[3 + i]
        loads += [(centre, -w.mass_kg * g * N.z), (W, torque * axis), (U, -torque * axis)]
    kd = [w_kinematic.dot(U.x) - u[0], w_kinematic.dot(U.y) - u[1], w_kinematic.dot(U.z) - u[2]]
    kd += [q[i].diff() - u[i] for i in range(3, 3 + n_w)]
    km = me.KanesMethod(N, q_ind=q, u_ind=u, kd_eqs=kd)
    km.kanes_equations(bodies, loads)
    f = km.forcing

    def zero(symbols):
        return {s: 0 for s in symbols}

    M0 = np.array(km.mass_matrix.xreplace({**zero(q), **zero(u)}), dtype=float)
    # derivatives at rest upright; each taken after the other variables are set to zero
    Jq = np.array(f.xreplace({**zero(u), **zero(V)}).jacobian(q).xreplace(zero(q)), dtype=float)
    Ju = np.array(f.xreplace({**zero(q), **zero(V)}).jacobian(u).xreplace(zero(u)), dtype=float)
    Jv = np.array(f.xreplace({**zero(q), **zero(u)}).jacobian(V), dtype=float)
    n = 3 + n_w
    A = np.zeros((2 * n, 2 * n))
    A[:n, n:] = np.eye(n)          # at rest upright the attitude rates equal the body rates (first order)
    A[n:, :n], A[n:, n:] = np.linalg.solve(M0, Jq), np.linalg.solve(M0, Ju)
    B = np.zeros((2 * n, n_w))
    B[n:] = np.linalg.solve(M0, Jv)
    return A, B


def test_corner_cube_matches_kanes_method_in_sympy():
    spec = corner_cube()
    model = linearise(spec)
    assert model.state_names == ("tilt_x", "tilt_y", "rate_x", "rate_y", "rate_z",
                                 "wheel1_speed", "wheel2_speed", "wheel3_speed")
    assert model.input_names == ("wheel1_voltage", "wheel2_voltage", "wheel3_voltage")
    A_full, B_full = kane_reference(spec)
    # the heading (column 2) and the wheel angles (3..5) are neutral: nothing depends on them
    assert_allclose(A_full[:, 2:6], 0.0, atol=1e-12)
    keep = [0, 1, 6, 7, 8, 9, 10, 11]
    A_ref, B_ref = A_full[np.ix_(keep, keep)], B_full[keep]
    # sympy.physics.mechanics, Kane's method: A and B to 1e-6 of their largest entries
    assert_allclose(model.A, A_ref, rtol=1e-6, atol=1e-6 * np.abs(A_ref).max())
    assert_allclose(model.B, B_ref, rtol=1e-6, atol=1e-6 * np.abs(B_ref).max())
    # and the device really is unstable upright with two tilt modes (gravity), as a check on the case
    assert np.sum(np.real(np.linalg.eigvals(model.A)) > 1.0) == 2


def test_one_wheel_hinge_equals_todays_device_model():
    device = Device.from_scenario(load_scenario(default_scenario_path()))
    model = linearise(spec_from_device(device))
    A, B = device.linear_model()
    assert model.state_names == ("angle", "body_rate", "wheel1_speed")
    # Device.linear_model (references.md "Linear model", with friction) to 1e-12
    assert_allclose(model.A, A, rtol=1e-12, atol=1e-12 * np.abs(A).max())
    assert_allclose(model.B, B, rtol=1e-12, atol=1e-12 * np.abs(B).max())


def _hinge(axis_deg: float, *, transverse: float) -> LinearSpec:
    tilt = math.radians(axis_deg)
    unit = wheel((0.0, 0.0, 0.2), (math.cos(tilt), math.sin(tilt), 0.0), mass_kg=0.1, spin_inertia_kg_m2=1.25e-4,
                 transverse_inertia_kg_m2=transverse, viscous_n_m_s=0.0)
    return LinearSpec(mount="hinge", gravity_m_s2=9.81, body_mass_kg=0.15, body_com_m=(0.0, 0.0, 0.16),
                      body_inertia_com_kg_m2=((4e-4, 0, 0), (0, 4e-4, 0), (0, 0, 1e-5)), wheels=(unit,),
                      pivot_coulomb_n_m=0.0, pivot_viscous_n_m_s=0.0, control_rate_hz=500.0, delay_s=0.0)


@pytest.mark.parametrize("transverse", [0.0, 6.5e-5])
def test_tilted_wheel_axis_acts_through_its_hinge_component(transverse):
    straight, tilted = linearise(_hinge(0.0, transverse=transverse)), linearise(_hinge(20.0, transverse=transverse))
    cos20 = math.cos(math.radians(20.0))
    # statics: of the motor's torque on the body only the component along the hinge, cos(20 deg) of it,
    # turns the body; the rest goes into the hinge bearing. The body's own inertia about the hinge
    # (wheel spin free on its bearing) is J = body + wheel mass about the pivot + I_t sin^2(20 deg)
    # (the wheel's transverse inertia about the hinge; common practice, no source).
    c = 0.021 / 1.5
    J0 = 4e-4 + 0.15 * 0.16**2 + 0.1 * 0.2**2
    J20 = J0 + transverse * math.sin(math.radians(20.0)) ** 2
    assert_allclose(straight.B[1, 0], -c / J0, rtol=1e-12)
    assert_allclose(tilted.B[1, 0], -cos20 * c / J20, rtol=1e-12)
    if transverse == 0.0:
        assert_allclose(tilted.B[1, 0] / straight.B[1, 0], cos20, rtol=1e-12)
    # gravity does not care about the wheel's axis
    assert_allclose(tilted.A[1, 0] * J20, straight.A[1, 0] * J0, rtol=1e-12)


def test_no_vertical_wheel_leaves_the_heading_rate_out():
    a = CUBE_SIDE_M
    wheels = (wheel((0.0, 0.0, 0.1), (1, 0, 0)), wheel((0.0, 0.0, 0.1), (0, 1, 0)))
    spec = corner_cube(body_com_m=(0.0, 0.0, a / 2), wheels=wheels,
                       body_inertia_com_kg_m2=((3e-3, 0, 0), (0, 3e-3, 0), (0, 0, 2e-3)))
    model = linearise(spec)
    assert model.state_names == ("tilt_x", "tilt_y", "rate_x", "rate_y", "wheel1_speed", "wheel2_speed")
    assert_allclose(upright_rotation(spec), np.eye(3), atol=0)
    # symmetric case: tilt_x is held by wheel 1 alone, tilt_y by wheel 2 alone (decoupled axes)
    assert model.B[2, 1] == 0.0 and model.B[3, 0] == 0.0 and model.B[2, 0] < 0 < model.B[4, 0]


def test_upright_rotation_takes_the_centre_of_mass_to_vertical():
    spec = corner_cube()
    R0 = upright_rotation(spec)
    com = (0.6 * np.full(3, CUBE_SIDE_M / 2) + 0.12 * np.array([0.21, 0.21, 0.21])) / 0.96
    assert_allclose(R0 @ com, [0.0, 0.0, np.linalg.norm(com)], atol=1e-15)
    assert_allclose(R0 @ R0.T, np.eye(3), atol=1e-15)
    # smallest rotation: about a horizontal axis (no turn about the COM direction), angle acos(1/sqrt 3)
    assert_allclose(Rotation.from_matrix(R0).magnitude(), math.acos(1 / math.sqrt(3)), rtol=1e-12)


def test_bad_specs_are_refused():
    with pytest.raises(ValueError, match="unit vector"):
        wheel((0, 0, 0.1), (1, 1, 0))
    with pytest.raises(ValueError, match="mount"):
        corner_cube(mount="gimbal")
    with pytest.raises(ValueError, match="3x3"):
        corner_cube(body_inertia_com_kg_m2=((1, 0), (0, 1)))


def test_a_spec_from_a_mapping_with_wheels_of_another_class_gives_the_same_model():
    """A device module may define its own wheel record with the same fields and hand the fields over
    as a mapping (the 3D device's `linear_spec()` may): `as_linear_spec` takes them field by field."""
    from dataclasses import asdict, make_dataclass

    from sim.model.linear3d import SPEC_FIELDS, WHEEL_FIELDS, as_linear_spec

    spec = corner_cube()
    OtherWheel = make_dataclass("OtherWheel", WHEEL_FIELDS, frozen=True)
    fields = {k: getattr(spec, k) for k in SPEC_FIELDS}
    fields["wheels"] = tuple(OtherWheel(**asdict(w)) for w in spec.wheels)
    again = as_linear_spec(fields)
    assert again == spec and as_linear_spec(spec) is spec
    assert_allclose(again.linear_model().A, linearise(spec).A, rtol=0, atol=0)
    del fields["delay_s"]
    with pytest.raises(ValueError, match="delay_s"):
        as_linear_spec(fields)
