"""Files of a `check`: verdict.json, report.md and its plots, and the terminal table."""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

from ..core.outputs import write_json, write_text
from ..core.safety import SAFETY_NOTES
from ..media.plots import INK, ACCENT, LIMIT, MUTED, save_figure, summary_figure
from .sensing_checks import sensing_markdown
from .verdicts import CheckOutcome

PASS_COLOUR, FAIL_COLOUR = "#2f7d4a", LIMIT


def format_value(name: str, value) -> str:
    """A criterion's value for people: units from the key's suffix, fractions as percentages."""
    if value is None:
        return "none (settles)" if name == "wheel_runaway_time_s" else "unknown"
    if isinstance(value, float) and not math.isfinite(value):
        return "inf"
    if name.endswith(("_margin", "_headroom", "_fraction", "_change")):
        return f"{100 * value:.1f}%"
    for suffix, unit, scale in (("_n_m_s", "mN m s", 1e3), ("_time_s", "s", 1.0), ("_rad", "deg", 180 / math.pi),
                                ("_c", "degC", 1.0), ("_s", "s", 1.0), ("_v", "V", 1.0)):
        if name.endswith(suffix):
            return f"{value * scale:.4g} {unit}"
    return f"{value:.4g}"


def write_check_outputs(outcome: CheckOutcome, out_dir: Path, *, run_figure=None, pushes_figure=None,
                        report=None) -> list[str]:
    """Write the plots, report.md and verdict.json (last, so it only exists when all went well).

    `run_figure(result)`, `pushes_figure(pushes)` and `report(verdict, images)` default to the
    planar ones (`sim.studies.verdict_report3d` hands in the 3D ones)."""
    run_figure, pushes_figure = run_figure or summary_figure, pushes_figure or push_figure
    written = []
    for name, result in outcome.runs.items():
        save_figure(run_figure(result), out_dir / f"{name}.png")
        written.append(f"{name}.png")
    save_figure(pushes_figure(outcome.pushes), out_dir / "pushes.png")
    written.append("pushes.png")
    keys = list(outcome.verdict["monte_carlo"]["tolerances"])
    write_text(out_dir / "monte_carlo.csv", monte_carlo_csv(outcome.mc_rows, keys))
    write_text(out_dir / "report.md", (report or report_markdown)(outcome.verdict, written))
    write_json(out_dir / "verdict.json", outcome.verdict)
    return written + ["monte_carlo.csv", "report.md", "verdict.json"]


MC_COLUMNS = ("outcome", "passed", "failed_criteria", "message")


def monte_carlo_csv(rows: list[dict], keys: list[str]) -> str:
    """monte_carlo.csv: one row per trial, its seed, every drawn value (SI, named by its `tolerances`
    key), the outcome, whether it passed and the criteria it failed (`;`-separated)."""
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(["trial", "seed", *keys, *MC_COLUMNS])
    for i, r in enumerate(rows):
        drawn = r.get("drawn") or {}
        writer.writerow([i, r.get("seed", ""), *[repr(drawn[k]) if k in drawn else "" for k in keys],
                         r.get("outcome", ""), bool(r.get("passed")), r.get("fail_reasons") or "",
                         " ".join(str(r.get("message") or "").split())])
    return buf.getvalue()


