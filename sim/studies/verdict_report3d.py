"""Files of a 3D `check`: verdict.json, report.md, the runs' plots and the pushes' figure.

The terminal table is the planar one (`sim.studies.verdict_report.print_verdict`): it reads the
criteria, the runs and the safety cautions, which a 3D verdict states in the same keys.
"""

from __future__ import annotations

import math
from pathlib import Path

from ..core.safety import SAFETY_NOTES
from ..media.plots import ACCENT, INK, MUTED
from ..media.plots3d import summary_figure3d
from .verdict_report import (FAIL_COLOUR, PASS_COLOUR, format_value, monte_carlo_markdown, run_causes_markdown,
                             write_check_outputs)
from .sensing_checks import sensing_markdown
from .verdicts import CheckOutcome


def write_check_outputs3d(outcome: CheckOutcome, out_dir: Path) -> list[str]:
    """Write the runs' plots, pushes.png, monte_carlo.csv, report.md and verdict.json (last)."""
    return write_check_outputs(outcome, out_dir, run_figure=summary_figure3d, pushes_figure=push_figure3d,
                               report=report_markdown3d)


def push_figure3d(pushes: dict):
    """The bisection's tries about each direction: impulse against survived, a row per direction."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    rows = list(pushes)
    fig, ax = plt.subplots(figsize=(7.5, 1.0 + 0.35 * len(rows)), constrained_layout=True)
    worst = min(rows, key=lambda d: pushes[d]["max_survived_n_m_s"])
    for row, direction in enumerate(rows):
        p = pushes[direction]
        for impulse, ok in p["evals"]:
            ax.scatter(impulse * 1e3, row, color=PASS_COLOUR if ok else FAIL_COLOUR, marker="o" if ok else "x",
                       s=14, zorder=3)
        x = p["max_survived_n_m_s"] * 1e3
        ax.plot([x, x], [row - 0.35, row + 0.35], color=ACCENT if direction != worst else FAIL_COLOUR, lw=1.6)
    ax.set_yticks(range(len(rows)), [f"about {d}" for d in rows])
    ax.set_ylim(-0.6, len(rows) - 0.4)
    ax.invert_yaxis()
    ax.set_xlabel("push: angular impulse about the pivot, world axis [mN m s]")
    ax.set_title(f"largest push survived per direction (o survived, x lost; worst: about {worst})", color=INK, fontsize=9)
    ax.grid(True, axis="x", color="#dde3e8", lw=0.6)
    ax.tick_params(axis="y", labelsize=8, colors=MUTED)
    ax.spines[["top", "right"]].set_visible(False)
    return fig


def criteria_table(v: dict) -> list[str]:
    """report.md's criteria table, a row per criterion."""
    lines = ["| criterion | value | limit | result | note |", "|---|---|---|---|---|"]
    for c in v["criteria"]:
        lines.append(f"| {c['name']} | {format_value(c['name'], c['value'])} | {format_value(c['name'], c['limit'])} "
                     f"| {'pass' if c['passed'] else 'FAIL'} | {c['note']} |")
    return lines


def report_markdown3d(v: dict, images: list[str]) -> str:
    lines = [f"# Check: {v['name']}", "",
             f"Scenario `{v['scenario']}`, strategy `{v['strategy']}`, {v['mount']} mount, "
             f"{v['wheel_count']} wheel{'s' if v['wheel_count'] > 1 else ''}.", "",
             f"**Verdict: {'PASS' if v['passed'] else 'FAIL'}**", ""] + criteria_table(v)
    lines += _wheels_markdown(v) + _pushes_markdown(v) + _holds_markdown(v) + _axis_cost_markdown(v)
    lines += _monte_carlo_markdown(v["monte_carlo"])[1:]
    lines += sensing_markdown(v.get("sensing") or {})
    lines += run_causes_markdown(v)
    lines += ["## Plots", ""] + [f"![{Path(img).stem}]({img})" for img in images] + [""]
    lines += ["## Safety", ""] + [f"- {s}" for s in SAFETY_NOTES] + [""]
    return "\n".join(lines)


def _wheels_markdown(v: dict) -> list[str]:
    lines = ["", "## Each wheel", "",
             "| wheel | axis (body) | speed margin (run) | runaway speed | burst safety factor (weakest part) "
             "| winding, steady | winding peak over runs |", "|---|---|---|---|---|---|---|"]
    for w in v["wheels"]:
        b = w["burst"]
        parts = [p for p in b["parts"] if p["safety_factor"] is not None]
        weak = min(parts, key=lambda p: p["safety_factor"]) if parts else None
        sf = "unknown" if weak is None else f"{weak['safety_factor']:.3g} ({weak['part']})"
        axis = "[" + ", ".join(f"{a:.3g}" for a in w["axis"]) + "]"
        peaks = max(w["peak_winding_over_runs_c"].values())
        lines.append(f"| {w['wheel']} | {axis} | {100 * w['speed_margin']:.1f}% ({w['speed_margin_run']}) "
                     f"| {b['runaway_speed_rad_s']:.0f} rad/s ({b['runaway_speed_rad_s'] * 60 / (2 * math.pi):.0f} rpm) "
                     f"| {sf} | {w['winding_temperature_c']:.1f} degC at {w['rms_current_a']:.3g} A RMS "
                     f"(limit {w['max_winding_temperature_c']:g}) | {peaks:.1f} degC |")
    lines += ["", "Burst: rotating disk and ring formulas per part at the wheel's own runaway speed (no-load speed "
              "at full supply); winding: steady state at the RMS current of the scenario's own trial."]
    return lines


