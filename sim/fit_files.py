"""A fit to files: fit.json, fit.png, patch.yaml and (with a scenario) scenario_fitted.yaml.

Everything is computed and the merged scenario validated before the output folder is touched;
each file is then written atomically (`sim.outputs`), so a failure leaves nothing half-written.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import yaml

from .fitting import FitResult
from .overrides import deep_merge
from .outputs import prepare_out_dir, write_json, write_text

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


def merged_scenario(scenario_path: str | Path, patch: dict) -> dict:
    """The scenario file's raw mapping with `patch` merged in, validated (raises ScenarioError).

    A fitted motor.back_emf_constant replaces a speed_constant (a scenario gives one of the two);
    a strategy plug-in named by a relative file path is made absolute, since the merged file is
    written elsewhere.
    """
    from .scenario import read_yaml, validate_scenario

    path = Path(scenario_path)
    raw = read_yaml(path)
    merged = deep_merge(raw, patch)
    if "back_emf_constant" in patch.get("motor", {}):
        merged.get("motor", {}).pop("speed_constant", None)
    strategy = merged.get("strategy")
    if isinstance(strategy, dict) and isinstance(strategy.get("plugin"), str):
        target, _, cls = strategy["plugin"].partition(":")
        if target.endswith(".py") and not Path(target).is_absolute():
            strategy["plugin"] = f"{(path.parent / target).resolve()}:{cls}"
    validate_scenario(merged, where=f"{path} merged with the fit")
    return merged


def _yaml_ready(value):
    """Plain Python floats rounded to 7 significant digits (bare numbers in a scenario are SI)."""
    if isinstance(value, dict):
        return {k: _yaml_ready(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_yaml_ready(v) for v in value]
    if isinstance(value, (float, np.floating)):
        return float(f"{float(value):.7g}")
    return value


def write_fit_outputs(result: FitResult, out: str | Path, *, log_path: str, scenario_path: str | None = None,
                      force: bool = False) -> list[Path]:
    """Write the fit's files into `out` (folder rules of `prepare_out_dir`). Returns the paths written."""
    merged = merged_scenario(scenario_path, _yaml_ready(result.patch)) if scenario_path else None
    fig = fit_figure(result)
    out_dir = prepare_out_dir(out, force=force)
    written = [out_dir / "fit.json", out_dir / "fit.png", out_dir / "patch.yaml"]
    write_json(written[0], fit_report(result, log_path=log_path, scenario_path=scenario_path))
    from .plots import save_figure
    save_figure(fig, written[1])
    head = (f"# Scenario keys determined by `wheelbench fit --test {result.test}` from {log_path}.\n"
            "# SI values (bare numbers are SI). Merge into a scenario; a motor.back_emf_constant replaces\n"
            "# motor.speed_constant.\n")
    body = yaml.safe_dump(_yaml_ready(result.patch), sort_keys=False) if result.patch else "{}\n"
    write_text(written[2], head + body)
    if merged is not None:
        written.append(out_dir / "scenario_fitted.yaml")
        head = f"# {scenario_path} with the fit from {log_path} merged in (wheelbench fit --test {result.test}).\n"
        write_text(written[3], head + yaml.safe_dump(merged, sort_keys=False, allow_unicode=True))
    return written


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
