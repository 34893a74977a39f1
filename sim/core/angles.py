"""Angle helpers shared by the physics, the run and the studies (radians throughout).

Wrapping maps any angle to (-pi, pi]; the trial keeps the body's angle unwrapped and the
sensors, trace and metrics wrap it where they report it.
"""

from __future__ import annotations

import math

import numpy as np


def wrap_angle(angle_rad: float) -> float:
    """Wrap to (-pi, pi]."""
    a = math.fmod(angle_rad + math.pi, 2 * math.pi)
    if a <= 0.0:
        a += 2 * math.pi
    return a - math.pi


def wrap_angles(a: np.ndarray) -> np.ndarray:
    """Vectorised `wrap_angle` (a new array; one full-length temporary, for long traces)."""
    w = a + np.pi
    np.mod(w, 2 * np.pi, out=w)
    w[w == 0.0] = 2 * np.pi
    w -= np.pi
    return w
