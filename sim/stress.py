"""Burst check of the wheel: centrifugal stress in each wheel part at the runaway speed.

The runaway speed is the no-load speed at full supply (V / k_e): what the wheel reaches if the
controller or a sensor fails with the drive full on. Stress grows with the square of speed, so
a safety factor S on stress is sqrt(S) on speed.

Formulas (uniform thickness, linear-elastic, plane stress):
- solid disk, largest at the centre:   sigma = (3 + nu) / 8 * rho w^2 R^2
- disk with a bore, hoop at the bore:  sigma = rho w^2 / 4 * ((3 + nu) r_o^2 + (1 - nu) r_i^2)
- thin ring:                           sigma = rho w^2 r^2
  (Timoshenko & Goodier, Theory of Elasticity, rotating disks; Shigley's Mechanical Engineering
  Design, rotating rings; see ../shared/references.md)
- radial bar (a rod or box spoke) from radius a to b, tension at its inner end:
  sigma = rho w^2 (b^2 - a^2) / 2, from integrating the centrifugal load along the bar
  (standard result, stated from memory).

Strength: a printed part uses its material's across-layer strength
(`Material.design_strength_pa`), since a spinning disk is loaded in every in-plane direction
and a printed part fails first where its layers bond. A part with partial infill has its
strength scaled by the infill fraction, like its density (our assumption, no source). A part
with no material, or a material without a strength, is reported as unknown: no figure is
guessed. Each part is treated as spinning free: the load that outer parts (a heavy rim, bolts,
weights) put on the part that holds them is not modelled, which makes the figure for an inner
part optimistic; such parts are flagged in their note.
"""

from __future__ import annotations

import math

from .massprops import part_volume, wheel_part_outer_radius


def solid_disk_stress_pa(density_kg_m3: float, speed_rad_s: float, radius_m: float, poisson: float) -> float:
    """Largest stress in a spinning solid disk (radial = hoop, at the centre), Pa."""
    return (3.0 + poisson) / 8.0 * density_kg_m3 * speed_rad_s**2 * radius_m**2


def bored_disk_stress_pa(density_kg_m3: float, speed_rad_s: float, outer_m: float, inner_m: float,
                         poisson: float) -> float:
    """Hoop stress at the bore of a spinning disk with a central hole, Pa (its largest stress)."""
    return density_kg_m3 * speed_rad_s**2 / 4.0 * ((3.0 + poisson) * outer_m**2 + (1.0 - poisson) * inner_m**2)


def thin_ring_stress_pa(density_kg_m3: float, speed_rad_s: float, radius_m: float) -> float:
    """Hoop stress in a thin spinning ring of mean radius `radius_m`, Pa (= rho v^2)."""
    return density_kg_m3 * speed_rad_s**2 * radius_m**2


def radial_bar_stress_pa(density_kg_m3: float, speed_rad_s: float, inner_m: float, outer_m: float) -> float:
    """Tension at the inner end of a uniform radial bar spanning inner..outer radius, Pa."""
    return density_kg_m3 * speed_rad_s**2 * (outer_m**2 - inner_m**2) / 2.0


def part_stress_pa(part, speed_rad_s: float, density_kg_m3: float, poisson: float) -> float | None:
    """Largest centrifugal stress in one wheel part, Pa; None for a point mass."""
    if part.shape == "point":
        return None
    if part.shape == "disk":
        return solid_disk_stress_pa(density_kg_m3, speed_rad_s, part.radius, poisson)
    if part.shape == "ring":
        if part.inner_radius == 0.0:
            return solid_disk_stress_pa(density_kg_m3, speed_rad_s, part.outer_radius, poisson)
        return bored_disk_stress_pa(density_kg_m3, speed_rad_s, part.outer_radius, part.inner_radius, poisson)
    # rod or box: a radial bar; a bar centred on the axis is two bars meeting at the axis
    half = part.length / 2.0
    inner, outer = max(part.at - half, 0.0), part.at + half
    return radial_bar_stress_pa(density_kg_m3, speed_rad_s, inner, outer)


