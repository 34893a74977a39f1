"""Two finished trials side by side (`wheelbench compare`): their metrics in one table, per-wheel rows
included, planar or 3D on either side; the files compare.md, compare.json and compare.png.

Rows name the quantity with its unit. Tilts are unsigned angles from upright, deg: a 3D trial's
`peak_tilt_rad` and `final_tilt_rad`; for a planar trial the body angle wrapped to (-pi, pi] and
taken as its size (up to the fall, as the planar metrics' totals). Per-wheel rows come from a 3D
trial's `wheels` list and from a planar trial's scalar keys (its one wheel); a side with fewer
wheels shows "-" in the other's rows.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from ..core.angles import wrap_angles
from ..core.outputs import write_json, write_text
from ..media.compare_plot import compare_figure
from ..media.plots import save_figure
from .metrics import trial_metrics
from .metrics3d import trial_metrics3d

DEG = 180.0 / math.pi

SUMMARY_ROWS = (
    ("outcome", "outcome", None), ("cause", "cause", None), ("strategy", "strategy", None),
    ("wheel_count", "wheel_count", None), ("mount", "mount", None),
    ("caught_at_s", "caught_at_s", None), ("settle_time_s", "settle_time_s", None), ("fell_at_s", "fell_at_s", None),
    ("peak_tilt_deg", "peak_tilt_rad", DEG), ("final_tilt_deg", "final_tilt_rad", DEG),
    ("max_tilt_after_catch_deg", "max_angle_after_catch_rad", DEG),
    ("pushes_survived", "pushes_survived", None),
    ("peak_wheel_speed_rad_s", "peak_wheel_speed_rad_s", None), ("wheel_speed_margin", "wheel_speed_margin", None),
    ("peak_current_a", "peak_current_a", None), ("rms_current_a", "rms_current_a", None),
    ("peak_voltage_v", "peak_voltage_v", None), ("energy_from_supply_j", "energy_from_supply_j", None),
)
"""(row name, metrics key, scale) of the rows above the per-wheel ones."""
WHEEL_ROWS = ("peak_speed_rad_s", "speed_limit_rad_s", "speed_margin", "peak_current_a", "rms_current_a",
              "peak_voltage_v")


def side_metrics(result) -> dict:
    """The trial's metrics (`trial_metrics` or `trial_metrics3d`) with what the table reads beside
    them on both kinds: `wheels`, `wheel_count`, `mount`, `peak_tilt_rad`, `final_tilt_rad`,
    `pushes_survived`."""
    if getattr(result, "is_3d", False):
        m = trial_metrics3d(result)
    else:
        m = trial_metrics(result)
        tr = result.trace
        end = min(int(round(m["totals_until_s"] / tr.step_s)), tr.n)
        angle = np.asarray(tr.view("angle"), dtype=float)
        m["peak_tilt_rad"] = float(np.max(np.abs(wrap_angles(angle[:end])))) if end else None
        m["final_tilt_rad"] = abs(float(wrap_angles(angle[-1:])[0])) if tr.n else None
        m["mount"], m["wheel_count"] = "hinge", 1
        m["wheels"] = [{"peak_speed_rad_s": m["peak_wheel_speed_rad_s"], "speed_limit_rad_s": m["wheel_speed_limit_rad_s"],
                        "speed_margin": m["wheel_speed_margin"], "peak_current_a": m["peak_current_a"],
                        "rms_current_a": m["rms_current_a"], "peak_voltage_v": m["peak_voltage_v"]}]
    pushes = m.get("pushes") or []
    m["pushes_survived"] = f"{sum(1 for p in pushes if p.get('survived'))} of {len(pushes)}" if pushes else None
    return m


def comparison_rows(metrics) -> list[dict]:
    """Rows {"quantity", "a", "b"} of two sides' metrics (from `side_metrics`), per-wheel rows last."""
    rows = []
    for name, key, scale in SUMMARY_ROWS:
        vals = [m.get(key) for m in metrics]
        if scale is not None:
            vals = [v * scale if isinstance(v, (int, float)) and v is not None else v for v in vals]
        rows.append({"quantity": name, "a": vals[0], "b": vals[1]})
    for i in range(max(len(m["wheels"]) for m in metrics)):
        for key in WHEEL_ROWS:
            vals = [m["wheels"][i][key] if i < len(m["wheels"]) else None for m in metrics]
            rows.append({"quantity": f"wheel{i + 1}_{key}", "a": vals[0], "b": vals[1]})
    return rows


