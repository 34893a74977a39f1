"""Burst stress of spinning wheel parts against handbook formulas and check values."""

import math

import numpy as np
import pytest

from sim.model.device import Device
from sim.model.scenario_yaml import load_scenario
from sim.studies.stress import (bored_disk_stress_pa, radial_bar_stress_pa, solid_disk_stress_pa, thin_ring_stress_pa,
                                wheel_burst_check)

RHO_AL, NU_AL = 2700.0, 0.33          # Al 6061-T6, references.md [mem, datasheet ranges]
W_10K_RPM = 10_000 * 2 * math.pi / 60


def test_solid_disk_check_value():
    # references.md [calc]: aluminium disk R 50 mm at 10,000 rpm, solid: 3.08 MPa
    # (Timoshenko & Goodier, Theory of Elasticity, rotating disk). Value given to 3 figures.
    np.testing.assert_allclose(solid_disk_stress_pa(RHO_AL, W_10K_RPM, 0.050, NU_AL), 3.08e6, rtol=2e-3)


def test_bored_disk_check_value():
    # references.md [calc]: same disk with a 5 mm bore (read as diameter): 6.17 MPa
    # (Timoshenko & Goodier; Shigley, rotating disks). Value given to 3 figures.
    np.testing.assert_allclose(bored_disk_stress_pa(RHO_AL, W_10K_RPM, 0.050, 0.0025, NU_AL), 6.17e6, rtol=2e-3)


def test_thin_ring_check_value():
    # references.md [calc]: thin ring r 50 mm at 10,000 rpm: 7.40 MPa (sigma = rho v^2, Shigley).
    np.testing.assert_allclose(thin_ring_stress_pa(RHO_AL, W_10K_RPM, 0.050), 7.40e6, rtol=2e-3)


def test_tiny_hole_doubles_and_thin_bore_tends_to_ring():
    # references.md (Timoshenko & Goodier): even a tiny hole doubles the solid-disk value; a bore
    # close to the rim tends to the thin-ring value rho w^2 r^2.
    solid = solid_disk_stress_pa(RHO_AL, 500.0, 0.04, NU_AL)
    np.testing.assert_allclose(bored_disk_stress_pa(RHO_AL, 500.0, 0.04, 1e-7, NU_AL), 2 * solid, rtol=1e-6)
    np.testing.assert_allclose(bored_disk_stress_pa(RHO_AL, 500.0, 0.04, 0.04 * (1 - 1e-6), NU_AL),
                               thin_ring_stress_pa(RHO_AL, 500.0, 0.04), rtol=1e-5)


def test_radial_bar_against_integrated_load():
    # Tension at the root of a radial bar = integral of rho w^2 r dr from a to b (free body of the
    # bar outboard of the root; statics, any mechanics text). Checked by numerical quadrature.
    from scipy.integrate import quad
    a, b, w = 0.01, 0.06, 300.0
    ref, _ = quad(lambda r: RHO_AL * w**2 * r, a, b)
    np.testing.assert_allclose(radial_bar_stress_pa(RHO_AL, w, a, b), ref, rtol=1e-9)


def _wheel_scenario(parts, supply="12 V"):
    return load_scenario(data={
        "body": {"parts": [{"shape": "rod", "length": "200 mm", "mass": "50 g", "at": "100 mm"}]},
        "wheel": {"at": "200 mm", "parts": parts},
        "motor": {"speed_constant": "300 rpm/V", "resistance": "2 ohm"},
        "drive": {"supply": supply}, "strategy": {"kind": "lqr"}})


PLA_RIM = [{"name": "rim", "shape": "ring", "outer_radius": "60 mm", "inner_radius": "40 mm",
            "thickness": "6 mm", "material": "PLA"}]


