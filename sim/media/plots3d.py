"""The summary plot of one 3D trial: tilt per axis, body rates, and each wheel's speed, voltage and current."""

from __future__ import annotations

import numpy as np

from .plots import ACCENT, DEG, INK, LIMIT, MUTED, _event_markers, _thin

WHEEL_COLOURS = (ACCENT, "#2a6f97", "#5b8c2a")
AXIS_STYLES = {"x": "-", "y": "--", "z": ":"}


def summary_figure3d(result):
    """A matplotlib Figure (Agg backend): one panel per quantity, one line per axis or wheel."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    tr, dev = result.trace, result.device
    t = tr.view("t")
    axes_names = ("x", "y", "z") if tr.ball else ("x",)
    fig, axes = plt.subplots(5, 1, figsize=(8.5, 9.5), sharex=True, constrained_layout=True)
    fig.suptitle(f"{result.scenario.name}: {result.scenario.strategy.kind} -> {result.outcome}", color=INK,
                 fontsize=12, fontweight="bold", parse_math=False)
    ax = axes[0]
    ax.plot(*_thin(t, tr.view("tilt"), scale=DEG), color=INK, lw=1.4, label="tilt")
    for a in ("x", "y") if tr.ball else ("x",):
        ax.plot(*_thin(t, tr.view(f"tilt_{a}"), scale=DEG), color=MUTED, lw=0.9, ls=AXIS_STYLES[a], label=f"about {a}")
    ax.set_ylabel("tilt from upright [deg]")
    ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=8, frameon=False)
    ax = axes[1]
    for a in axes_names:
        ax.plot(*_thin(t, tr.view(f"rate_{a}"), scale=DEG), color=INK, lw=0.9, ls=AXIS_STYLES[a], label=f"w{a} (heading frame)")
    ax.set_ylabel("body rate [deg/s]")
    ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=8, frameon=False)
    for panel, quantity, label in ((2, "speed", "wheel speed [rad/s]"), (3, "voltage", "voltage [V]"),
                                   (4, "current", "current [A]")):
        ax = axes[panel]
        for i in range(1, dev.n_wheels + 1):
            ax.plot(*_thin(t, tr.view(f"w{i}_{quantity}")), color=WHEEL_COLOURS[i - 1], lw=0.9, label=f"wheel {i}")
        ax.set_ylabel(label)
        ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=8, frameon=False)
    for i, w in enumerate(dev.wheels, start=1):
        for s in (w.no_load_speed_rad_s, -w.no_load_speed_rad_s):
            axes[2].axhline(s, color=LIMIT, ls="--", lw=0.7)
        if np.isfinite(w.current_limit_a):
            for s in (w.current_limit_a, -w.current_limit_a):
                axes[4].axhline(s, color=LIMIT, ls="--", lw=0.7)
    for s in (dev.supply_v, -dev.supply_v):
        axes[3].axhline(s, color=LIMIT, ls="--", lw=0.7)
    if getattr(tr, "has_power_columns", False):   # the shared bus as it sagged and rose (power chain)
        bus = tr.view("supply_voltage")
        for sign in (1.0, -1.0):
            axes[3].plot(*_thin(t, sign * bus), color=MUTED, lw=0.8)
        axes[3].text(t[0] if len(t) else 0, float(bus[0]) if len(bus) else 0.0, " bus", color=MUTED, fontsize=7,
                     va="top")
    axes[4].set_xlabel("time [s]")
    _event_markers(axes, result)
    for a in axes:
        a.grid(True, color="#dde3e8", lw=0.6)
        a.spines[["top", "right"]].set_visible(False)
    return fig
