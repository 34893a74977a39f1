"""A fit to files: fit.json, fit.png, patch.yaml and (with a scenario) scenario_fitted.yaml.

Everything is computed and the merged scenario validated before the output folder is touched;
each file is then written atomically (`sim.core.outputs`), so a failure leaves nothing half-written.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import yaml

from ..core.errors import ScenarioError
from ..core.outputs import prepare_out_dir, write_json, write_text
from .fitting import FitResult

CAUTION = ("Bench tests spin wheels and drive motors from batteries: guard the wheel and stay out of its plane, "
           "retain the hub positively, set a speed limit, and handle LiPo packs with a balance charger, never "
           "unattended. Fitted values are estimates from one log; they do not replace local codes or licensed practice.")
UNCERTAINTY = "one standard deviation, from the fit's covariance (linearised); scenario figures taken as exact"
INK, ACCENT, MUTED = "#1d2b3a", "#c2571a", "#7a8894"
PLOT_POINTS = 50_000
"""Most samples fit.png draws (a 10-minute log at 10 kHz has 6,000,000; the figure cannot show more)."""


def fit_report(result: FitResult, *, log_path: str, scenario_path: str | None) -> dict:
    """The content of fit.json."""
    return {
        "test": result.test,
        "log": log_path,
        "scenario": scenario_path,
        "uncertainty": UNCERTAINTY,
        "fitted": {k: {"value": v, "sigma": s} for k, (v, s) in result.values.items()},
        "facts": result.facts,
        "patch": result.patch,
        "notes": result.notes,
        "caution": CAUTION,
    }


def fitted_scenario(scenario_path: str | Path, patch: dict, *, dest: Path):
    """The scenario file with `patch` merged in by `sim.model.scenario_edit` (comments and layout kept,
    replaced keys and their tolerances handled, plug-in paths rewritten for `dest`'s folder).

    Returns (EditResult or None, problem or None): a merge that does not validate is reported,
    not raised, since the fit itself succeeded and its own files are still written.
    """
    from ..model.scenario_edit import apply_patches

    try:
        return apply_patches(scenario_path, [patch], dest=dest, patch_names=["the fit's patch"]), None
    except ScenarioError as exc:
        return None, f"scenario_fitted.yaml not written: {exc}"


NOTHING_TO_PATCH = ("nothing to patch: a free swing alone gives the period and the decay; turning them into "
                    "scenario values (body inertia correction, pivot friction) needs the scenario's m g d "
                    "(give --scenario)")


def write_fit_outputs(result: FitResult, out: str | Path, *, log_path: str, scenario_path: str | None = None,
                      force: bool = False) -> tuple[list[Path], list[str]]:
    """Write the fit's files into `out` (folder rules of `prepare_out_dir`).

    Returns (paths written, notes for the terminal). fit.json, fit.png and patch.yaml are always
    written; scenario_fitted.yaml only when the merged scenario validates.
    """
    from ..model.scenario_edit import plain_value

    patch = plain_value(result.patch)
    fig = fit_figure(result)
    out_dir = prepare_out_dir(out, force=force)
    # merged after the folder exists, so a plug-in path rewritten relative to it resolves
    edit, problem = fitted_scenario(scenario_path, patch, dest=out_dir / "scenario_fitted.yaml") \
        if scenario_path and patch else (None, None)
    notes = [] if patch else [NOTHING_TO_PATCH if result.test == "free-swing" and not scenario_path
                              else "nothing to patch: the fit found no scenario values to change"]
    notes += (edit.notes if edit else []) + ([problem] if problem else [])
    written = [out_dir / "fit.json", out_dir / "fit.png", out_dir / "patch.yaml"]
    report = fit_report(result, log_path=log_path, scenario_path=scenario_path)
    report["notes"] = list(report["notes"]) + notes
    write_json(written[0], report)
    from ..media.plots import save_figure
    save_figure(fig, written[1])
    head = (f"# Scenario keys determined by `wheelbench fit --test {result.test}` from {log_path}.\n"
            "# SI values (bare numbers are SI). Merge with `wheelbench apply SCENARIO patch.yaml`; a\n"
            "# motor.back_emf_constant replaces motor.speed_constant.\n")
    body = yaml.safe_dump(patch, sort_keys=False) if patch else "".join(f"# {n}\n" for n in notes) + "{}\n"
    write_text(written[2], head + body)
    if edit is not None:
        written.append(out_dir / "scenario_fitted.yaml")
        head = f"# {scenario_path} with the fit from {log_path} merged in (wheelbench fit --test {result.test}).\n"
        write_text(written[3], head + edit.text)
    return written, ([result.target_note] if result.target_note else []) + notes


def fit_figure(result: FitResult):
    """Data and model over time, with the residuals below (matplotlib Figure, Agg)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    p = result.plot
    t, data, model = np.asarray(p["t_s"]), np.asarray(p["data"]), np.asarray(p["model"])
    stride = max(1, -(-len(t) // PLOT_POINTS))   # a long log is drawn from every stride-th sample
    t, data, model = t[::stride], data[::stride], model[::stride]
    fig, (ax, axr) = plt.subplots(2, 1, figsize=(8.5, 6.0), sharex=True, height_ratios=[3, 1],
                                  constrained_layout=True)
    fig.suptitle(f"fit: {p['title']}", color=INK, fontsize=12, fontweight="bold")
    ax.plot(t, data, ".", color=MUTED, ms=2.0, label="log")
    ax.plot(t, model, color=ACCENT, lw=1.3, label="fitted model")
    ax.set_ylabel(p["label"])
    ax.legend(loc="upper right", fontsize=8, frameon=False)
    axr.plot(t, data - model, ".", color=INK, ms=1.5)
    axr.axhline(0.0, color=ACCENT, lw=0.8)
    unit = p["label"].rpartition("[")[2].rstrip("]") if "[" in p["label"] else ""
    axr.set_ylabel(f"residual [{unit}]" if unit else "residual")
    axr.set_xlabel("time from the log's first sample [s]")
    for a in (ax, axr):
        a.grid(True, color="#dde3e8", lw=0.6)
        a.spines[["top", "right"]].set_visible(False)
    return fig
