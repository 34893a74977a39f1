"""The figure of `wheelbench compare`: two trials' tilt and wheel speeds overlaid, planar or 3D.

Tilt is the unsigned angle from upright, deg: a 3D trace's `tilt_rad`, a planar trace's body angle
wrapped to (-pi, pi] and taken as its size. Wheel speeds are relative to the body, rad/s, one line
per wheel (the wheel's tint as in the clip), side A solid and side B dashed, with each side's
no-load speeds at the supply as thin lines.
"""

from __future__ import annotations

import numpy as np

from ..core.angles import wrap_angles
from .plots import DEG, INK, LIMIT, _thin
from .scene3d import WHEEL_TINTS

SIDE_STYLES = ("-", "--")


def side_series(result) -> tuple[np.ndarray, np.ndarray, list, list]:
    """(t s, tilt rad, [wheel speeds rad/s], [no-load speeds rad/s]) of one trial, planar or 3D."""
    tr = result.trace
    t = tr.view("t")
    if getattr(result, "is_3d", False):
        speeds = [tr.view(f"w{i}_speed") for i in range(1, result.device.n_wheels + 1)]
        return t, tr.view("tilt"), speeds, [w.no_load_speed_rad_s for w in result.device.wheels]
    tilt = np.abs(wrap_angles(np.asarray(tr.view("angle"), dtype=float)))
    return t, tilt, [tr.view("wheel_speed")], [result.device.no_load_speed_rad_s]


def compare_figure(results, labels):
    """A matplotlib Figure (Agg backend): tilt on top, wheel speeds below, both sides overlaid."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(2, 1, figsize=(9.0, 6.5), sharex=True, constrained_layout=True)
    fig.suptitle("compare: " + "  vs  ".join(labels), color=INK, fontsize=11, fontweight="bold", parse_math=False)
    for side, (res, label, style) in enumerate(zip(results, labels, SIDE_STYLES)):
        t, tilt, speeds, limits = side_series(res)
        axes[0].plot(*_thin(t, tilt, scale=DEG), color=INK if side == 0 else "#6a7b8c", ls=style, lw=1.1,
                     label=f"{label} ({res.outcome})")
        for i, (w, lim) in enumerate(zip(speeds, limits)):
            tint = WHEEL_TINTS[i % len(WHEEL_TINTS)]
            colour = tuple(0.8 * v for v in tint)    # a little darker than the clip's tint, for paper
            axes[1].plot(*_thin(t, w), color=colour, ls=style, lw=1.0, label=f"{label}: wheel {i + 1}")
            for s in (lim, -lim):
                axes[1].axhline(s, color=LIMIT, ls=style, lw=0.6, alpha=0.7)
    axes[0].set_ylabel("tilt from upright [deg]")
    axes[1].set_ylabel("wheel speed [rad/s]")
    axes[1].set_xlabel("time [s]")
    for ax in axes:
        ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=8, frameon=False)
        ax.grid(True, color="#dde3e8", lw=0.6)
        ax.spines[["top", "right"]].set_visible(False)
    return fig
