"""Reading what a written PNG shows: counts of pixels of a given colour (for content checks of plots)."""

from __future__ import annotations

import numpy as np


def rgb(colour) -> np.ndarray:
    """A colour as RGB floats 0..1, from "#rrggbb" or a matplotlib RGBA tuple."""
    if isinstance(colour, str):
        colour = colour.lstrip("#")
        return np.array([int(colour[i:i + 2], 16) / 255 for i in (0, 2, 4)])
    return np.asarray(colour[:3], dtype=float)


def pixels_near(path, colour, *, tol: float = 4 / 255) -> int:
    """How many pixels of the PNG at `path` are within `tol` (per channel, 0..1) of `colour`."""
    import matplotlib.image as mpimg

    img = mpimg.imread(str(path))[..., :3]
    return int((np.abs(img - rgb(colour)).max(axis=2) <= tol).sum())
