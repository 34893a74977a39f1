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
  (standard result, stated from memory); a hollow box adds its outer end cap's load
  rho w^2 A_cap e (b - e/2) spread over the side walls' section (statics).

Strength: a printed part uses its material's across-layer strength
(`Material.design_strength_pa`), since a spinning disk is loaded in every in-plane direction
and a printed part fails first where its layers bond. A part with partial infill has its
strength scaled by the infill fraction, like its density (our assumption, no source). A part
with no material, or a material without a strength, is reported as unknown: no figure is
guessed.

Rim loads (bolts, weights): a point part with `count` copies at radius r is carried by the ring
or disk whose radial extent contains r (inner edge <= r <= outer edge; when two touch at r, the
outer one, i.e. the one with the larger inner edge). Its centrifugal load F = count m r w^2 is
spread round the circle as a uniform radial line load at r (Roark's Formulas for Stress and
Strain, thin ring under uniform radial load: sigma = p R / t; for a thick part the plane-stress
Lame solution in two annuli, inner edge..r and r..outer edge, joined at r: Timoshenko & Goodier,
Theory of Elasticity, thick cylinder). The part's stress is the larger of
- the free-spinning peak plus the largest stress of the rim load (added as if they peaked at the
  same place: conservative), and
- the peak at a bolt hole at r: 3 sigma_1 - sigma_2 of the combined hoop (sigma_1) and radial
  (sigma_2) stress there (Kirsch's hole in a wide plate: K_t = 3 uniaxial, 2 equal biaxial;
  Peterson's Stress Concentration Factors). Every carried point part is taken to sit in a hole.
Still optimistic, and flagged as such (`optimistic_notes`): the load outer parts put on the part
that holds them (a heavy rim on its web) is not modelled; a point part that no ring or disk
spans (it sits beyond every part, or on a rod or box spoke) adds no load anywhere; the hole
factor is for a small hole in a wide plate (a hole that fills much of a narrow rim, and the
bolt's bearing on the hole, raise the peak further).
"""

from __future__ import annotations

import math

import numpy as np

from ..model.massprops import part_mass, part_volume, wheel_part_outer_radius


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
    bar = radial_bar_stress_pa(density_kg_m3, speed_rad_s, inner, outer)
    if part.shape != "hollow_box":
        return bar
    # a hollow box: its side walls are the bar; its outer end cap hangs on them (statics)
    e, w, t = part.wall, part.width, part.thickness
    cap, walls = (w - 2 * e) * (t - 2 * e), w * t - (w - 2 * e) * (t - 2 * e)
    return bar + density_kg_m3 * speed_rad_s**2 * cap * e * (outer - e / 2) / walls


def rotating_disk_stresses_pa(density_kg_m3: float, speed_rad_s: float, outer_m: float, inner_m: float,
                              poisson: float, radius_m: float) -> tuple[float, float]:
    """(radial, hoop) stress at `radius_m` in a free spinning disk (inner_m = 0: solid), Pa.

    Timoshenko & Goodier, Theory of Elasticity, rotating disk of uniform thickness:
    sigma_r = (3+nu)/8 rho w^2 (a^2 + b^2 - a^2 b^2/r^2 - r^2),
    sigma_t = (3+nu)/8 rho w^2 (a^2 + b^2 + a^2 b^2/r^2 - (1+3nu)/(3+nu) r^2).
    """
    a2, b2, r2 = inner_m**2, outer_m**2, radius_m**2
    k = (3.0 + poisson) / 8.0 * density_kg_m3 * speed_rad_s**2
    cross = a2 * b2 / r2 if inner_m > 0.0 else 0.0
    return k * (a2 + b2 - cross - r2), k * (a2 + b2 + cross - (1.0 + 3.0 * poisson) / (3.0 + poisson) * r2)


def rim_load_coefficients(force_n: float, radius_m: float, inner_m: float, outer_m: float, thickness_m: float,
                          poisson: float) -> np.ndarray:
    """Lame coefficients (A1, B1, A2, B2) of a uniform outward line load at `radius_m` on an annulus.

    In each annulus (1: inner..radius, 2: radius..outer) sigma_r = A + B/x^2 and sigma_t = A - B/x^2
    (plane stress, no body force; Timoshenko & Goodier). Conditions: free edges (a solid disk,
    inner_m = 0, is finite at the centre instead), radial stress drops by p = F / (2 pi r t) across
    r (equilibrium of the loaded circle), radial displacement x (sigma_t - nu sigma_r) / E continuous.
    """
    r2 = radius_m**2
    p = force_n / (2.0 * math.pi * radius_m * thickness_m)
    m = np.array([
        [1.0, 1.0 / inner_m**2, 0.0, 0.0] if inner_m > 0.0 else [0.0, 1.0, 0.0, 0.0],
        [0.0, 0.0, 1.0, 1.0 / outer_m**2],
        [-1.0, -1.0 / r2, 1.0, 1.0 / r2],
        [-(1.0 - poisson), (1.0 + poisson) / r2, 1.0 - poisson, -(1.0 + poisson) / r2],
    ])
    return np.linalg.solve(m, np.array([0.0, 0.0, -p, 0.0]))


def rim_load_stresses_pa(coef: np.ndarray, x_m: float, *, outer_side: bool) -> tuple[float, float]:
    """(radial, hoop) stress of a rim load at radius `x_m`, Pa, on the inner or outer annulus."""
    a, b = (coef[2], coef[3]) if outer_side else (coef[0], coef[1])
    inv = 1.0 / x_m**2 if x_m > 0.0 else 0.0
    return a + b * inv, a - b * inv


def _span(part) -> tuple[float, float]:
    """Inner and outer radius of a ring or disk, m."""
    return (part.inner_radius, part.outer_radius) if part.shape == "ring" else (0.0, part.radius)


def carried_stress_pa(part, speed_rad_s: float, density_kg_m3: float, poisson: float,
                      loads: list[tuple[float, float]]) -> tuple[float, float, float]:
    """Stress of a ring or disk carrying rim loads [(force N, radius m)], Pa.

    Returns (governing stress, largest rim-load stress, largest bolt-hole peak); see the module
    docstring for how they combine.
    """
    inner, outer = _span(part)
    thick = part.thickness
    free = part_stress_pa(part, speed_rad_s, density_kg_m3, poisson)
    coefs = [(rim_load_coefficients(f, r, inner, outer, thick, poisson), r) for f, r in loads]
    edges = [inner, outer] + [r for _, r in loads]

    def total(x: float, outer_side: bool) -> tuple[float, float]:
        sr, st = rotating_disk_stresses_pa(density_kg_m3, speed_rad_s, outer, inner, poisson, x) if x > 0.0 \
            else (free, free)
        for c, r in coefs:
            dr, dt = rim_load_stresses_pa(c, x, outer_side=x > r or (x == r and outer_side))
            sr, st = sr + dr, st + dt
        return sr, st

    # each Lame term is monotonic in x, so the rim loads peak at an edge or a load radius
    rim_peak = 0.0
    for x in edges:
        for side in (False, True):
            sums = [rim_load_stresses_pa(c, x, outer_side=x > r or (x == r and side)) if x > 0.0
                    else (c[0], c[0]) for c, r in coefs]
            rim_peak = max(rim_peak, abs(sum(s[0] for s in sums)), abs(sum(s[1] for s in sums)))
    hole = 0.0
    for _, r in loads:
        for side in (False, True):
            sr, st = total(r, side)
            hole = max(hole, 3.0 * max(sr, st) - min(sr, st))
    return max(free + rim_peak, hole), rim_peak, hole


def _density(part) -> float | None:
    """Mean density of the part, kg/m^3: from its given mass and volume when both exist."""
    volume = part_volume(part)
    if part.mass is not None and volume:
        return part.mass / volume
    return part.density_kg_m3


def part_burst_check(part, index: int, speed_rad_s: float, carried: list | None = None) -> dict:
    """Stress, strength and safety factor of one wheel part at `speed_rad_s`, with a note.

    `carried`: [(name, force N, radius m)] of the point parts this ring or disk holds.
    """
    carried = carried or []
    name = part.name or f"wheel.parts[{index}]"
    mat = part.material_props
    row = {"part": name, "shape": part.shape, "material": mat.name if mat else None, "stress_pa": None,
           "strength_pa": None, "strength_basis": None, "safety_factor": None, "rim_load_stress_pa": None,
           "hole_peak_stress_pa": None, "note": ""}
    if part.shape == "point":
        row["note"] = "point mass: carries no stress of its own"
        return row
    density = _density(part)
    poisson = mat.poisson_ratio if mat else 0.33
    stress = None
    if density is not None:
        stress = part_stress_pa(part, speed_rad_s, density, poisson)
        if carried:
            stress, rim, hole = carried_stress_pa(part, speed_rad_s, density, poisson,
                                                  [(f, r) for _, f, r in carried])
            row.update(rim_load_stress_pa=rim, hole_peak_stress_pa=hole)
            row["note"] = (f"carries {', '.join(n for n, _, _ in carried)}: rim load "
                           f"+{rim / 1e6:.3g} MPa, bolt-hole peak (K_t ~3) {hole / 1e6:.3g} MPa")
    if mat is None or mat.design_strength_pa is None:
        row["note"] = _join("strength unknown: give the part a material with a tensile strength", row["note"])
        row["stress_pa"] = stress
        return row
    if density is None:
        row["note"] = "density unknown: give a mass with sizes that fix the volume, or a material density"
        return row
    strength = mat.design_strength_pa * (part.infill if part.infill is not None else 1.0)
    basis = "across-layer strength (printed)" if mat.printed and mat.across_layer_strength_pa is not None \
        else "tensile strength (UTS)"
    if part.infill is not None:
        basis += f" x infill {part.infill:.0%}"
    row.update(stress_pa=stress, strength_pa=strength, strength_basis=basis,
               safety_factor=strength / stress if stress > 0 else math.inf)
    return row


def _join(first: str, second: str) -> str:
    return f"{first}; {second}" if first and second else first or second


def wheel_burst_check(scenario, device) -> dict:
    """The wheel's burst check at the runaway speed.

    Returns a dict: `runaway_speed_rad_s`, `parts` (one row per wheel part), `safety_factor` (the
    smallest over parts with a known strength, None when none), `unknown_parts` (names of parts
    whose strength is unknown), `burst_speed_rad_s` (runaway speed * sqrt(safety factor)),
    `optimistic_notes` (where the model leaves a load out; empty when it leaves none out).
    """
    speed = device.no_load_speed_rad_s
    parts = scenario.wheel.parts
    names = [p.name or f"wheel.parts[{i}]" for i, p in enumerate(parts)]
    carriers = {i: carrier_index(parts, p) for i, p in enumerate(parts) if p.shape == "point"}
    carried: dict[int, list] = {}
    for i, j in carriers.items():
        p = parts[i]
        if j is not None and p.at > 0.0:
            carried.setdefault(j, []).append((names[i], p.count * part_mass(p) * p.at * speed**2, p.at))
    rows = [part_burst_check(p, i, speed, carried.get(i)) for i, p in enumerate(parts)]
    optimistic = []
    for i, (row, part) in enumerate(zip(rows, parts)):
        if part.shape == "point":
            if carriers[i] is None:
                row["note"] += "; no ring or disk (with a thickness) spans its radius: its load is not counted"
                optimistic.append(f"load of {names[i]} not counted (no ring or disk spans its radius)")
            else:
                row["note"] += f"; load counted in {names[carriers[i]]}"
            continue
        outer = [names[k] for k, q in enumerate(parts) if q is not part and q.shape != "point" and _loads(q, part)]
        outer += [names[k] for k, j in carriers.items() if j is not None and j != i and _loads(parts[k], part)]
        if outer:
            row["note"] = _join(row["note"], f"load from {', '.join(outer)} not included: figure optimistic")
            optimistic.append(f"load of {', '.join(outer)} on {names[i]} not included")
    known = [r["safety_factor"] for r in rows if r["safety_factor"] is not None]
    unknown = [r["part"] for r in rows if r["safety_factor"] is None and r["shape"] != "point"]
    factor = min(known) if known else None
    return {
        "runaway_speed_rad_s": speed,
        "parts": rows,
        "safety_factor": factor,
        "unknown_parts": unknown,
        "burst_speed_rad_s": speed * math.sqrt(factor) if factor is not None and math.isfinite(factor) else None,
        "optimistic_notes": optimistic,
    }


def optimistic_summary(burst: dict) -> str:
    """One short line for tables: empty when the model leaves nothing out."""
    notes = burst.get("optimistic_notes") or []
    return ("optimistic: " + "; ".join(notes)) if notes else ""


def carrier_index(parts, point) -> int | None:
    """Index of the ring or disk that carries a point part: its radial extent contains the point's
    radius; of two that touch there, the outer one. None when no ring or disk with a thickness spans it."""
    best = None
    for k, q in enumerate(parts):
        if q.shape in ("ring", "disk") and q.thickness is not None:
            inner, outer = _span(q)
            if inner <= point.at <= outer and (best is None or inner > _span(parts[best])[0]):
                best = k
    return best


def _loads(other, part) -> bool:
    """Does `other` hang its centrifugal load on `part` (lies outside it, or is a point mass on it)?"""
    if other.shape == "point":
        return other.at >= _inner_edge(part)  # on the part or outside it
    return _inner_edge(other) >= wheel_part_outer_radius(part) * 0.999


def _inner_edge(part) -> float:
    """Smallest radius of the part from the wheel axis, m."""
    if part.shape == "ring":
        return part.inner_radius
    if part.shape in ("rod", "box", "hollow_box"):
        return max(part.at - part.length / 2.0, 0.0)
    return 0.0 if part.shape == "disk" else part.at