def test_printed_ring_uses_across_layer_strength_at_runaway_speed():
    sc = _wheel_scenario(PLA_RIM)
    check = wheel_burst_check(sc, Device.from_scenario(sc))
    # Runaway speed = no-load speed at full supply = V * Kv (references.md, "Motor").
    w = 12 * 300 * 2 * math.pi / 60
    np.testing.assert_allclose(check["runaway_speed_rad_s"], w, rtol=1e-12)
    # Rotating disk with a central bore, peak hoop stress at the bore (Timoshenko & Goodier, Theory
    # of Elasticity, rotating disks): (3 + nu)/4 rho w^2 (b^2 + (1 - nu)/(3 + nu) a^2), written out
    # here; PLA density 1240 kg/m^3 and nu 0.36 as in sim.model.materials [mem]
    rho, nu, a, b = 1240.0, 0.36, 0.040, 0.060
    expect = (3 + nu) / 4 * rho * w**2 * (b**2 + (1 - nu) / (3 + nu) * a**2)
    row = check["parts"][0]
    np.testing.assert_allclose(row["stress_pa"], expect, rtol=1e-9)
    assert row["strength_pa"] == 35e6 and "across-layer" in row["strength_basis"]   # PLA across layers [mem]
    np.testing.assert_allclose(check["safety_factor"], 35e6 / expect, rtol=1e-9)
    # Stress grows with w^2 (references.md): doubling the supply quarters the safety factor.
    sc2 = _wheel_scenario(PLA_RIM, supply="24 V")
    np.testing.assert_allclose(wheel_burst_check(sc2, Device.from_scenario(sc2))["safety_factor"],
                               check["safety_factor"] / 4, rtol=1e-9)


def test_unknown_strength_is_reported_not_guessed():
    sc = _wheel_scenario([{"name": "mystery disk", "shape": "disk", "radius": "50 mm", "mass": "40 g"},
                          {"shape": "point", "mass": "2 g", "at": "45 mm", "count": 4}])
    check = wheel_burst_check(sc, Device.from_scenario(sc))
    assert check["safety_factor"] is None
    assert check["unknown_parts"] == ["mystery disk"]
    assert "strength unknown" in check["parts"][0]["note"]
    assert check["parts"][1]["safety_factor"] is None and "point mass" in check["parts"][1]["note"]


def test_given_mass_sets_the_mean_density():
    # A steel disk whose given mass is half its solid mass: the mean density halves, so does the stress.
    r, t = 0.03, 0.005
    solid_mass = 7850.0 * math.pi * r**2 * t        # mild steel density from sim.model.materials [mem]
    sc = _wheel_scenario([{"shape": "disk", "radius": r, "thickness": t, "material": "steel",
                           "mass": solid_mass / 2}])
    check = wheel_burst_check(sc, Device.from_scenario(sc))
    w = check["runaway_speed_rad_s"]
    # solid rotating disk, peak stress at the centre (Timoshenko & Goodier): (3 + nu)/8 rho w^2 r^2,
    # written out here; steel nu 0.29 as in sim.model.materials [mem]
    np.testing.assert_allclose(check["parts"][0]["stress_pa"], (3 + 0.29) / 8 * (7850.0 / 2) * w**2 * r**2, rtol=1e-9)
    assert check["parts"][0]["strength_basis"].startswith("tensile")


def test_parts_carrying_outer_load_are_flagged():
    # Each part is computed spinning free (Timoshenko & Goodier's free disk); a web carrying a rim
    # sees more than that, so its figure must be marked optimistic rather than passed silently.
    sc = _wheel_scenario(PLA_RIM + [{"name": "web", "shape": "ring", "outer_radius": "40 mm", "inner_radius": "4 mm",
                                      "thickness": "2 mm", "material": "PLA"},
                                     {"name": "bolts", "shape": "point", "mass": "1 g", "at": "50 mm", "count": 4}])
    notes = {r["part"]: r["note"] for r in wheel_burst_check(sc, Device.from_scenario(sc))["parts"]}
    assert "rim" in notes["web"] and "bolts" in notes["web"] and "optimistic" in notes["web"]
    assert "bolts" in notes["rim"] and "web" not in notes["rim"]


