"""What the commands print on the terminal: the run table, tune's result, progress bars, dim notes.

Beside `sim/cli.py` at the top of the layout (only the commands import it); the `check` table
lives with its report (`sim.studies.verdict_report.print_verdict`). User strings (names, plug-in
paths, messages quoting them) are printed as rich Text or escaped: never read as markup.
"""

from __future__ import annotations

import math
from pathlib import Path

from .core.safety import SAFETY_LINE as SAFETY


def progress(label: str):
    """A progress bar (sim.core.progress) as an on_progress(done, total) callback, and the Progress to close."""
    from .core.progress import progress_bar
    bar = progress_bar()
    task = bar.add_task(label, total=None)
    return bar, lambda done, total: bar.update(task, completed=done, total=total)

def print_tune(outcome, out_dir: Path) -> None:
    from rich.console import Console
    from rich.markup import escape

    from .studies.tune import OBJECTIVES, failed_criteria
    console = Console()
    obj = outcome.objectives[0]
    unit = OBJECTIVES[obj][2]
    start = next((e for e in outcome.evaluations if e.number == 0), None)
    pick = outcome.winner or outcome.closest
    for note in outcome.notes:
        console.print(escape(f"note: {note}"))
    if pick is None:
        console.print("no evaluation finished")
        return
    value = pick.row["objectives"][0]
    failing = failed_criteria(pick.row, outcome.objectives) or outcome.recheck_failed.get(pick.number, [])
    head = (f"best: evaluation {pick.number}, {obj} {value:.4g} {unit}" if outcome.winner is not None else
            f"no design passed; closest: evaluation {pick.number}, failing " + ", ".join(failing)
            + (" in the full check" if not failed_criteria(pick.row, outcome.objectives) else ""))
    # evaluation 0 is the starting point only when every key has one (tune_study.run_study)
    started = all(p.start is not None and p.low <= p.start <= p.high for p in outcome.params)
    if started and start is not None and start.row["objectives"][0] is not None and outcome.winner is not None:
        # a firmware define starts where the scenario has it, not from a model of the device
        label = "start" if any(p.as_written for p in outcome.params) else "model-based start"
        head += f" ({label}: {start.row['objectives'][0]:.4g} {unit})"
    console.print(escape(head))
    for p in outcome.params:
        digits = ".7g" if p.as_written else ".6g"   # a define: as the winner's scenario writes it
        console.print(escape(f"  {p.key} = {p.assigned(pick.params[p.key]):{digits}}"
                             + (f" (start {p.start:{digits}})" if p.start is not None else "")
                             + (f": {p.does}" if p.does else "")))
    if len(outcome.objectives) > 1:
        console.print(escape(f"Pareto front: {len(outcome.front)} designs (tune.csv has every evaluation)"))
    console.print(escape(f"wrote {out_dir}/" + ", ".join(outcome.written)), soft_wrap=True)   # paths stay whole
    console.print(f"[dim]{escape(SAFETY)}[/dim]")