def push_figure(pushes: dict):
    """The bisection's tries: impulse against survived, per direction."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(7.5, 2.8), constrained_layout=True)
    for row, (direction, p) in enumerate(pushes.items()):
        for order, (impulse, ok) in enumerate(p["evals"]):
            ax.scatter(impulse * 1e3, row, color=PASS_COLOUR if ok else FAIL_COLOUR, marker="o" if ok else "x", zorder=3)
            ax.annotate(str(order + 1), (impulse * 1e3, row), textcoords="offset points", xytext=(0, 7),
                        fontsize=6, color=MUTED, ha="center")
        ax.axvline(p["max_survived_n_m_s"] * 1e3, ymin=row / 2 + 0.05, ymax=row / 2 + 0.45, color=ACCENT, lw=1.5)
    ax.set_yticks(range(len(pushes)), list(pushes))
    ax.set_ylim(-0.6, len(pushes) - 0.4)
    ax.set_xlabel("push: angular impulse about the pivot [mN m s]")
    ax.set_title("largest push survived (o survived, x lost; numbers give the order tried)", color=INK, fontsize=9)
    ax.grid(True, axis="x", color="#dde3e8", lw=0.6)
    ax.spines[["top", "right"]].set_visible(False)
    return fig


def report_markdown(v: dict, images: list[str]) -> str:
    lines = [f"# Check: {v['name']}", "",
             f"Scenario `{v['scenario']}`, strategy `{v['strategy']}`.", "",
             f"**Verdict: {'PASS' if v['passed'] else 'FAIL'}**", "",
             "| criterion | value | limit | result | note |", "|---|---|---|---|---|"]
    for c in v["criteria"]:
        lines.append(f"| {c['name']} | {format_value(c['name'], c['value'])} | {format_value(c['name'], c['limit'])} "
                     f"| {'pass' if c['passed'] else 'FAIL'} | {c['note']} |")
    why = runaway_sentence(v)
    if why:
        lines += ["", why]
    b = v["burst"]
    lines += ["", "## Wheel burst check", "",
              f"Runaway speed (no-load speed at full supply): {b['runaway_speed_rad_s']:.1f} rad/s "
              f"({b['runaway_speed_rad_s'] * 60 / (2 * math.pi):.0f} rpm).", "",
              "| part | material | stress | strength (basis) | safety factor | note |", "|---|---|---|---|---|---|"]
    for p in b["parts"]:
        stress = "-" if p["stress_pa"] is None else f"{p['stress_pa'] / 1e6:.3g} MPa"
        strength = "unknown" if p["strength_pa"] is None else f"{p['strength_pa'] / 1e6:.3g} MPa ({p['strength_basis']})"
        sf = "-" if p["safety_factor"] is None else f"{p['safety_factor']:.3g}"
        lines.append(f"| {p['part']} | {p['material'] or '-'} | {stress} | {strength} | {sf} | {p['note']} |")
    th = v["thermal"]
    lines += ["", "## Winding temperature", "",
              f"{format_value('_c', th['steady_winding_temperature_c'])} at {th['rms_current_a']:.3g} A RMS: "
              f"{th['basis']} (the figure `sweep` reports too). Holding upright only: "
              f"{format_value('_c', th.get('hold_steady_winding_temperature_c'))}; peaks over the battery's runs "
              "from ambient: " + ", ".join(f"{k} {format_value('_c', t)}" for k, t in th["peak_over_runs_c"].items())
              + "."]
    lines += monte_carlo_markdown(v["monte_carlo"])
    lines += ["", "## Largest push", "",
              f"{v['max_push_survived_n_m_s'] * 1e3:.3g} mN m s in the worse ({v['max_push_direction']}) direction; "
              + "; ".join(f"{d}: {p['max_survived_n_m_s'] * 1e3:.3g} mN m s" for d, p in v["pushes"].items())
              + ". Bisection to 5%, from upright at rest, push after 0.5 s, 3 s to recover.", ""]
    lines += sensing_markdown(v.get("sensing") or {})
    lines += run_causes_markdown(v)
    lines += ["## Plots", ""] + [f"![{Path(img).stem}]({img})" for img in images] + [""]
    lines += ["## Safety", ""] + [f"- {s}" for s in SAFETY_NOTES] + [""]
    return "\n".join(lines)


def monte_carlo_markdown(mc: dict) -> list[str]:
    """report.md's Monte Carlo section (a blank line first; the failures line is empty when none failed)."""
    return ["", "## Monte Carlo", "",
            f"{mc['passed_trials']} of {mc['trials']} trials passed"
            + (f" (95% Wilson score interval {100 * mc['pass_fraction_low']:.1f}-"
               f"{100 * mc['pass_fraction_high']:.1f}%)" if mc.get("pass_fraction_low") is not None else "")
            + "; each trial's draws, outcome and failed criteria are in monte_carlo.csv. "
            "Tolerances drawn uniformly within their band: "
            + ", ".join(f"`{k}` {t}" for k, t in mc["tolerances"].items()) + ".",
            ("Failures: " + ", ".join(f"{k} x{n}" for k, n in mc["failures"].items()) + ".") if mc["failures"] else ""]


