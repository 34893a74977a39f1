"""A small table of wheel and body materials: density and tensile strength, SI units.

Values are typical datasheet figures recalled from memory (see ../shared/references.md,
marked [mem] there): verify against your own supplier's sheet before trusting a margin.
Printed plastics list both the in-plane strength and the weaker strength across layers;
the burst check uses the across-layer figure, since a spinning disk is loaded in-plane in
every direction and a printed part fails first where its layers or rasters bond.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Material:
    """A material's properties in SI.

    Attributes
    ----------
    name : str
    density_kg_m3 : float or None
    tensile_strength_pa : float or None
        Ultimate tensile strength; for printed parts the in-plane value.
    across_layer_strength_pa : float or None
        Printed parts only: strength across layers (the weaker direction).
    yield_strength_pa : float or None
        Metals only.
    poisson_ratio : float
        Used by the rotating-disk stress formulas.
    printed : bool
        True for 3D-printed plastics (strength knocked down in burst checks).
    """

    name: str
    density_kg_m3: float | None
    tensile_strength_pa: float | None
    across_layer_strength_pa: float | None = None
    yield_strength_pa: float | None = None
    poisson_ratio: float = 0.33
    printed: bool = False

    @property
    def design_strength_pa(self) -> float | None:
        """The strength a burst check should use: across layers for printed parts, else UTS."""
        if self.printed and self.across_layer_strength_pa is not None:
            return self.across_layer_strength_pa
        return self.tensile_strength_pa


# [mem] datasheet ranges, low end taken where a range is known (references.md, "Flywheel stress and materials").
TABLE: dict[str, Material] = {
    "pla": Material("PLA", 1240.0, 50e6, across_layer_strength_pa=35e6, poisson_ratio=0.36, printed=True),
    "petg": Material("PETG", 1270.0, 44e6, across_layer_strength_pa=25e6, poisson_ratio=0.38, printed=True),
    # ABS across-layer strength: no figure in our references; ~70% of in-plane is a common rule
    # of thumb (common practice, no source).
    "abs": Material("ABS", 1050.0, 30e6, across_layer_strength_pa=21e6, poisson_ratio=0.35, printed=True),
    "aluminium": Material("aluminium 6061-T6", 2700.0, 310e6, yield_strength_pa=276e6, poisson_ratio=0.33),
    # Mild steel (AISI 1018 cold drawn) and free-cutting brass (C360): [mem] typical datasheet values.
    "steel": Material("steel (mild)", 7850.0, 440e6, yield_strength_pa=370e6, poisson_ratio=0.29),
    "brass": Material("brass (C360)", 8500.0, 340e6, yield_strength_pa=125e6, poisson_ratio=0.34),
}

ALIASES = {"aluminum": "aluminium", "al": "aluminium", "al6061": "aluminium", "mild_steel": "steel"}


def lookup(name: str) -> Material | None:
    """The built-in material called `name` (case-insensitive), or None."""
    key = name.strip().lower().replace("-", "_").replace(" ", "_")
    return TABLE.get(ALIASES.get(key, key))


def known_names() -> list[str]:
    return sorted(TABLE)
