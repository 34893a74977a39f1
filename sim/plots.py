"""The summary plot of one trial: angle, body rate, wheel speed against its limit, voltage, current."""

from __future__ import annotations

import numpy as np

from .engine import wrap_angles

INK, ACCENT, LIMIT, MUTED = "#1d2b3a", "#c2571a", "#8c1c13", "#7a8894"
DEG = 180.0 / np.pi   # rad -> deg, as np.degrees


def summary_figure(result):
    """A matplotlib Figure (Agg backend) summarising the trial."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    tr, dev = result.trace, result.device
    t = tr.view("t")
    fig, axes = plt.subplots(5, 1, figsize=(8.5, 9.5), sharex=True, constrained_layout=True)
    title = f"{result.scenario.name}: {result.scenario.strategy.kind} -> {result.outcome}"
    fig.suptitle(title, color=INK, fontsize=12, fontweight="bold", parse_math=False)  # user text, literally
    ax = axes[0]
    ax.plot(*_thin(t, wrap_angles(tr.view("angle").copy()), scale=DEG, wraps=True), color=INK, lw=1.2, label="true")
    ax.plot(*_thin(t, tr.view("meas_angle"), scale=DEG, wraps=True), color=MUTED, lw=0.7, alpha=0.8,
            label="measured")
    ax.set_ylabel("angle [deg]")
    ax.legend(loc="upper right", fontsize=8, frameon=False)
    axes[1].plot(*_thin(t, tr.view("rate"), scale=DEG), color=INK, lw=1.0)
    axes[1].set_ylabel("body rate [deg/s]")
    lim = dev.no_load_speed_rad_s
    ax = axes[2]
    ax.plot(*_thin(t, tr.view("wheel_speed")), color=ACCENT, lw=1.2)
    for s in (lim, -lim):
        ax.axhline(s, color=LIMIT, ls="--", lw=0.9)
    ax.text(t[0] if len(t) else 0, lim, " no-load speed at supply", color=LIMIT, fontsize=7, va="bottom")
    ax.set_ylabel("wheel speed [rad/s]")
    ax = axes[3]
    ax.plot(*_thin(t, tr.view("voltage")), color=INK, lw=0.9)
    for s in (dev.supply_v, -dev.supply_v):
        ax.axhline(s, color=LIMIT, ls="--", lw=0.9)
    ax.set_ylabel("voltage [V]")
    ax = axes[4]
    ax.plot(*_thin(t, tr.view("current")), color=ACCENT, lw=0.9)
    if np.isfinite(dev.current_limit_a):
        for s in (dev.current_limit_a, -dev.current_limit_a):
            ax.axhline(s, color=LIMIT, ls="--", lw=0.9)
    ax.set_ylabel("current [A]")
    ax.set_xlabel("time [s]")
    _shade_phases(axes, tr)
    for a in axes:
        a.grid(True, color="#dde3e8", lw=0.6)
        a.spines[["top", "right"]].set_visible(False)
    return fig


def _thin(t: np.ndarray, y: np.ndarray, *, scale: float = 1.0, wraps: bool = False, buckets: int = 2000):
    """(t, y * scale) cut to each bucket's minimum and maximum, in time order, when longer than 2 buckets.

    A 60 s trace has 60,000 rows per line; a 900-pixel-wide panel shows at most a few thousand
    of them. Keeping each bucket's extremes keeps every peak and limit hit the eye would see
    while drawing ~15x fewer points. Scaled after thinning (`scale` > 0), so a long trace costs
    no full-length temporaries beyond a NaN-free copy when it has NaN.
    """
    n = len(y)
    if n > 2 * buckets:
        width = n // buckets
        head = y[: width * buckets]
        blocks = (np.nan_to_num(head) if np.isnan(head).any() else head).reshape(buckets, width)
        base = np.arange(buckets)[:, None] * width
        pair = np.sort(np.stack([blocks.argmin(axis=1), blocks.argmax(axis=1)], axis=1), axis=1) + base
        idx = np.concatenate([pair.ravel(), np.arange(width * buckets, n)])
        t, y = t[idx], y[idx]
    y = y * scale
    return t, (_break_wraps(y) if wraps else y)


def _break_wraps(deg: np.ndarray) -> np.ndarray:
    """A copy with NaN where the wrapped angle jumps by more than 180 deg, so no line crosses the plot."""
    out = deg.astype(float).copy()
    if out.size > 1:
        out[1:][np.abs(np.diff(deg)) > 180.0] = np.nan
    return out


def _shade_phases(axes, tr) -> None:
    """Light bands showing each strategy phase, labelled on the top panel."""
    if not tr.n or len(tr.phases) < 2:
        return
    mode, t = tr.view("mode"), tr.view("t")
    edges = np.nonzero(np.diff(mode))[0] + 1
    starts = np.concatenate([[0], edges])
    ends = np.concatenate([edges, [len(mode) - 1]])
    shades = ["#f3efe6", "#e6eef3", "#eef3e6", "#f3e6ee"]
    span = max(t[-1] - t[0], 1e-9)
    for s, e in zip(starts, ends):
        for a in axes:
            a.axvspan(t[s], t[e], color=shades[mode[s] % len(shades)], lw=0, zorder=0)
        if (t[e] - t[s]) / span > 0.06:  # narrower bands would print their names over each other
            axes[0].text(t[s], 1.0, " " + tr.phases[mode[s]], transform=axes[0].get_xaxis_transform(),
                         fontsize=7, color=MUTED, va="top", parse_math=False)  # a phase name, literally


def save_figure(fig, path) -> None:
    """Save atomically as PNG and free the figure."""
    import matplotlib.pyplot as plt

    from .outputs import atomic_path

    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=110, format="png")
    plt.close(fig)
