"""The summary plot of one trial: angle, body rate, wheel speed against its limit, voltage, current."""

from __future__ import annotations

import numpy as np

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
    true_t, true_deg = _thin(t, tr.view("angle"), scale=DEG)
    shift = _upright_shift(true_deg, ended_upright=result.outcome == "balanced")
    ax.plot(true_t, true_deg - shift, color=INK, lw=1.2, label="true")
    meas_t, meas_deg = _thin(t, tr.view("meas_angle"), scale=DEG)
    ax.plot(meas_t, _continuous_like(meas_deg, true_deg) - shift, color=MUTED, lw=0.7, alpha=0.8, label="measured")
    _upright_lines(ax)
    ax.set_ylabel("angle from upright [deg]")
    # outside the panel, so it never hides a curve
    ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=8, frameon=False)
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
    if getattr(tr, "has_power_columns", False):   # the bus as it sagged and rose (power chain)
        bus = tr.view("supply_voltage")
        for sign in (1.0, -1.0):
            ax.plot(*_thin(t, sign * bus), color=MUTED, lw=0.8)
        ax.text(t[0] if len(t) else 0, float(bus[0]) if len(bus) else 0.0, " bus", color=MUTED, fontsize=7,
                va="top")
    ax.set_ylabel("voltage [V]")
    ax = axes[4]
    ax.plot(*_thin(t, tr.view("current")), color=ACCENT, lw=0.9)
    if np.isfinite(dev.current_limit_a):
        for s in (dev.current_limit_a, -dev.current_limit_a):
            ax.axhline(s, color=LIMIT, ls="--", lw=0.9)
    ax.set_ylabel("current [A]")
    ax.set_xlabel("time [s]")
    _shade_phases(axes, tr)
    _event_markers(axes, result)
    for a in axes:
        a.grid(True, color="#dde3e8", lw=0.6)
        a.spines[["top", "right"]].set_visible(False)
    return fig


def _thin(t: np.ndarray, y: np.ndarray, *, scale: float = 1.0, buckets: int = 2000):
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
    return t, y


def _upright_shift(deg: np.ndarray, *, ended_upright: bool) -> float:
    """The multiple of 360 deg to subtract from the angle, the curve kept continuous (no wrap jumps):
    for a body that ended upright, the one that puts its final value nearest 0 (a body caught after
    swinging over reads 0 at the end); otherwise the one that puts its start nearest 0 (a body that
    fell and whirled round its pivot reads its start angle as given)."""
    finite = deg[np.isfinite(deg)]
    if not finite.size:
        return 0.0
    return float(360.0 * np.round((finite[-1] if ended_upright else finite[0]) / 360.0))


def _continuous_like(meas_deg: np.ndarray, true_deg: np.ndarray) -> np.ndarray:
    """The measured angle (wrapped by the sensor to (-180, 180]) unwrapped and put on the same turn
    as the true angle, so both curves can be read against one axis."""
    if meas_deg.size == 0 or true_deg.size == 0:
        return meas_deg
    out = np.degrees(np.unwrap(np.radians(np.nan_to_num(meas_deg))))
    return out + 360.0 * np.round((true_deg[0] - out[0]) / 360.0)


def _upright_lines(ax) -> None:
    """Dotted lines at every upright (multiples of 360 deg) the angle panel spans."""
    lo, hi = ax.get_ylim()
    for k in range(int(np.ceil(lo / 360.0)), int(np.floor(hi / 360.0)) + 1):
        ax.axhline(360.0 * k, color=MUTED, ls=":", lw=0.8)


def _event_markers(axes, result) -> None:
    """Vertical markers on every panel: pushes, the catch and a fall, labelled on the top panel."""
    events = [(p.at, f"push {_impulse_mn_m_s(p.impulse)} mN m s", ACCENT) for p in result.scenario.trial.pushes
              if p.at <= result.ended_at_s]
    if result.caught_at_s is not None:
        events.append((result.caught_at_s, "caught", "#2b7a3d"))
    if result.fell_at_s is not None:
        events.append((result.fell_at_s, "fell", LIMIT))
    for at, label, colour in events:
        for a in axes:
            a.axvline(at, color=colour, ls="-.", lw=1.0, alpha=0.9)
        axes[0].annotate(label, (at, 0.0), xycoords=axes[0].get_xaxis_transform(), xytext=(2, 2),
                         textcoords="offset points", fontsize=7, color=colour, rotation=90, va="bottom")


def _impulse_mn_m_s(impulse) -> str:
    """A push as written, in mN m s to four significant figures: the number, or the 3-vector's components
    (world frame)."""
    if isinstance(impulse, tuple):
        return "[" + ", ".join(f"{x * 1000:.4g}" for x in impulse) + "]"
    return f"{impulse * 1000:.4g}"


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

    from ..core.outputs import atomic_path

    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=110, format="png")
    plt.close(fig)
