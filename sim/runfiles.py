"""One trial to files: metrics.json, trace.csv, summary.png in an output folder."""

from __future__ import annotations

import os
import signal
import sys
from contextlib import contextmanager
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
    with plot_beside(result, out_dir / "summary.png", enabled=plot):
        with atomic_path(out_dir / "trace.csv") as tmp:
            write_csv(result.trace, tmp)
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
    pid = _fork_drawing(result, path) if enabled and hasattr(os, "fork") else None
    try:
        yield
    except BaseException:
        if pid:
            _stop(pid)
        raise
    if enabled and (pid is None or _exit_code(pid) != 0):
        save_figure(summary_figure(result), path)


def _fork_drawing(result, path: Path) -> int:
    sys.stdout.flush()
    sys.stderr.flush()
    pid = os.fork()
    if pid:
        return pid
    code = 1
    try:  # the child: draw, save, leave without running the parent's exit handlers
        from .parallel import _die_with_parent
        _die_with_parent()
        signal.signal(signal.SIGINT, signal.SIG_IGN)   # Ctrl-C is the parent's to handle
        save_figure(summary_figure(result), path)
        code = 0
    finally:
        os._exit(code)


def _exit_code(pid: int) -> int:
    _, status = os.waitpid(pid, 0)
    return os.waitstatus_to_exitcode(status)


def _stop(pid: int) -> None:
    try:
        os.kill(pid, signal.SIGKILL)
        os.waitpid(pid, 0)
    except OSError:
        pass
