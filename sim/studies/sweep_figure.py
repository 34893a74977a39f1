"""The sweep's figure: a line plot over one varied key, a heat map over two.

Draws from the compact point summaries a sweep keeps (`sim.studies.sweep.PointSummaries`), with the
axes in the units the user typed in `--vary`; `--color METRIC` picks the metric shown (checked by
`check_color` before any point runs). Failed points are marked on the figure.
"""

from __future__ import annotations

import numpy as np

from ..core.errors import InputError
from .sweep import PointSummaries, Vary, axis_indices

COLOR_METRICS = ("wheel_speed_margin", "pass_fraction", "settle_time_s", "caught_at_s", "peak_wheel_speed_rad_s",
                 "peak_current_a", "rms_current_a", "winding_temperature_c", "wheel_burst_safety_factor",
                 "wheel_runaway_time_s", "pushes_survived")
COLOR_METRICS_3D = ("peak_tilt_rad",) + tuple(f"wheel{i}_{k}" for i in (1, 2, 3) for k in (
    "peak_speed_rad_s", "speed_margin", "peak_current_a", "rms_current_a"))
"""Columns only a 3D device's points have (`sim.studies.battery3d`); wheels numbered from 1."""


def check_color(metric: str | None) -> str | None:
    """`--color METRIC`: a numeric column of results.csv. InputError naming the option otherwise."""
    if metric is not None and metric not in COLOR_METRICS + COLOR_METRICS_3D:
        raise InputError(f"--color {metric!r}: expected one of {', '.join(COLOR_METRICS)} "
                         f"(3D devices also: peak_tilt_rad, wheelN_peak_speed_rad_s, wheelN_speed_margin, "
                         "wheelN_peak_current_a, wheelN_rms_current_a)")
    return metric


def check_color_fits(metric: str | None, scenario) -> None:
    """`--color` against the device: a 3D column needs a 3D device, a wheel number one it has."""
    if metric is None or metric not in COLOR_METRICS_3D:
        return
    if scenario.is_planar:
        raise InputError(f"--color {metric}: a column of 3D devices only; {scenario.source} describes a "
                         "one-wheel planar device")
    if metric.startswith("wheel") and int(metric[5]) > len(scenario.wheel_list):
        raise InputError(f"--color {metric}: {scenario.source} has {len(scenario.wheel_list)} wheel(s)")


def axis_display(v: Vary, values: list) -> tuple[list, str]:
    """Axis values in the unit the user typed (with the unit in the label), else as in results.csv."""
    if v.unit:
        from ..core.units import registry
        shown = [float(registry().Quantity(x).to(v.unit).magnitude) if isinstance(x, str) else x for x in v.values]
        return shown[: len(values)], f"{v.key} [{v.unit}]"
    numeric = all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in values)
    return values, f"{v.key} [SI]" if numeric else v.key


def grid_axes(varies: list[Vary], rows: PointSummaries) -> list[list]:
    """Per key, the column values of the points along its axis (SI where numeric)."""
    return [[rows.get(index, {}).get(v.key, v.values[j]) for j, index in enumerate(line)]
            for v, line in zip(varies, axis_indices([len(x.values) for x in varies]))]


def sweep_figure(varies: list[Vary], rows: PointSummaries, *, color: str | None = None):
    """A line plot for one key, a heat map for two; None for more (the table has it all).

    `color`: the metric the heat map (or the line plot's upper panel) shows; default the Monte Carlo
    pass fraction when there is one, else the wheel speed margin.
    """
    shown = [axis_display(v, a) for v, a in zip(varies, grid_axes(varies, rows))]
    axes, labels = [a for a, _ in shown], [label for _, label in shown]
    if len(varies) == 1:
        return _line_plot(labels[0], axes[0], [rows.get(i) for i in range(len(axes[0]))], color)
    if len(varies) == 2:
        grid = [[rows.get(i * len(axes[1]) + j) for j in range(len(axes[1]))] for i in range(len(axes[0]))]
        return _heat_map(labels, axes, grid, color)
    return None


def _positions(values: list) -> tuple[list, list | None]:
    """Numeric axis values, or index positions with labels for text values (e.g. strategy kinds)."""
    if all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values):
        return list(values), None
    return list(range(len(values))), [str(v) for v in values]


def _shown_metric(rows) -> str:
    return "pass_fraction" if any(r and r.get("mc_trials") for r in rows) else "wheel_speed_margin"


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    return plt


def _line_plot(key: str, xs: list, rows: list, color: str | None = None):
    from ..media.plots import ACCENT, INK, LIMIT
    plt = _pyplot()
    pos, labels = _positions(xs)
    metric = color or _shown_metric(rows)
    panels = [(metric, INK), ("settle_time_s", ACCENT)]
    if any(r is not None and r.get("peak_tilt_rad") is not None for r in rows) and metric != "peak_tilt_rad":
        panels.append(("peak_tilt_rad", INK))     # a 3D device's points: how far the body tipped
    fig, axes = plt.subplots(len(panels), 1, figsize=(7.5, 2.75 * len(panels)), sharex=True, constrained_layout=True)
    ax1, ax2 = axes[0], axes[-1]
    for ax, (name, colour) in zip(axes, panels):
        ys = [np.nan if (r is None or r.get(name) is None) else r[name] for r in rows]
        ax.plot(pos, ys, color=colour, lw=1.2, marker="o", ms=3)
        for x, y, r in zip(pos, ys, rows):
            if r is not None and not r.get("passed"):
                ax.plot([x], [0 if np.isnan(y) else y], marker="x", color=LIMIT, ms=7)
        ax.set_ylabel(name)
        ax.grid(True, color="#dde3e8", lw=0.6)
    ax2.set_xlabel(key)
    if labels:
        ax2.set_xticks(pos, labels)
    ax1.set_title(f"sweep over {key} (x = point failed)", color=INK, fontsize=10)
    return fig


def _heat_map(labels, axes, grid, color: str | None = None):
    from ..media.plots import INK
    plt = _pyplot()
    metric = color or _shown_metric([r for line in grid for r in line])
    data = np.array([[np.nan if (r is None or r.get(metric) is None) else r[metric] for r in line] for line in grid])
    fig, ax = plt.subplots(figsize=(7.5, 5.5), constrained_layout=True)
    fractions = metric in ("wheel_speed_margin", "pass_fraction")
    finite = data[np.isfinite(data)]
    lo, hi = (0.0, 1.0) if fractions or not finite.size else (float(finite.min()), float(finite.max()) or 1.0)
    im = ax.imshow(data.T, origin="lower", aspect="auto", cmap="viridis", vmin=lo, vmax=hi if hi > lo else lo + 1.0)
    fig.colorbar(im, ax=ax, label=metric)
    for i, line in enumerate(grid):
        for j, r in enumerate(line):
            if r is not None:
                ax.text(i, j, "pass" if r.get("passed") else "fail", ha="center", va="center", fontsize=7,
                        color="white" if not r.get("passed") else "black")
    for setter, values in ((ax.set_xticks, axes[0]), (ax.set_yticks, axes[1])):
        setter(range(len(values)), [f"{v:.4g}" if isinstance(v, float) else str(v) for v in values])
    ax.set_xlabel(labels[0])
    ax.set_ylabel(labels[1])
    ax.set_title(f"{metric} over the grid", color=INK, fontsize=10)
    return fig
