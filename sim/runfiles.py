"""One trial to files: metrics.json, trace.csv, summary.png in an output folder."""

from __future__ import annotations

from pathlib import Path

from .metrics import trial_metrics
from .outputs import atomic_path, prepare_out_dir, write_json
from .plots import save_figure, summary_figure
from .trace import write_csv
from .trial import run_trial


def run_to_folder(scenario, out: str | Path, *, seed: int | None = None, force: bool = False,
                  plot: bool = True) -> tuple[object, dict]:
    """Run one trial of a loaded scenario and write its files. Returns (TrialResult, metrics).

    The folder is checked before anything is simulated, so bad options cost nothing.
    """
    out_dir = prepare_out_dir(out, force=force)
    result = run_trial(scenario, seed=seed)
    metrics = trial_metrics(result)
    metrics["seed"] = scenario.trial.seed if seed is None else seed
    metrics["scenario"] = scenario.source
    with atomic_path(out_dir / "trace.csv") as tmp:
        write_csv(result.trace, tmp)
    if plot:
        save_figure(summary_figure(result), out_dir / "summary.png")
    write_json(out_dir / "metrics.json", metrics)
    return result, metrics