# ----------------------------------------------------------------------------- rim loads (bolts, weights)

def _bolted_ring(bolt_mass_g: float, *, inner="60 mm", outer="62 mm", at="61 mm", count=6, thickness="8 mm"):
    return _wheel_scenario([{"name": "rim", "shape": "ring", "outer_radius": outer, "inner_radius": inner,
                             "thickness": thickness, "material": "aluminium"},
                            {"name": "bolts", "shape": "point", "mass": f"{bolt_mass_g} g", "at": at,
                             "count": count}])


def test_safety_factor_falls_as_bolt_mass_on_the_rim_rises():
    # Issue 12 bar: the bolts' centrifugal load on the rim that carries them must count. Sweeping the
    # bolt mass 2..14 g (the sweep) must lower the safety factor at every step.
    factors = []
    for grams in (2, 4, 6, 8, 10, 12, 14):
        sc = _bolted_ring(grams, inner="55 mm", outer="70 mm", at="62 mm")
        factors.append(wheel_burst_check(sc, Device.from_scenario(sc))["safety_factor"])
    assert all(b < a for a, b in zip(factors, factors[1:])), factors


def test_thin_ring_rim_load_against_hand_computation():
    # Hand computation, independent of sim.studies.stress: N bolts of mass m at radius r on a thin ring of
    # section A add a hoop stress N m r w^2 / (2 pi A) (references.md: Roark's Formulas for Stress and
    # Strain, thin ring under uniform radial load, sigma = p R / t); the ring's own hoop stress is
    # rho w^2 R^2 (Shigley, rotating ring); a bolt hole in a hoop-stressed ring peaks at K_t = 3 times
    # the hoop stress (Peterson's Stress Concentration Factors, hole in a wide plate, uniaxial).
    n, m, r, a, b, t = 6, 0.010, 0.061, 0.060, 0.062, 0.008
    sc = _bolted_ring(10, inner="60 mm", outer="62 mm", at="61 mm")
    check = wheel_burst_check(sc, Device.from_scenario(sc))
    w = check["runaway_speed_rad_s"]
    added = n * m * r * w**2 / (2 * math.pi * (b - a) * t)
    own = 2700.0 * w**2 * r**2                     # Al density from sim.model.materials [mem]
    row = check["parts"][0]
    # thin-ring formulas against the thick (Lame) solution: within 3% for a 2 mm wall at 61 mm
    np.testing.assert_allclose(row["rim_load_stress_pa"], added, rtol=0.03)
    np.testing.assert_allclose(row["hole_peak_stress_pa"], 3 * (own + added), rtol=0.03)
    np.testing.assert_allclose(row["stress_pa"], 3 * (own + added), rtol=0.03)
    np.testing.assert_allclose(check["safety_factor"], 310e6 / (3 * (own + added)), rtol=0.03)  # Al UTS [mem]


def test_rim_load_at_outer_edge_matches_lame_thick_ring():
    # Lame thick cylinder under outward traction p on its outer face (Timoshenko & Goodier, Theory of
    # Elasticity; Roark, thick-walled cylinder): hoop at the bore = 2 p b^2 / (b^2 - a^2); a solid disk
    # loaded at its edge is under uniform stress p in every direction.
    from sim.studies.stress import rim_load_coefficients, rim_load_stresses_pa
    f, a, b, t, nu = 500.0, 0.02, 0.05, 0.006, 0.33
    p = f / (2 * math.pi * b * t)
    coef = rim_load_coefficients(f, b, a, b, t, nu)
    np.testing.assert_allclose(rim_load_stresses_pa(coef, a, outer_side=False), (0.0, 2 * p * b**2 / (b**2 - a**2)),
                               rtol=1e-9, atol=1e-6)
    solid = rim_load_coefficients(f, b, 0.0, b, t, nu)
    for x in (0.0, 0.01, 0.049):
        np.testing.assert_allclose(rim_load_stresses_pa(solid, x, outer_side=False), (p, p), rtol=1e-9)
    # a load at the bore acts like internal pressure p_a: radial -p_a, hoop p_a (a^2 + b^2)/(b^2 - a^2) (Lame)
    pa = f / (2 * math.pi * a * t)
    bore = rim_load_coefficients(f, a, a, b, t, nu)
    np.testing.assert_allclose(rim_load_stresses_pa(bore, a, outer_side=True),
                               (-pa, pa * (a**2 + b**2) / (b**2 - a**2)), rtol=1e-9)


