"""The general safety cautions every judging output ends with (`check`, sweeps, clips, the CLI).

Spinning wheels, motors and batteries can hurt people; Wheelbench's figures are model estimates
and defer to local codes and licensed practice. Context-specific cautions (bringing up gains,
bench tests for fits) live beside their outputs and add to these.
"""

SAFETY_NOTES = (
    "Guard the wheel with a cover built to contain a burst, keep out of its plane, and retain the hub positively.",
    "Set a software wheel-speed limit and a hardware stop; braking regenerates into the supply and can over-volt it.",
    "Batteries: balance-charge LiPo packs (4.20 V per cell at most), never charge unattended, charge and store "
    "them in a fire-resistant container, retire swollen packs.",
    "These figures are model estimates; they do not replace local codes, a guard designed for burst "
    "containment, or licensed practice.",
)

SAFETY_LINE = "Safety: " + " ".join(SAFETY_NOTES)
"""The notes as one paragraph, for terminal output."""