def _pushes_markdown(v: dict) -> list[str]:
    pushes = v["pushes"]
    return ["", "## Largest push", "",
            f"{v['max_push_survived_n_m_s'] * 1e3:.3g} mN m s about {v['max_push_direction']} (the worst direction); "
            + "; ".join(f"about {d}: {p['max_survived_n_m_s'] * 1e3:.3g}" for d, p in pushes.items())
            + " mN m s. Angular impulses about world horizontal axes (a hinge takes their x component), "
              "bisection to 5%, from upright at rest, push after 0.5 s, 3 s to recover.", ""]


def _holds_markdown(v: dict) -> list[str]:
    lines = ["## Bias holds", "", "| about | bias | outcome | wheel | drift | runaway at |", "|---|---|---|---|---|---|"]
    for h in v["runaway_holds"]:
        drift = "-" if h["drift_rad_s2"] is None else f"{h['drift_rad_s2']:.3g} +- {h['drift_se_rad_s2']:.2g} rad/s^2"
        when = "none" if h["runaway_time_s"] is None else f"{h['runaway_time_s']:.1f} s"
        lines.append(f"| {h['axis']} | {math.degrees(h['bias_rad']):+.2f} deg | {h['outcome']} | {h['wheel']} | {drift} | {when} |")
    lines += ["", "Each hold biases the angle sensor about one tilt axis (the other keeps the scenario's "
              "bias); the wheel shown is the first to reach its no-load speed, or the one drifting most.", ""]
    return lines + _predictions_markdown(v)


def _predictions_markdown(v: dict) -> list[str]:
    """Every wheel of every hold, simulated beside the linear model's prediction."""
    rows = [(h, w) for h in v["runaway_holds"] for w in h.get("wheels") or [] if w["predicted_steady_speed_rad_s"] is not None]
    if not rows:
        return []
    def num(x, fmt, unit=""):
        return "-" if x is None else f"{x:{fmt}}{unit}"
    lines = ["### Linear prediction beside the holds", "",
             "| about | bias | wheel | mean speed (sim) | steady speed (linear) | drift (sim) | drift (linear) "
             "| at its limit (linear) |", "|---|---|---|---|---|---|---|---|"]
    for h, w in rows:
        lines.append(f"| {h['axis']} | {math.degrees(h['bias_rad']):+.2f} deg | {w['wheel']} "
                     f"| {num(w['mean_wheel_speed_rad_s'], '.1f', ' rad/s')} | {w['predicted_steady_speed_rad_s']:.1f} rad/s "
                     f"| {num(w['drift_rad_s2'], '.3g', ' rad/s^2')} | {w['predicted_drift_rad_s2']:.3g} rad/s^2 "
                     f"| {num(w['predicted_limit_time_s'], '.0f', ' s') if w['predicted_limit_time_s'] is not None else 'never'} |")
    return lines + ["", "Linear: the discrete multi-wheel LQR loop on the upright linear model under the hold's "
                    "angle biases, the rate gyro's bias and the angle encoder's mean quantisation error, bearing "
                    "Coulomb torque as a voltage offset; drift over the hold's last third as the simulated hold's "
                    "is fitted; 'never': not within 10x requirements.run_time. Gyroscopic terms and the drive's "
                    "limits are not in it.", ""]


def _axis_cost_markdown(v: dict) -> list[str]:
    a = v.get("axis_cost")
    if not a:
        return []
    shares = ", ".join(f"wheel {i + 1}: {s:.3f} (axis {d:.1f} deg off the hinge)"
                       for i, (s, d) in enumerate(zip(a["hinge_torque_share"], a["axis_from_hinge_deg"])))

    def pair(key, scale, unit, fmt=".3g"):
        x, y = a[key] * scale, a["aligned_" + key] * scale
        change = f" ({100 * (x / y - 1):+.0f}%)" if y else ""
        return f"{x:{fmt}} {unit} against {y:{fmt}} {unit}{change}"
    return ["## What the tilted wheel axis costs", "",
            f"A hinge turns with the x component of a wheel's torque only; the rest loads the hinge bearing. "
            f"Hinge-wise torque share {shares}.", "",
            "Against the same design with every wheel axis along the hinge (its own LQR; the aligned twin "
            f"ended its trial {a['aligned_outcome']}):", "",
            f"- largest tilt the stall torque can hold: {pair('holdable_tilt_rad', 180 / math.pi, 'deg')}",
            f"- largest push survived (worst direction): {pair('max_push_survived_n_m_s', 1e3, 'mN m s')}",
            f"- peak wheel speed, the scenario's own trial: {pair('peak_wheel_speed_rad_s', 1.0, 'rad/s')}",
            f"- energy from the supply, the scenario's own trial: {pair('energy_from_supply_j', 1.0, 'J')}", ""]


def _monte_carlo_markdown(mc: dict | None) -> list[str]:
    if mc is None:
        return ["", "## Monte Carlo", "", "Not run (no trials).", ""]
    return monte_carlo_markdown(mc) + [""]
