"""Mass properties of parts, the body and the wheel against handbook formulas.

Handbook formulas: Meriam & Kraige, Engineering Mechanics: Dynamics, Appendix D ("Properties of
homogeneous solids"); the same table appears in most dynamics texts. Part axes (sim.model.massprops):
x along the pivot axis, y across the body in the swing plane, z along the body axis.
A few shapes are also checked by numerical integration over the solid (scipy), which shares
nothing with either the handbook or the code.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import integrate

from conftest import make_scenario
from sim.model.device import Device
from sim.model.massprops import body_props, part_inertia, part_mass, part_volume, wheel_props
from sim.model.scenario import Part

RTOL = 1e-12  # closed forms evaluated in floating point: only rounding separates them


def part(**kw) -> Part:
    return Part.model_validate(kw)


# ----------------------------------------------------------------------------- each shape

def test_point_mass_has_no_own_inertia():
    # A particle has no inertia about its own centre (any dynamics text: I = sum m r^2, r = 0).
    p = part(shape="point", mass=0.2)
    assert_allclose(part_inertia(p, part_mass(p)), [0.0, 0.0, 0.0], atol=0)


def test_thin_rod():
    # Slender rod about its centre, perpendicular to its length: m L^2 / 12 (Meriam & Kraige, App. D);
    # about its own axis: 0 for a rod with no radius.
    m, L = 0.3, 0.25
    p = part(shape="rod", length=L, mass=m)
    assert_allclose(part_inertia(p, m), [m * L**2 / 12, m * L**2 / 12, 0.0], rtol=RTOL, atol=0)


def test_rod_with_radius_is_a_solid_cylinder():
    # Solid circular cylinder, axis z: Iz = m r^2 / 2, Ix = Iy = m (3 r^2 + L^2) / 12
    # (Meriam & Kraige, App. D).
    m, L, r = 0.3, 0.25, 0.01
    p = part(shape="rod", length=L, radius=r, mass=m)
    ix = m * (3 * r**2 + L**2) / 12
    assert_allclose(part_inertia(p, m), [ix, ix, m * r**2 / 2], rtol=RTOL)


def test_box():
    # Rectangular block: I about an axis through the centre = m (a^2 + b^2) / 12, a and b the sides
    # across that axis (Meriam & Kraige, App. D). length along z, width along y, thickness along x.
    m, L, w, t = 0.07, 0.22, 0.02, 0.006
    p = part(shape="box", length=L, width=w, thickness=t, mass=m)
    expected = [m * (w**2 + L**2) / 12, m * (t**2 + L**2) / 12, m * (t**2 + w**2) / 12]
    assert_allclose(part_inertia(p, m), expected, rtol=RTOL)


def test_disk_axis_along_pivot():
    # Solid disk (cylinder) with its axis along x: Ix = m r^2 / 2; diametral m (3 r^2 + h^2) / 12
    # (Meriam & Kraige, App. D). Thin disk (no thickness): diametral m r^2 / 4.
    m, r, h = 0.1, 0.05, 0.008
    thick = part(shape="disk", radius=r, thickness=h, mass=m)
    d = m * (3 * r**2 + h**2) / 12
    assert_allclose(part_inertia(thick, m), [m * r**2 / 2, d, d], rtol=RTOL)
    thin = part(shape="disk", radius=r, mass=m)
    assert_allclose(part_inertia(thin, m), [m * r**2 / 2, m * r**2 / 4, m * r**2 / 4], rtol=RTOL)


def test_ring_is_a_hollow_cylinder():
    # Hollow circular cylinder, axis x: Ix = m (ro^2 + ri^2) / 2; diametral m (3 (ro^2 + ri^2) + h^2) / 12
    # (Meriam & Kraige, App. D).
    m, ro, ri, h = 0.05, 0.07, 0.055, 0.008
    p = part(shape="ring", outer_radius=ro, inner_radius=ri, thickness=h, mass=m)
    d = m * (3 * (ro**2 + ri**2) + h**2) / 12
    assert_allclose(part_inertia(p, m), [m * (ro**2 + ri**2) / 2, d, d], rtol=RTOL)


def _numeric_inertia(density, x_lim, y_lim, z_lim, inside):
    """Ix, Iy, Iz about the origin of a solid by triple quadrature of rho r_perp^2 dV (scipy)."""
    out = []
    for perp in (lambda x, y, z: y * y + z * z, lambda x, y, z: x * x + z * z, lambda x, y, z: x * x + y * y):
        f = lambda z, y, x, perp=perp: density * perp(x, y, z) * inside(x, y, z)  # noqa: E731
        val, _ = integrate.tplquad(f, *x_lim, *y_lim, *z_lim, epsabs=1e-14, epsrel=1e-7)
        out.append(val)
    return np.array(out)


def test_box_by_numerical_integration():
    # Independent of the handbook: integrate rho (y^2 + z^2) dV etc. over the block (scipy.integrate.tplquad).
    rho, L, w, t = 1240.0, 0.04, 0.03, 0.01
    p = part(shape="box", length=L, width=w, thickness=t, material="PLA")
    numeric = _numeric_inertia(rho, (-t / 2, t / 2), (-w / 2, w / 2), (-L / 2, L / 2), lambda x, y, z: 1.0)
    assert_allclose(part_inertia(p, part_mass(p)), numeric, rtol=1e-6)


def test_ring_spin_inertia_by_numerical_integration():
    # Independent of the handbook: I = integral of rho r^2 dV over an annulus, in polar form
    # 2 pi h rho * integral_ri^ro r^3 dr (scipy.integrate.quad).
    rho, ro, ri, h = 2700.0, 0.05, 0.02, 0.006
    p = part(shape="ring", outer_radius=ro, inner_radius=ri, thickness=h, material="aluminium")
    spin, _ = integrate.quad(lambda r: 2 * math.pi * h * rho * r**3, ri, ro)
    assert_allclose(part_inertia(p, part_mass(p))[0], spin, rtol=1e-9)


# ----------------------------------------------------------------------------- masses

def test_volumes_of_each_shape():
    # Elementary solid volumes (any geometry text): cylinder pi r^2 h, block L w t, annulus pi (ro^2 - ri^2) h.
    assert_allclose(part_volume(part(shape="rod", length=0.2, radius=0.01, mass=1)), math.pi * 1e-4 * 0.2, rtol=RTOL)
    assert_allclose(part_volume(part(shape="box", length=0.2, width=0.02, thickness=0.006, mass=1)), 2.4e-5, rtol=RTOL)
    assert_allclose(part_volume(part(shape="disk", radius=0.05, thickness=0.01, mass=1)), math.pi * 2.5e-5, rtol=RTOL)
    ring = part(shape="ring", outer_radius=0.05, inner_radius=0.03, thickness=0.01, mass=1)
    assert_allclose(part_volume(ring), math.pi * (0.05**2 - 0.03**2) * 0.01, rtol=RTOL)
    assert part_volume(part(shape="point", mass=1)) is None
    assert part_volume(part(shape="disk", radius=0.05, mass=1)) is None  # no thickness: no volume


def test_mass_from_density_times_volume():
    # m = rho V; aluminium 2700 kg/m^3 (references.md, Al 6061-T6, [mem] datasheet value).
    p = part(shape="box", length="220 mm", width="20 mm", thickness="6 mm", material="aluminium")
    assert_allclose(part_mass(p), 2700.0 * 0.22 * 0.02 * 0.006, rtol=1e-12)


def test_mass_from_density_times_volume_times_infill():
    # Printed part: effective density = rho * infill (common practice, no source: infill is the
    # solid fraction of the print). PLA 1240 kg/m^3 (references.md, [mem]).
    p = part(shape="disk", radius="40 mm", thickness="5 mm", material="PLA", infill="40%")
    assert_allclose(part_mass(p), 1240.0 * 0.4 * math.pi * 0.04**2 * 0.005, rtol=1e-12)


def test_given_mass_wins_over_density_and_material_keeps_its_strength():
    # Issue 2 (the scenario contract): a given mass wins; the material still supplies its strength.
    p = part(shape="disk", radius="40 mm", thickness="5 mm", material="aluminium", mass="12 g")
    assert_allclose(part_mass(p), 0.012, rtol=1e-12)
    assert_allclose(part_inertia(p, part_mass(p))[0], 0.012 * 0.04**2 / 2, rtol=RTOL)
    assert_allclose(p.material_props.tensile_strength_pa, 310e6, rtol=0)  # references.md, Al 6061-T6 UTS [mem]


# ----------------------------------------------------------------------------- assemblies

def test_parallel_axis_rod_about_its_end():
    # A slender rod about one end: m L^2 / 3 (Meriam & Kraige, App. D) = m L^2/12 + m (L/2)^2
    # (parallel-axis theorem).
    m, L = 0.05, 0.2
    props = body_props([part(shape="rod", length=L, mass=m, at=L / 2)])
    assert_allclose(props.about_pivot_x(), m * L**2 / 3, rtol=1e-12)
    assert_allclose(props.com_m, L / 2, rtol=1e-12)


def test_body_of_several_parts_centre_of_mass_and_inertia():
    # Composite body: com = sum(m_i z_i) / sum(m_i); I_pivot = sum(I_i + m_i z_i^2) (parallel-axis
    # theorem, Meriam & Kraige ch. 6); I about the com = I_pivot - M com^2.
    parts = [part(shape="rod", length=0.2, mass=0.05, at=0.1),
             part(shape="point", mass=0.1, at=0.2),
             part(shape="disk", radius=0.012, thickness=0.01, mass=0.02, at=-0.01)]
    props = body_props(parts, extra_point_masses=[(0.03, 0.2)])
    m = [0.05, 0.1, 0.02, 0.03]
    z = [0.1, 0.2, -0.01, 0.2]
    own_x = [0.05 * 0.2**2 / 12, 0.0, 0.02 * 0.012**2 / 2, 0.0]  # the disk's axis is along x: m r^2 / 2
    M = sum(m)
    com = sum(mi * zi for mi, zi in zip(m, z)) / M
    i_pivot = sum(ix + mi * zi**2 for ix, mi, zi in zip(own_x, m, z))
    assert_allclose(props.mass_kg, M, rtol=1e-12)
    assert_allclose(props.com_m, com, rtol=1e-12)
    assert_allclose(props.about_pivot_x(), i_pivot, rtol=1e-12)
    assert_allclose(props.inertia_com[0], i_pivot - M * com**2, rtol=1e-12)
    # about the body axis z nothing shifts: only the own Iz values add (rod without radius: 0;
    # the disk's diametral m (3 r^2 + h^2) / 12).
    assert_allclose(props.inertia_com[2], 0.02 * (3 * 0.012**2 + 0.01**2) / 12, rtol=1e-12)


def test_wheel_with_evenly_spaced_masses_and_rotor():
    # Spin inertia of n point masses at radius r: n m r^2; a disk m r^2 / 2 (Meriam & Kraige);
    # a rotor's inertia adds about the same axis. Evenly spaced masses (n >= 3) give a diametral
    # inertia of n m r^2 / 2 (perpendicular-axis theorem: Ix = Iy + Iz for a planar set).
    disk = part(shape="disk", radius=0.05, mass=0.08)
    bolts = part(shape="point", mass=0.0011, at=0.062, count=6)
    props = wheel_props([disk, bolts], rotor_inertia=8e-6)
    spin = 0.08 * 0.05**2 / 2 + 6 * 0.0011 * 0.062**2 + 8e-6
    assert_allclose(props.inertia_com[0], spin, rtol=1e-12)
    assert_allclose(props.inertia_com[1] + props.inertia_com[2], spin, rtol=1e-12)
    assert_allclose(props.mass_kg, 0.08 + 6 * 0.0011, rtol=1e-12)


def test_device_lumped_parameters_from_the_test_scenario():
    # references.md, "Reaction-wheel pendulum dynamics": J includes the wheel's and motor's masses
    # at their distance but NOT the wheel's spin inertia I_w; mbar = sum m_i l_i.
    sc = make_scenario(motor={"mass": 0.03})
    d = Device.from_scenario(sc)
    L, m_rod, m_tip, m_wheel, m_motor, at = 0.2, 0.05, 0.1, 0.1, 0.03, 0.2
    J = m_rod * L**2 / 3 + (m_tip + m_wheel + m_motor) * at**2
    assert_allclose(d.J_kg_m2, J, rtol=1e-12)
    assert_allclose(d.I_w_kg_m2, m_wheel * 0.05**2 / 2, rtol=1e-12)
    assert_allclose(d.mbar_kg_m, m_rod * L / 2 + (m_tip + m_wheel + m_motor) * at, rtol=1e-12)
    assert_allclose(d.mass_kg, m_rod + m_tip + m_wheel + m_motor, rtol=1e-12)


@pytest.mark.parametrize("shape, sizes", [
    ("rod", {"length": 0.1}),
    ("point", {}),
])
def test_material_without_a_volume_needs_a_mass(shape, sizes):
    # A density alone cannot give the mass of a part with no volume (issue 2: mass follows from
    # density and volume "when not given"); the scenario loader must refuse it at load.
    with pytest.raises(ValueError, match="mass"):
        part(shape=shape, material="steel", **sizes)


# ----------------------------------------------------------------------------- hollow box (closed shell)

def _plate(m, a, b):
    """A thin plate's inertia about its centre, about an axis normal to it: m (a^2 + b^2) / 12
    (Meriam & Kraige, App. D, rectangular plate / block)."""
    return m * (a**2 + b**2) / 12


def _six_plates_inertia(L, w, t, e, rho):
    """(Ix, Iy, Iz) of a closed box of wall e built from six solid plates, each by the block formula
    about its own centre plus the parallel-axis term m d^2 (any dynamics text). The plates do not
    overlap: the two x faces are full w x L, the two y faces L x (t - 2e), the two z faces
    (w - 2e) x (t - 2e). Independent of sim.model.massprops' outer-minus-inner construction."""
    total = np.zeros(3)
    # (sizes along x, y, z of one plate; its centre offset along x, y, z)
    plates = [((e, w, L), ((t - e) / 2, 0, 0)), ((t - 2 * e, e, L), (0, (w - e) / 2, 0)),
              ((t - 2 * e, w - 2 * e, e), (0, 0, (L - e) / 2))]
    for (sx, sy, sz), (dx, dy, dz) in plates:
        m = rho * sx * sy * sz
        own = np.array([_plate(m, sy, sz), _plate(m, sx, sz), _plate(m, sx, sy)])
        shift = m * np.array([dy**2 + dz**2, dx**2 + dz**2, dx**2 + dy**2])
        total += 2 * (own + shift)
    return total