NARROW_TERMINAL = 110   # columns below which the notes are printed under the table


def runaway_sentence(v: dict) -> str:
    """One sentence on why the wheel runs away, when `wheel_runaway_time_s` failed ("" otherwise)."""
    crit = next((c for c in v["criteria"] if c["name"] == "wheel_runaway_time_s"), None)
    holds = v.get("runaway_holds") or []
    if crit is None or crit["passed"] or not holds:
        return ""
    h = max(holds, key=lambda x: abs(x["bias_rad"]))
    bias = f"{math.degrees(h['bias_rad']):+.2f} deg"
    if h["predicted"] == "ramp":
        return (f"Why the wheel runs away: with the angle sensor off by {bias} the law holds the *measured* angle "
                "at zero, so the body leans off balance and gravity's steady torque can only be answered by a wheel "
                "that keeps accelerating until it reaches its no-load speed, the torque runs out and the body falls "
                "(add wheel-speed feedback, e.g. LQR or an outer wheel-speed loop).")
    return (f"Why the wheel runs away: with the angle sensor off by {bias} the body must be held off its measured "
            "upright by a steady torque from the wheel, and this law lets the wheel speed keep growing instead of "
            "settling at an offset, until the wheel reaches its no-load speed and the torque runs out.")


def failed_runs(v: dict) -> list[tuple[str, dict]]:
    """The battery's runs that ended other than balanced or completed, as (name, run)."""
    return [(name, r) for name, r in v.get("runs", {}).items() if r["outcome"] not in ("balanced", "completed")]


def run_causes_markdown(v: dict) -> list[str]:
    """report.md's section on the battery's runs: outcome and, for each failed run, its cause."""
    lines = ["## Runs", "", "| run | outcome | cause | why |", "|---|---|---|---|"]
    for name, r in v.get("runs", {}).items():
        lines.append(f"| {name} | {r['outcome']} | {r.get('cause') or '-'} | {r.get('cause_detail') or '-'} |")
    return lines + [""]


def print_verdict(v: dict, out: Path) -> None:
    """The terminal table, ending with the safety cautions."""
    from rich.console import Console
    from rich.table import Table

    from rich.text import Text

    console = Console()
    # the criterion's name is never cut or folded (a user greps for it); on a narrow terminal the
    # notes go below the table, where they have the whole width
    notes_below = console.width < NARROW_TERMINAL
    # user strings (the scenario's name, a plug-in's path, notes quoting them) are Text: no markup
    table = Table(title=Text(f"{v['name']} - {v['strategy']}: {'PASS' if v['passed'] else 'FAIL'}"))
    table.add_column("criterion", no_wrap=True, min_width=max((len(c["name"]) for c in v["criteria"]), default=9))
    for col in ("value", "limit", "result"):
        table.add_column(col, no_wrap=True)
    if not notes_below:
        table.add_column("note", overflow="fold")
    for c in v["criteria"]:
        row = [c["name"], format_value(c["name"], c["value"]), format_value(c["name"], c["limit"]),
               "[green]pass[/green]" if c["passed"] else "[bold red]FAIL[/bold red]"]
        table.add_row(*row, *([] if notes_below else [Text(str(c["note"]))]))
    console.print(table)
    if notes_below:
        for c in v["criteria"]:
            if c["note"]:
                console.print(Text(f"{c['name']}: {c['note']}"), overflow="fold")
    for name, r in failed_runs(v):
        console.print(f"{name} run: {r['outcome']}, cause {r.get('cause') or '-'}: {r.get('cause_detail') or '-'}",
                      markup=False, highlight=False)
    mc = ", monte_carlo.csv" if v.get("monte_carlo") is not None else ""   # a floor jump check with --trials 0 runs none
    console.print(Text(f"wrote {out}/verdict.json, report.md{mc} and plots"), soft_wrap=True)   # paths stay whole
    for s in SAFETY_NOTES:
        console.print(f"[dim]Safety: {s}[/dim]")