def _density(part) -> float | None:
    """Mean density of the part, kg/m^3: from its given mass and volume when both exist."""
    volume = part_volume(part)
    if part.mass is not None and volume:
        return part.mass / volume
    return part.density_kg_m3


def part_burst_check(part, index: int, speed_rad_s: float) -> dict:
    """Stress, strength and safety factor of one wheel part at `speed_rad_s`, with a note."""
    name = part.name or f"wheel.parts[{index}]"
    mat = part.material_props
    row = {"part": name, "shape": part.shape, "material": mat.name if mat else None, "stress_pa": None,
           "strength_pa": None, "strength_basis": None, "safety_factor": None, "note": ""}
    if part.shape == "point":
        row["note"] = "point mass: carries no stress of its own (its load on the holding part is not modelled)"
        return row
    density = _density(part)
    if mat is None or mat.design_strength_pa is None:
        row["note"] = "strength unknown: give the part a material with a tensile strength"
        if density is not None:
            row["stress_pa"] = part_stress_pa(part, speed_rad_s, density, mat.poisson_ratio if mat else 0.33)
        return row
    if density is None:
        row["note"] = "density unknown: give a mass with sizes that fix the volume, or a material density"
        return row
    strength = mat.design_strength_pa * (part.infill if part.infill is not None else 1.0)
    basis = "across-layer strength (printed)" if mat.printed and mat.across_layer_strength_pa is not None \
        else "tensile strength (UTS)"
    if part.infill is not None:
        basis += f" x infill {part.infill:.0%}"
    stress = part_stress_pa(part, speed_rad_s, density, mat.poisson_ratio)
    row.update(stress_pa=stress, strength_pa=strength, strength_basis=basis,
               safety_factor=strength / stress if stress > 0 else math.inf)
    return row


def wheel_burst_check(scenario, device) -> dict:
    """The wheel's burst check at the runaway speed.

    Returns a dict: `runaway_speed_rad_s`, `parts` (one row per wheel part), `safety_factor` (the
    smallest over parts with a known strength, None when none), `unknown_parts` (names of parts
    whose strength is unknown), `burst_speed_rad_s` (runaway speed * sqrt(safety factor)).
    """
    speed = device.no_load_speed_rad_s
    parts = scenario.wheel.parts
    rows = [part_burst_check(p, i, speed) for i, p in enumerate(parts)]
    for row, part in zip(rows, parts):
        carried = [r["part"] for r, q in zip(rows, parts) if q is not part and _loads(q, part)]
        if carried and part.shape != "point":
            row["note"] = (row["note"] + "; " if row["note"] else "") + \
                f"load from {', '.join(carried)} not included: figure optimistic"
    known = [r["safety_factor"] for r in rows if r["safety_factor"] is not None]
    unknown = [r["part"] for r in rows if r["safety_factor"] is None and r["shape"] != "point"]
    factor = min(known) if known else None
    return {
        "runaway_speed_rad_s": speed,
        "parts": rows,
        "safety_factor": factor,
        "unknown_parts": unknown,
        "burst_speed_rad_s": speed * math.sqrt(factor) if factor is not None and math.isfinite(factor) else None,
    }


def _loads(other, part) -> bool:
    """Does `other` hang its centrifugal load on `part` (lies outside it, or is a point mass on it)?"""
    if other.shape == "point":
        return other.at >= _inner_edge(part)  # on the part or outside it
    return _inner_edge(other) >= wheel_part_outer_radius(part) * 0.999


def _inner_edge(part) -> float:
    """Smallest radius of the part from the wheel axis, m."""
    if part.shape == "ring":
        return part.inner_radius
    if part.shape in ("rod", "box"):
        return max(part.at - part.length / 2.0, 0.0)
    return 0.0 if part.shape == "disk" else part.at