def test_hollow_box_against_six_plates():
    L, w, t, e, rho = 0.18, 0.12, 0.09, 0.004, 2700.0
    p = part(shape="hollow_box", length=L, width=w, thickness=t, wall=e, material="aluminium")
    volume = L * w * t - (L - 2 * e) * (w - 2 * e) * (t - 2 * e)
    assert_allclose(part_volume(p), volume, rtol=RTOL)
    assert_allclose(part_mass(p), rho * volume, rtol=RTOL)          # aluminium density from sim.model.materials [mem]
    assert_allclose(part_inertia(p, part_mass(p)), _six_plates_inertia(L, w, t, e, rho), rtol=1e-10)


def test_thin_walled_cube_tends_to_the_handbook_value():
    # references.md: thin-walled closed cube of side a, total mass m: I = 5 m a^2 / 18 about any
    # axis through the centre (Meriam & Kraige, plate formulas with parallel axes). A 0.15 mm wall on
    # a 150 mm cube is within ~0.3% of the thin-wall limit (the error scales with wall / side).
    a, e = 0.15, 0.00015
    p = part(shape="hollow_box", length=a, width=a, thickness=a, wall=e, mass=0.4)
    assert_allclose(part_inertia(p, 0.4), [5 * 0.4 * a**2 / 18] * 3, rtol=3e-3)
    # and it is well above the solid cube's m a^2 / 6 of the same mass (Meriam & Kraige, App. D)
    assert part_inertia(p, 0.4)[0] > 1.6 * 0.4 * a**2 / 6


def test_hollow_box_sizes_are_checked_at_load():
    with pytest.raises(ValueError, match="wall"):
        part(shape="hollow_box", length=0.1, width=0.1, thickness=0.1, mass=0.1)
    with pytest.raises(ValueError, match="twice the wall"):
        part(shape="hollow_box", length=0.1, width=0.1, thickness=0.01, wall=0.005, mass=0.1)
    with pytest.raises(ValueError, match="takes no 'wall'"):
        part(shape="box", length=0.1, width=0.1, thickness=0.1, wall=0.003, mass=0.1)
