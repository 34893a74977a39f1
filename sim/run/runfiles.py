"""One trial to files (metrics.json, trace.csv, summary.png in an output folder); two trials side by
side in one clip (`compare`)."""

from __future__ import annotations

import os
from contextlib import contextmanager
from pathlib import Path

from ..core.isolation import fork_child
from ..core.outputs import atomic_path, prepare_out_dir, write_json
from ..media.plots import save_figure, summary_figure
from ..strategies.firmware import firmware_log_for
from .metrics import trial_metrics
from .metrics3d import trial_metrics3d
from .trace import write_csv
from .trace3d import write_csv3d
from .trial import run_trial


def run_to_folder(scenario, out: str | Path, *, seed: int | None = None, force: bool = False,
                  plot: bool = True) -> tuple[object, dict]:
    """Run one trial of a loaded scenario and write its files. Returns (TrialResult, metrics).

    The folder is checked before anything is simulated, so bad options cost nothing.
    """
    out_dir = prepare_out_dir(out, force=force)
    with firmware_log_for(scenario.strategy, out_dir / "firmware.log"):  # printf of compiled firmware
        result = run_trial(scenario, seed=seed)
    is_3d = getattr(result, "is_3d", False)
    metrics = trial_metrics3d(result) if is_3d else trial_metrics(result)
    metrics["seed"] = scenario.trial.seed if seed is None else seed
    metrics["scenario"] = scenario.source
    with plot_beside(result, out_dir / "summary.png", enabled=plot):
        with atomic_path(out_dir / "trace.csv") as tmp:
            (write_csv3d if is_3d else write_csv)(result.trace, tmp)
    write_json(out_dir / "metrics.json", metrics)
    return result, metrics


@contextmanager
def plot_beside(result, path: Path, *, enabled: bool = True):
    """Draw the summary plot in a forked child while the caller writes its other files.

    Importing matplotlib and drawing take about 1.5 s, a third of a 60 s run's wall time; on a
    second core they overlap the trace CSV. Where there is no fork, or the child did not finish
    cleanly, the plot is drawn here after the block (so a real error surfaces as it would have).
    The child writes through `atomic_path`, so the PNG is complete or absent.
    """
    def draw() -> None:
        if getattr(result, "is_3d", False):
            from ..media.plots3d import summary_figure3d
            save_figure(summary_figure3d(result), path)
        else:
            save_figure(summary_figure(result), path)

    child = fork_child(draw) if enabled and hasattr(os, "fork") else None
    try:
        yield
    except BaseException:
        if child is not None:
            child.kill()
        raise
    if enabled and (child is None or os.waitstatus_to_exitcode(child.wait()) != 0):
        draw()


def compare_to_clip(scenarios, labels, *, seed: int | None = None, progress: bool = True, **clip) -> tuple:
    """Run two loaded scenarios and write them side by side. Returns (results, ClipInfo).

    `labels` : two labels, or None for "A: name | strategy" and "B: ...". `clip` : the keywords
    from `clip_options`.
    """
    from ..core.options import check_labels
    from ..media.video import write_side_by_side
    check_labels(labels)
    results = [run_trial(sc, seed=seed) for sc in scenarios]
    if not labels:
        labels = [f"{tag}: {r.scenario.name} | {r.scenario.strategy.kind}" for tag, r in zip("AB", results)]
    info = write_side_by_side(results, list(labels), clip.pop("path"), progress=progress, **clip)
    return results, info