def test_rotating_disk_field_matches_the_peak_formulas():
    # Timoshenko & Goodier's rotating-disk field at the bore and at the centre gives the peak formulas above.
    from sim.studies.stress import rotating_disk_stresses_pa
    w, a, b = 700.0, 0.01, 0.05
    np.testing.assert_allclose(rotating_disk_stresses_pa(RHO_AL, w, b, a, NU_AL, a)[1],
                               bored_disk_stress_pa(RHO_AL, w, b, a, NU_AL), rtol=1e-12)
    np.testing.assert_allclose(rotating_disk_stresses_pa(RHO_AL, w, b, a, NU_AL, b)[0], 0.0, atol=1e-6)
    np.testing.assert_allclose(rotating_disk_stresses_pa(RHO_AL, w, b, 0.0, NU_AL, 1e-9),
                               (solid_disk_stress_pa(RHO_AL, w, b, NU_AL),) * 2, rtol=1e-9)


def test_carrier_is_the_part_spanning_the_point_and_uncarried_loads_are_flagged():
    # Our rule (no source): the ring or disk whose radial extent holds the point carries it; of two
    # touching there, the outer one. A point beyond every part is flagged, not dropped silently.
    web = {"name": "web", "shape": "ring", "outer_radius": "40 mm", "inner_radius": "4 mm",
           "thickness": "2 mm", "material": "PLA"}
    sc = _wheel_scenario(PLA_RIM + [web, {"name": "seam", "shape": "point", "mass": "1 g", "at": "40 mm", "count": 4},
                                    {"name": "far", "shape": "point", "mass": "1 g", "at": "80 mm", "count": 2}])
    check = wheel_burst_check(sc, Device.from_scenario(sc))
    rows = {r["part"]: r for r in check["parts"]}
    assert "seam" in rows["rim"]["note"] and rows["rim"]["rim_load_stress_pa"] > 0
    assert rows["web"]["rim_load_stress_pa"] is None
    assert "not counted" in rows["far"]["note"]
    assert any("far" in n for n in check["optimistic_notes"])


def test_hollow_box_spoke_carries_its_end_cap():
    # A hollow box lying radially from a to b: its side walls (section A_w) are a radial bar,
    # root tension rho w^2 (b^2 - a^2) / 2 (integrated load, as above); its outer end cap (area
    # A_c, wall e) hangs on them: + rho A_c e w^2 (b - e/2) / A_w (statics of the free body beyond the
    # root). Checked by quadrature of the load along the walls plus the cap as a lumped mass.
    from scipy.integrate import quad
    sc = _wheel_scenario([{"name": "arm", "shape": "hollow_box", "length": "40 mm", "width": "12 mm",
                           "thickness": "8 mm", "wall": "1 mm", "material": "aluminium", "at": "30 mm", "count": 2}])
    check = wheel_burst_check(sc, Device.from_scenario(sc))
    w, a, b, e = check["runaway_speed_rad_s"], 0.010, 0.050, 0.001
    walls, cap = 0.012 * 0.008 - 0.010 * 0.006, 0.010 * 0.006
    load, _ = quad(lambda r: RHO_AL * walls * w**2 * r, a, b)
    load += RHO_AL * cap * e * w**2 * (b - e / 2)
    np.testing.assert_allclose(check["parts"][0]["stress_pa"], load / walls, rtol=1e-9)
