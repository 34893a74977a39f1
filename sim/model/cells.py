"""Cell chemistries: open-circuit voltage against state of charge, and the default cut-off per cell.

The open-circuit tables are common practice, no source (values from memory of typical cells' rest
voltages at room temperature; every cell differs, replace them with your cell's curve). references.md
("Power and drive") gives the LiPo anchors: 4.20 V full, about 3.85 V near half, 3.7 V near 20 %,
falling steeply below 3.5 V. Li-ion (graphite/NMC cells) runs about 0.05 V below LiPo; NiMH is flat
near 1.2-1.3 V.
"""

from __future__ import annotations

# (state of charge, open-circuit volts per cell), rising in state of charge
OCV_TABLES: dict[str, tuple[tuple[float, float], ...]] = {
    "lipo": ((0.0, 3.27), (0.05, 3.50), (0.10, 3.62), (0.20, 3.70), (0.30, 3.75), (0.40, 3.79),
             (0.50, 3.85), (0.60, 3.90), (0.70, 3.96), (0.80, 4.03), (0.90, 4.11), (1.0, 4.20)),
    "li-ion": ((0.0, 3.00), (0.05, 3.40), (0.10, 3.55), (0.20, 3.65), (0.30, 3.70), (0.40, 3.74),
               (0.50, 3.79), (0.60, 3.85), (0.70, 3.91), (0.80, 3.98), (0.90, 4.07), (1.0, 4.15)),
    "nimh": ((0.0, 1.00), (0.05, 1.15), (0.10, 1.20), (0.20, 1.23), (0.50, 1.26), (0.80, 1.30),
             (0.90, 1.33), (1.0, 1.40)),
}

CUTOFF_PER_CELL_V = {"lipo": 3.2, "li-ion": 3.0, "nimh": 1.0}
"""Default low-voltage cut-off under load, V per cell: LiPo about 3.2 V (references.md, safety);
Li-ion 3.0 V and NiMH 1.0 V are common practice, no source."""


def open_circuit_volts_per_cell(chemistry: str, soc: float) -> float:
    """The chemistry's open-circuit voltage per cell at state of charge `soc` (0..1, clamped), V:
    linear between the table's points."""
    table = OCV_TABLES[chemistry]
    s = 0.0 if soc < 0.0 else (1.0 if soc > 1.0 else soc)
    j = 1
    while j < len(table) - 1 and table[j][0] < s:
        j += 1
    (s0, v0), (s1, v1) = table[j - 1], table[j]
    return v0 + (v1 - v0) * (s - s0) / (s1 - s0)