def print_run(sc, m: dict, out: Path) -> None:
    from rich.console import Console
    from rich.markup import escape
    from rich.table import Table
    from rich.text import Text

    console = Console()
    # user strings (names, plug-in paths, messages quoting them) are Text: never read as markup
    table = Table(title=Text(f"{sc.name} - {m['strategy']}"), show_header=False, box=None)
    rows = [
        ("outcome", m["outcome"] + (f" ({m['message']})" if m.get("message") else "")),
        *([("cause", escape(f"{m['cause']}: {m['cause_detail']}"))] if m.get("cause") else []),
        *([("fell at", _fmt(m["fell_at_s"], "s") + " (totals up to here)")] if m.get("fell_at_s") is not None else []),
        ("caught at", _fmt(m["caught_at_s"], "s")), ("settle time", _fmt(m["settle_time_s"], "s")),
        ("peak wheel speed", f"{_fmt(m['peak_wheel_speed_rad_s'], 'rad/s')} of {m['wheel_speed_limit_rad_s']:.1f} rad/s"),
        ("peak current", f"{_fmt(m['peak_current_a'], 'A')} (rms {_fmt(m['rms_current_a'], 'A')})"),
        ("voltage saturated", f"{100 * m['voltage_saturated_fraction']:.1f}% of ticks"),
        ("energy from supply", _fmt(m["energy_from_supply_j"], "J")),
        *_power_rows(m),
        ("real-time factor", _fmt(m["real_time_factor"], "x")),
    ]
    if "wheels" in m:   # a 3D device: the tilt and each wheel (the rows above hold the worst wheel)
        at = [k for k, _ in rows].index("peak wheel speed")
        rows.insert(at, ("peak tilt", f"{_fmt(m['peak_tilt_rad'] and m['peak_tilt_rad'] * 57.29577951308232, 'deg')}"))
        for i, w in enumerate(m["wheels"], start=1):
            rows.insert(at + i, (f"wheel {i}", f"peak {_fmt(w['peak_speed_rad_s'], 'rad/s')} of "
                                              f"{w['speed_limit_rad_s']:.1f} rad/s, peak {_fmt(w['peak_current_a'], 'A')}"))
    if m.get("floor_friction") is not None:   # a body on the floor: how its contact held
        rows.append(("contact slip", f"{m['slip_m'] * 1e3:.3g} mm while balancing (limit {m['slip_limit_m'] * 1e3:g} mm)"
                     + ("" if m.get("slipped_at_s") is None else f", past it at {m['slipped_at_s']:.3f} s")))
        ratio = m.get("peak_friction_ratio")
        rows.append(("friction used", "-" if ratio is None else
                     f"peak |F_t|/F_n {ratio:.3g} of friction {m['floor_friction']:g}"
                     + (" (the contact slid)" if ratio >= 0.99 * m["floor_friction"] else "")))
        lifted = m.get("lifted_at_s")
        rows.append(("off the floor", _fmt(m["lift_off_s"], "s") + (
            f" (lifted while balancing at {lifted:.3f} s, {m['longest_lift_off_s'] * 1e3:.0f} ms at a stretch)"
            if lifted is not None else "")))
        if m.get("rest_face"):
            rows.append(("came to rest on", str(m["rest_face"])))
    if m.get("estimator") is not None:    # only with sensors.estimator / timing: today's table otherwise
        deg = 180.0 / math.pi
        rows.append((f"estimator ({m['estimator']}) error", "-" if m["estimator_angle_rms_error_rad"] is None else
                     f"{m['estimator_angle_rms_error_rad'] * deg:.3g} deg rms, {m['estimator_angle_peak_error_rad'] * deg:.3g} "
                     f"deg peak, {_mean_error_text(m, deg)} mean"))
    if m.get("loop_overruns") is not None:
        rows.append(("loop overruns", str(m["loop_overruns"])))
    for p in m.get("pushes", []):
        rows.append((f"push {_impulse_text(p['impulse_n_m_s'])} mN m s at {p['at_s']:.2f} s",
                     "survived" if p["survived"] else "not survived"))
    for k, v in rows:
        table.add_row(k, Text(v))
    console.print(table)
    console.print(Text(f"wrote {out}/metrics.json, trace.csv, summary.png"), soft_wrap=True)   # paths stay whole


POWER_EVENT_WORDS = {"battery_cutoff": ("battery cut-off", "every bridge off"), "driver_tripped": ("driver tripped", ""),
                     "bus_over_voltage": ("bus over-voltage", "every bridge off")}


def _power_rows(m: dict) -> list[tuple[str, str]]:
    """The power chain's rows (only when it ran: its keys are in the metrics)."""
    if "min_supply_voltage_v" not in m:
        return []
    rows = [("supply", f"{_fmt(m['min_supply_voltage_v'], 'V')} to {_fmt(m['peak_supply_voltage_v'], 'V')}"),
            ("charge used", _fmt(m["charge_used_mah"], "mAh")
             + ("" if m["battery_state_of_charge_end"] is None else f" ({m['battery_state_of_charge_end']:.1%} left)"))]
    if m["driver_trips"]:
        rows.append(("driver trips", str(m["driver_trips"])))
    events = m.get("power_events") or []
    if events:      # told even when the body held (a locked bench body cannot fall when the drive stops)
        shown = []
        for e in events[:3]:
            name, effect = POWER_EVENT_WORDS.get(e["cause"], (e["cause"], ""))
            who = [f"wheel {e['wheel']}"] if e.get("wheel") is not None else []
            shown.append(f"{name} at {e['at_s']:.3f} s" + (f" ({', '.join(who + ([effect] if effect else []))})"
                                                           if who or effect else ""))
        more = len(events) - len(shown)
        rows.append(("power events", "; ".join(shown) + (f"; {more} more in metrics.json" if more else "")))
    if m["pwm_dead_band_fraction"] is not None:
        rows.append(("PWM dead band", f"{100 * m['pwm_dead_band_fraction']:.1f}% of steps"))
    if m.get("reversals") is not None:
        rows.append(("reversals", f"{m['reversals']} (commands held at 0 on "
                                  f"{100 * m['reversal_held_fraction']:.1f}% of steps)"))
    return rows


def dim(text: str):
    """`text` dimmed, printed literally (no markup)."""
    from rich.text import Text
    return Text(text, style="dim")


def _mean_error_text(m: dict, deg: float) -> str:
    """The estimator's mean error: one angle (one wheel), or per tilt axis (a 3D device)."""
    if "estimator_angle_mean_error_rad" in m:
        return f"{m['estimator_angle_mean_error_rad'] * deg:+.3g} deg"
    return ", ".join(f"{v * deg:+.3g} deg about {a}" for a, v in zip("xy", m["estimator_tilt_mean_error_rad"]))


def _impulse_text(impulse) -> str:
    """A push's impulse in mN m s: a number, or a world-frame vector [x, y, z]."""
    if isinstance(impulse, (list, tuple)):
        return "[" + ", ".join(f"{1000 * v:.1f}" for v in impulse) + "]"
    return f"{impulse * 1000:.1f}"


def _fmt(value, unit: str) -> str:
    return "-" if value is None else f"{value:.4g} {unit}"