def cell(value) -> str:
    """A table cell: floats to 4 significant digits, None as '-'."""
    if value is None:
        return "-"
    if isinstance(value, float):
        return f"{value:.4g}" if math.isfinite(value) else str(value)
    return str(value)


def table_lines(rows, labels) -> list[str]:
    """The table as aligned plain-text lines (the terminal's)."""
    body = [(r["quantity"], cell(r["a"]), cell(r["b"])) for r in rows]
    head = ("quantity", *labels)
    widths = [max(len(x[j]) for x in [head, *body]) for j in range(3)]
    return ["  ".join(x[j].ljust(widths[j]) for j in range(3)).rstrip() for x in [head, *body]]


def table_markdown(rows, labels) -> str:
    """The table as Markdown: one row per quantity, a column per side."""
    esc = [str(lab).replace("|", "\\|") for lab in labels]
    lines = [f"| quantity | {esc[0]} | {esc[1]} |", "|---|---:|---:|"]
    lines += [f"| {r['quantity']} | {cell(r['a'])} | {cell(r['b'])} |" for r in rows]
    return "\n".join(lines) + "\n"


def write_comparison(results, labels, out_dir: Path) -> list[dict]:
    """Write compare.md, compare.json and compare.png for two finished trials into `out_dir` (made
    by `prepare_out_dir`). Returns the table's rows."""
    metrics = [side_metrics(r) for r in results]
    rows = comparison_rows(metrics)
    sources = [r.scenario.source for r in results]
    write_text(out_dir / "compare.md", f"# compare\n\n- A: {labels[0]} ({sources[0]})\n- B: {labels[1]} "
                                       f"({sources[1]})\n\n" + table_markdown(rows, labels))
    write_json(out_dir / "compare.json", {"labels": list(labels), "scenarios": sources, "rows": rows,
                                          "metrics": {"a": metrics[0], "b": metrics[1]}})
    save_figure(compare_figure(results, list(labels)), out_dir / "compare.png")
    return rows


def compare_outputs(scenarios, labels, *, seed: int | None = None, out: Path | None = None, force: bool = False,
                    clip: dict | None = None, progress: bool = True) -> tuple:
    """Run two loaded scenarios; write the table and plots into `out` (when given) and the side-by-side
    clip (`clip`: the keywords from `media.video.clip_options`, or None).

    `labels` : two labels, or None for "A: name | strategy" and "B: ...". The `out` folder is
    checked before anything is simulated. Returns (results, labels, rows, ClipInfo or None).
    """
    from ..core.options import check_labels
    from ..core.outputs import prepare_out_dir
    from ..media.video import write_side_by_side
    from .trial import run_trial
    check_labels(labels)
    out_dir = prepare_out_dir(out, force=force) if out is not None else None
    results = [run_trial(sc, seed=seed) for sc in scenarios]
    if not labels:
        labels = [f"{tag}: {r.scenario.name} | {r.scenario.strategy.kind}" for tag, r in zip("AB", results)]
    labels = list(labels)
    rows = write_comparison(results, labels, out_dir) if out_dir is not None else comparison_rows(
        [side_metrics(r) for r in results])
    info = None
    if clip is not None:
        clip = dict(clip)
        info = write_side_by_side(results, labels, clip.pop("path"), progress=progress, **clip)
    return results, labels, rows, info
