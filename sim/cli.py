"""The `wheelbench` command line. Commands only parse options and call plain functions."""

from __future__ import annotations

import math
import os
import sys
from pathlib import Path
from typing import List, Optional

import typer

from .cli_print import dim, print_run, print_tune, progress
from .core.errors import WheelbenchError
from .core.safety import SAFETY_LINE as SAFETY

app = typer.Typer(add_completion=False, pretty_exceptions_enable=False, no_args_is_help=True,
                  help="Design checks for reaction-wheel balancing devices.")

ScenarioArg = typer.Argument(None, help="Scenario YAML file (default: the bundled desk pendulum).",
                             show_default=False)
SetOpt = typer.Option(None, "--set", help="Override a scenario value: key.path=value (repeatable).")


def _check_seed(value: Optional[int]) -> Optional[int]:
    """Reject a seed numpy cannot take, as one line naming the option (not a traceback)."""
    if value is not None and not 0 <= value < 2**63:
        from .core.errors import InputError
        raise InputError(f"--seed {value}: expected a whole number from 0 to 2^63 - 1 (as trial.seed)")
    return value


SeedOpt = typer.Option(None, "--seed", callback=_check_seed,
                       help="Seed for all randomness (default: the scenario's trial.seed).")


def _load(scenario: Optional[Path], overrides: Optional[List[str]]):
    """The validated scenario (every command takes one-wheel and 3D devices alike)."""
    from .model.scenario_yaml import load_scenario
    sc = load_scenario(scenario, overrides=tuple(overrides or ()))
    _announce_plugins(sc)
    return sc


_ANNOUNCED: set[str] = set()   # plug-in files this command has named on stderr (reset by main)


def _announce_plugins(sc) -> None:
    """One line on stderr per plug-in, the first time a scenario with it loads in this command:
    plug-in code runs with the user's rights (the README says so too)."""
    from .strategies import plugin_origin, plugin_specs
    estimator = sc.sensors.estimator
    for spec in plugin_specs(sc.strategy) + ([estimator] if estimator is not None and estimator.is_plugin else []):
        origin = plugin_origin(spec)
        if origin in _ANNOUNCED:
            continue
        _ANNOUNCED.add(origin)
        target = spec.kind.partition(":")[0]
        how = (f"imports module {target!r} from wherever Python finds it ({origin})"
               if ":" in spec.kind and not target.endswith(".py") else f"runs {origin}")
        what = "strategy" if spec is not estimator else "estimator"
        print(f"wheelbench: note: {what} plug-in {spec.kind!r} {how}; a scenario with a plug-in is a program "
              "and runs with your rights", file=sys.stderr)


@app.callback()
def _options(allow_outside: bool = typer.Option(
        False, "--allow-plugins-outside",
        help="Load strategy plug-in files from outside the scenario's folder (they run as programs). "
             "Give it before the command; the same as WHEELBENCH_ALLOW_PLUGINS_OUTSIDE=1.")):
    """Design checks for reaction-wheel balancing devices."""
    if allow_outside:
        from .strategies import ALLOW_OUTSIDE_ENV
        os.environ[ALLOW_OUTSIDE_ENV] = "1"    # inherited by worker processes; main() restores it


VideoOpt = typer.Option(None, "--video", help="Also write a clip of the trial: .mp4 or .gif (by suffix).")
FpsOpt = typer.Option(30, "--fps", help="Clip frames per second.")
SizeOpt = typer.Option("960x540", "--size", help="Clip size WIDTHxHEIGHT in pixels (even numbers).")
CameraOpt = typer.Option(None, "--camera", help="Clip camera: axis (along the pivot) or oblique "
                                                 "(default: axis for one-wheel hinge devices, oblique for 3D ones).",
                         show_default=False)


@app.command()
def run(scenario: Optional[Path] = ScenarioArg,
        out: Path = typer.Option(Path("runs/latest"), "--out", help="Output folder."),
        set_: Optional[List[str]] = SetOpt, seed: Optional[int] = SeedOpt,
        force: bool = typer.Option(False, "--force", help="Write into a non-empty folder not made by wheelbench "
                                                          "(and replace an existing --video file)."),
        video: Optional[Path] = VideoOpt, fps: int = FpsOpt, size: str = SizeOpt,
        camera: Optional[str] = CameraOpt):
    """Simulate one trial; write metrics.json, trace.csv and summary.png (and a clip with --video)."""
    from .core.options import check_clip_frames
    from .core.outputs import check_out_path
    from .run.runfiles import run_to_folder
    from .media.video import clip_options, write_clip
    check_out_path(out)
    sc = _load(scenario, set_)
    clip = clip_options(video, fps=fps, size=size, camera=camera, force=force) if video else None
    if clip:
        check_clip_frames(sc.trial.duration, clip["fps"], option=f"--video {video}")
    result, metrics = run_to_folder(sc, out, seed=seed, force=force)
    print_run(sc, metrics, out)
    if clip:
        info = write_clip(result, clip.pop("path"), **clip)
        typer.echo(f"wrote {info.path} ({info.frames} frames, {info.duration_s:.2f} s at {info.fps} fps)")


@app.command()
def compare(first: Optional[Path] = typer.Argument(None, help="First scenario (default: the bundled desk pendulum).",
                                                   show_default=False),
            second: Optional[Path] = typer.Argument(None, help="Second scenario (default: the first again).",
                                                    show_default=False),
            video: Optional[Path] = typer.Option(None, "--video", help="The side-by-side clip: .mp4 or .gif (by suffix)."),
            out: Optional[Path] = typer.Option(None, "--out", help="Folder for the metrics table (compare.md, "
                                               "compare.json) and the overlaid plots (compare.png)."),
            set_: Optional[List[str]] = typer.Option(None, "--set", help="Override for both sides: key.path=value."),
            set_a: Optional[List[str]] = typer.Option(None, "--set-a", help="Override for the first side only."),
            set_b: Optional[List[str]] = typer.Option(None, "--set-b", help="Override for the second side only, "
                                                      "e.g. --set-b strategy.kind=pid to compare two strategies."),
            label: Optional[List[str]] = typer.Option(None, "--label", help="Label of a side (give it twice)."),
            seed: Optional[int] = SeedOpt, fps: int = FpsOpt, size: str = SizeOpt,
            camera: Optional[str] = CameraOpt,
            force: bool = typer.Option(False, "--force", help="Replace an existing --video file; write into a "
                                                              "non-empty --out folder not made by wheelbench.")):
    """Run two trials (two scenarios, or one with different --set-b), one-wheel or 3D; print their metrics side
    by side, and write them with overlaid plots (--out) and side by side in one clip (--video)."""
    from .core.errors import InputError
    from .core.options import check_clip_frames, check_labels
    from .core.outputs import check_out_path
    from .media.video import clip_options
    from .run.comparison import compare_outputs, table_lines
    check_labels(label)
    if video is None and out is None:
        raise InputError("--video, --out: give one or both (a clip, a folder for the table and plots)")
    if out is not None:
        check_out_path(out)
    scenarios = [_load(first, [*(set_ or ()), *(set_a or ())]),
                 _load(second if second is not None else first, [*(set_ or ()), *(set_b or ())])]
    clip = clip_options(video, fps=fps, size=size, camera=camera, force=force) if video is not None else None
    if clip:
        check_clip_frames(max(s.trial.duration for s in scenarios), clip["fps"], option=f"--video {video}")
    results, labels, rows, info = compare_outputs(scenarios, label, seed=seed, out=out, force=force, clip=clip)
    for tag, r in zip("AB", results):
        typer.echo(f"{tag}: {r.scenario.name} | {r.scenario.strategy.kind}: {r.outcome}"
                   + (f" ({r.message})" if r.message else ""))
    for line in table_lines(rows, labels):
        typer.echo(line)
    if out is not None:
        typer.echo(f"wrote {out}/compare.md, compare.json, compare.png")
    if info is not None:
        typer.echo(f"wrote {info.path} ({info.frames} frames, {info.duration_s:.2f} s at {info.fps} fps)")
    typer.echo(SAFETY)


@app.command()
def validate(scenario: Path = typer.Argument(..., help="Scenario YAML file."),
             set_: Optional[List[str]] = SetOpt):
    """Check a scenario file and print its derived device figures and the strategy parameters in use."""
    from .model.device import Device
    from .model.device_figures import figures_text, power_text
    sc = _load(scenario, set_)
    if sc.is_planar:
        lines = figures_text(Device.from_scenario(sc), sc.strategy) + power_text(sc)
    else:
        from .model.device3d import Device3D
        from .model.device_figures3d import figures3d_text, jump_rest_tilt
        device = Device3D.from_scenario(sc)
        lines = figures3d_text(device, sc.strategy, rest_tilt_rad=jump_rest_tilt(sc, device)) + power_text(sc)
        if device.locked:
            lines.append("body locked at its start attitude (a bench rig: the clamp takes the wheels' reaction)")
    typer.echo(f"{scenario}: valid.")
    for line in lines:
        typer.echo(f"  {line}")


@app.command()
def gains(scenario: Optional[Path] = ScenarioArg,
          format_: str = typer.Option("json", "--format", help="json, c (a C header with a reference function) "
                                                               "or text (for reading)."),
          set_: Optional[List[str]] = SetOpt):
    """Print the balance law's gains (LQR or PID) for firmware, with model-based starting values (stdout)."""
    from .core.errors import InputError
    from .studies.gains import gains_report, to_c_header, to_json, to_text
    writers = {"json": to_json, "c": to_c_header, "text": to_text}
    if format_ not in writers:
        raise InputError(f"--format: expected 'json', 'c' or 'text', found {format_!r}")
    sc = _load(scenario, set_)
    if not sc.is_planar:    # one to three wheels: the multi-input LQR's gain matrices
        from .model.device3d import Device3D
        from .studies import gains_multi
        params = sc.strategy.params if sc.strategy.kind == "lqr" else None   # else Bryson's defaults
        report = gains_multi.device_gains_report(Device3D.from_scenario(sc), source=sc.source, params=params)
        writers = {"json": gains_multi.to_json, "c": gains_multi.to_c_header, "text": gains_multi.to_text}
        typer.echo(writers[format_](report), nl=format_ == "json")
        return
    report = gains_report(sc)
    typer.echo(writers[format_](report), nl=format_ == "json")


@app.command()
def fit(log: Path = typer.Argument(..., help="CSV bench log with units in the header (t_s, angle_rad, ...)."),
        test: str = typer.Option(..., "--test", help="free-swing, spin-up or coast-down."),
        scenario: Optional[Path] = typer.Option(None, "--scenario", help="Scenario giving m g d, inertias, friction."),
        wheel: Optional[int] = typer.Option(None, "--wheel", help="spin-up, coast-down: the wheel the log was "
                                            "taken on, from 1 in the scenario's order (needed for several wheels)."),
        axis: Optional[str] = typer.Option(None, "--axis", help="free-swing on a ball mount: x or y, the world axis "
                                           "(body upright) it swings about."),
        out: Path = typer.Option(Path("runs/fit"), "--out", help="Output folder."),
        force: bool = typer.Option(False, "--force", help="Write into a non-empty folder not made by wheelbench.")):
    """Fit model parameters to a bench log; write fit.json, fit.png, patch.yaml."""
    from .core.errors import InputError
    from .fit.bench3d import pick_wheel
    from .fit.fit_files import write_fit_outputs
    from .fit.bench_tests import TESTS, fit_log
    from .fit.logs import read_log, wheel_aliases
    from .core.outputs import check_out_path
    if test not in TESTS:
        raise InputError(f"--test: unknown test {test!r}; known: {', '.join(TESTS)}")
    if wheel is not None and test == "free-swing":
        raise InputError(f"--wheel {wheel}: free-swing fits the body's swing, not a wheel; leave --wheel out")
    if axis is not None and axis not in ("x", "y"):
        raise InputError(f"--axis {axis!r}: expected x or y")
    check_out_path(out)
    sc = _load(scenario, None) if scenario is not None else None
    if sc is not None and test != "free-swing":
        wheel = pick_wheel(sc, wheel, test=test) + 1 if not sc.is_planar or wheel is not None else None
    # a 3D trace's tilt_x is the angle of a swing about x (hinge, or a ball's --axis x)
    aliases = wheel_aliases(wheel, hinge_angle=test == "free-swing" and axis != "y")
    result = fit_log(read_log(log, aliases=aliases), test, scenario=sc, wheel=wheel, axis=axis)
    written, notes = write_fit_outputs(result, out, log_path=str(log),
                                       scenario_path=str(scenario) if scenario else None, force=force)
    for key, (value, sigma) in result.values.items():
        typer.echo(f"{key:40s} {value:.6g}" + (f" +- {sigma:.2g}" if sigma is not None else ""))
    for note in notes:
        typer.echo(f"note: {note}")
    typer.echo(f"wrote {', '.join(str(p) for p in written)}")
    if test != "free-swing":
        typer.echo(SAFETY)


@app.command()
def apply(scenario: Path = typer.Argument(..., help="Scenario YAML file to patch."),
          patches: List[Path] = typer.Argument(..., help="Patch files (YAML mappings of scenario keys), in order."),
          out: Optional[Path] = typer.Option(None, "--out", help="Write the patched scenario to this file."),
          in_place: bool = typer.Option(False, "--in-place", help="Replace the scenario file itself."),
          force: bool = typer.Option(False, "--force", help="Replace an existing --out file.")):
    """Merge patches (from fit, tune or by hand) into a scenario, keeping its comments and layout.

    Without --out or --in-place the patched scenario is printed. The result is validated before
    anything is written, and written atomically.
    """
    from .model.scenario_edit import apply_command
    result, written = apply_command(scenario, list(patches), out=out, in_place=in_place, force=force)
    if written is None:
        typer.echo(result.text, nl=False)
        for note in result.notes:
            typer.echo(f"note: {note}", err=True)
        return
    for note in result.notes:
        typer.echo(f"note: {note}")
    typer.echo(f"wrote {written}")


TrialsOpt = typer.Option(None, "--trials", help="Monte Carlo trials over the scenario's tolerances.")
WorkersOpt = typer.Option(None, "--workers", help="Local worker processes (default: all cores).")
ClusterOpt = typer.Option(None, "--cluster", help="Address of a running dask.distributed scheduler.")
ForceOpt = typer.Option(False, "--force", help="Write into a non-empty folder not made by wheelbench.")


def _load_raw(scenario: Optional[Path], overrides: Optional[List[str]], workers: Optional[int] = None,
              cluster: Optional[str] = None):
    """The raw scenario mapping (re-validated per trial by check, sweep and catch-map), options checked first."""
    from .core.errors import InputError
    from .core.options import check_cluster, check_workers
    from .model.scenario_yaml import load_raw
    check_workers(workers)
    check_cluster(cluster)
    if workers is not None and cluster is not None:
        raise InputError("--workers and --cluster: give one (the cluster's scheduler decides its workers)")
    raw, where = load_raw(scenario, tuple(overrides or ()))
    from .model.scenario_yaml import validate_loaded
    sc = validate_loaded(raw, where=where)  # bad input fails here, before an --out folder is made
    _announce_plugins(sc)
    return raw, where


@app.command()
def check(scenario: Optional[Path] = ScenarioArg,
          out: Path = typer.Option(Path("runs/check"), "--out", help="Output folder."),
          trials: Optional[int] = TrialsOpt, workers: Optional[int] = WorkersOpt,
          cluster: Optional[str] = ClusterOpt, set_: Optional[List[str]] = SetOpt, force: bool = ForceOpt):
    """Judge a design: swing-up, hold, largest push, Monte Carlo, burst and thermal checks (per wheel on 3D devices).

    Writes verdict.json, report.md and plots. Exit code 0 when every criterion passes, 1 when any fails.
    """
    from .core.options import check_trials
    from .core.outputs import check_out_path, prepare_out_dir
    from .model.scenario_yaml import validate_loaded
    from .studies.verdict_report import print_verdict, write_check_outputs
    from .studies.verdicts import DEFAULT_TRIALS, run_check
    check_trials(trials)
    check_out_path(out)
    raw, where = _load_raw(scenario, set_, workers, cluster)  # validated there
    sc = validate_loaded(raw, where=where)
    if not sc.is_planar:   # a 3D device: its own battery and files
        from .studies.verdict_report3d import write_check_outputs3d as write_check_outputs  # noqa: F811
        from .studies.verdicts3d import run_check3d as run_check  # noqa: F811
        if sc.body.mount == "floor":   # the floor's criteria too; a jump law its own battery
            from .studies.check_floor import run_check_floor as run_check  # noqa: F811
            from .studies.check_floor import write_check_outputs_floor as write_check_outputs  # noqa: F811
    n = DEFAULT_TRIALS if trials is None else trials
    out_dir = prepare_out_dir(out, force=force)
    bar, update = progress("Monte Carlo")
    with bar:
        done = [0]

        def one_done():
            done[0] += 1
            update(done[0], n)
        outcome = run_check(raw, where, trials=n, workers=workers, cluster=cluster,
                            on_stage=lambda text: bar.console.print(dim(f"{text}...")), on_done=one_done)
    write_check_outputs(outcome, out_dir)
    print_verdict(outcome.verdict, out_dir)
    if not outcome.verdict["passed"]:
        raise SystemExit(1)


@app.command()
def sweep(scenario: Optional[Path] = ScenarioArg,
          vary: List[str] = typer.Option(..., "--vary", help="KEY=LO..HI:N (units allowed) or KEY=a,b,c; repeatable."),
          out: Path = typer.Option(Path("runs/sweep"), "--out", help="Output folder (re-run to resume)."),
          trials: int = typer.Option(0, "--trials", help="Monte Carlo trials per point (0: the nominal design only)."),
          workers: Optional[int] = WorkersOpt, cluster: Optional[str] = ClusterOpt,
          set_: Optional[List[str]] = SetOpt, force: bool = ForceOpt,
          color: Optional[str] = typer.Option(None, "--color", help="Metric the heat map shows (a numeric "
                                                                     "results.csv column, e.g. wheel_runaway_time_s)."),
          wait: bool = typer.Option(False, "--wait", help="If another command is writing into --out, wait for it "
                                                          "to finish instead of refusing.")):
    """Run a design grid; write results.csv and a line plot (one key) or heat map (two keys)."""
    from .core.options import check_trials
    from .core.outputs import check_out_path, prepare_out_dir
    from .media.plots import save_figure
    from .model.overrides import bare_number_note
    from .studies.sweep import check_varies, parse_vary, run_sweep
    from .studies.sweep_figure import check_color, sweep_figure
    check_color(color)
    check_trials(trials, minimum=0)
    check_out_path(out)
    raw, where = _load_raw(scenario, set_, workers, cluster)
    from .model.scenario_yaml import validate_loaded
    from .studies.sweep_figure import check_color_fits
    check_color_fits(color, validate_loaded(raw, where=where))
    varies = [parse_vary(v) for v in vary]
    check_varies(raw, where, varies)    # bad input is one line, before any note
    for v in varies:
        note = bare_number_note(raw, list(v.path), list(v.values), option="--vary", text=f"{v.key}=...")
        if note:
            typer.echo(note, err=True)
    out_dir = prepare_out_dir(out, force=force, wait=wait)
    bar, update = progress("sweep")
    with bar:
        points = run_sweep(raw, where, varies, out_dir, trials=trials, workers=workers, cluster=cluster,
                           on_progress=update, color=color)
    fig = sweep_figure(varies, points, color=color)
    if fig is not None:
        save_figure(fig, out_dir / "sweep.png")
    typer.echo(f"{points.n_passed} of {len(points)} points pass; wrote {out_dir}/results.csv"
               + (", sweep.png" if fig is not None else " (no plot for more than two keys)"))
    typer.echo(SAFETY)


@app.command()
def tune(scenario: Optional[Path] = ScenarioArg,
         out: Path = typer.Option(Path("runs/tune"), "--out", help="Output folder (re-run the same command to resume)."),
         trials: int = typer.Option(40, "--trials", help="Evaluations (each: the check battery without Monte Carlo)."),
         objective: str = typer.Option("push", "--objective", help="push, swing_up_time, catch_area or peak_current; "
                                                                    "two separated by a comma give a Pareto front."),
         param: Optional[List[str]] = typer.Option(None, "--param", help="KEY=LO..HI[:log] (SI) to search too; "
                                                                         "repeatable."),
         only: bool = typer.Option(False, "--only", help="Search only the --param keys, not the strategy's defaults."),
         mc_trials: Optional[int] = typer.Option(None, "--mc-trials", help="Monte Carlo trials when re-checking the "
                                                                             "best (default: as check)."),
         workers: Optional[int] = WorkersOpt, cluster: Optional[str] = ClusterOpt, seed: Optional[int] = SeedOpt,
         storage: Optional[str] = typer.Option(None, "--storage", help="An optuna storage URL to share one study "
                                                                        "between machines (default: tune.db in --out)."),
         force: bool = ForceOpt):
    """Search the strategy's gains and weights for the design that passes check with the most margin.

    Exit code 0 when a passing design was found, 1 when none passed (the closest is shown).
    """
    from .core.errors import InputError
    from .core.options import MAX_TRIALS, check_trials
    from .core.outputs import check_out_path, prepare_out_dir
    from .model.scenario_yaml import default_scenario_path
    from .studies.tune import failed_criteria, is_better, search_setup
    from .studies.tune_outputs import run_tune
    from .studies.verdicts import DEFAULT_TRIALS
    check_trials(trials)
    mc = DEFAULT_TRIALS if mc_trials is None else mc_trials
    if not 1 <= mc <= MAX_TRIALS:
        raise InputError(f"--mc-trials {mc}: expected a whole number from 1 to {MAX_TRIALS:,}")
    check_out_path(out)
    raw, where = _load_raw(scenario, None, workers, cluster)
    setup = search_setup(raw, where, param_texts=param or [], only=only, objective=objective)   # before --out
    out_dir = prepare_out_dir(out, force=force)
    bar, _ = progress("tune")
    best = [None]
    with bar:
        def one_done(number, row):
            v, first = row["objectives"][0], setup.objectives[0]
            if v is not None and not failed_criteria(row, setup.objectives) and is_better(first, v, best[0]):
                best[0] = v
            bar.update(bar.task_ids[0], description=f"tune (best {best[0]:.4g})" if best[0] is not None else "tune",
                       advance=1, total=trials)
        outcome = run_tune(setup, where, Path(scenario) if scenario else default_scenario_path(), out_dir,
                           n_trials=trials, mc_trials=mc, workers=workers, cluster=cluster, seed=seed,
                           storage=storage, on_done=one_done)
    print_tune(outcome, out_dir)
    if outcome.winner is None:
        raise SystemExit(1)


@app.command("catch-map")
def catch_map_cmd(scenario: Optional[Path] = ScenarioArg,
                  grid: int = typer.Option(21, "--grid", help="Cells per side."),
                  angle_max: Optional[str] = typer.Option(None, "--angle-max", help="Largest start angle, e.g. '25 deg'."),
                  rate_max: Optional[str] = typer.Option(None, "--rate-max", help="Largest start body rate, e.g. '3 rad/s'."),
                  out: Path = typer.Option(Path("runs/catch_map"), "--out", help="Output folder."),
                  workers: Optional[int] = WorkersOpt, cluster: Optional[str] = ClusterOpt,
                  set_: Optional[List[str]] = SetOpt, force: bool = ForceOpt,
                  axes: Optional[str] = typer.Option(None, "--axes", help="3D devices: tilt-x,tilt-y (a ball "
                                                     "mount's default: two start tilts) or tilt,rate."),
                  direction: Optional[str] = typer.Option(None, "--direction", help="Ball mount: map tilt against "
                                                          "rate about the horizontal axis this far from world x, "
                                                          "e.g. '30 deg'."),
                  speed_factor_min: Optional[float] = typer.Option(None, "--speed-factor-min", help="Jump devices: "
                                                                   "smallest pre-brake wheel speed, as a factor of "
                                                                   "the needed speed (default 0.7)."),
                  speed_factor_max: Optional[float] = typer.Option(None, "--speed-factor-max", help="Jump devices: "
                                                                   "largest factor (default 1.5)."),
                  brake_time_min: Optional[str] = typer.Option(None, "--brake-time-min", help="Jump devices: "
                                                               "shortest brake engagement time (default '0 ms')."),
                  brake_time_max: Optional[str] = typer.Option(None, "--brake-time-max", help="Jump devices: "
                                                               "longest brake engagement time (default '100 ms')."),
                  jump: bool = typer.Option(False, "--jump", help="Map the jump (pre-brake wheel speed against "
                                            "brake engagement time): the default for a jump strategy; on one "
                                            "wheel also for swing_and_catch with a jump swing-up.")):
    """Map which start states (angle, body rate) the balance law catches; catch_map.csv and .png.
    With a jump strategy (or --jump on one wheel): which pre-brake wheel speeds and brake times get it up."""
    from .studies.catchmap import catch_map, write_catch_map
    from .core.errors import InputError
    from .core.outputs import check_out_path, prepare_out_dir
    from .core.units import parse_quantity
    check_out_path(out)
    raw, where = _load_raw(scenario, set_, workers, cluster)
    from .model.scenario_yaml import validate_loaded
    sc = validate_loaded(raw, where=where)
    jump_opts = {"--speed-factor-min": speed_factor_min, "--speed-factor-max": speed_factor_max,
                 "--brake-time-min": brake_time_min, "--brake-time-max": brake_time_max}
    from .studies.jumpmap import is_jump_map
    if is_jump_map(sc, jump=jump):
        _jump_map(raw, where, grid=grid, opts=jump_opts, others={"--angle-max": angle_max, "--rate-max": rate_max,
                  "--axes": axes, "--direction": direction}, out=out, workers=workers, cluster=cluster, force=force)
        return
    given = [k for k, v in jump_opts.items() if v is not None] + (["--jump"] if jump else [])
    if given:
        raise InputError(f"{given[0]}: {sc.source} has no jump to map (strategy jump, or on one wheel "
                         "swing_and_catch with swing_up kind jump); the option is for jump maps")
    if sc.is_planar and (axes is not None or direction is not None):
        raise InputError(f"{'--axes' if axes is not None else '--direction'}: {sc.source} describes a one-wheel "
                         "hinge device; its map is angle against rate (the option is for 3D devices)")
    limits = []
    for name, text, kind in (("--angle-max", angle_max, "angle"), ("--rate-max", rate_max, "angular_speed")):
        try:
            limits.append(None if text is None else abs(parse_quantity(text, kind)))
        except ValueError as exc:
            raise InputError(f"{name}: {exc}") from None
    from .studies.catchmap import check_map_options
    check_map_options(grid=grid, angle_max=limits[0], rate_max=limits[1])
    if not sc.is_planar:    # one to three wheels, hinge or ball
        _catch_map3d(raw, where, sc, grid=grid, limits=limits, axes=axes, direction=direction, out=out,
                     workers=workers, cluster=cluster, force=force)
        return
    out_dir = prepare_out_dir(out, force=force)
    bar, update = progress("catch map")
    with bar:
        result = catch_map(raw, where, grid=grid, angle_max=limits[0], rate_max=limits[1], workers=workers,
                           cluster=cluster, on_progress=update)
    write_catch_map(result, out_dir)
    caught = sum(bool(r["caught"]) for r in result["rows"])
    typer.echo(f"{caught} of {len(result['rows'])} start states caught by {result['strategy']} "
               f"(angle +-{result['angle_max_rad']:.3f} rad, rate +-{result['rate_max_rad_s']:.3f} rad/s); "
               f"wrote {out_dir}/catch_map.csv, catch_map.png")
    typer.echo(SAFETY)


def _jump_map(raw, where, *, grid, opts, others, out, workers, cluster, force) -> None:
    from .core.errors import InputError
    from .core.outputs import prepare_out_dir
    from .core.units import parse_quantity
    from .studies.jumpmap import (BRAKE_TIME_RANGE_S, SPEED_FACTOR_RANGE, check_jump_map, jump_map, start_note,
                                  write_jump_map)
    given = [k for k, v in others.items() if v is not None]
    if given:
        raise InputError(f"{given[0]}: a jump device's map is pre-brake wheel speed against brake engagement time; "
                         "give --speed-factor-min/-max and --brake-time-min/-max")
    factors = [SPEED_FACTOR_RANGE[i] if opts[k] is None else opts[k]
               for i, k in enumerate(("--speed-factor-min", "--speed-factor-max"))]
    times = []
    for i, k in enumerate(("--brake-time-min", "--brake-time-max")):
        try:
            times.append(BRAKE_TIME_RANGE_S[i] if opts[k] is None else parse_quantity(opts[k], "time"))
        except ValueError as exc:
            raise InputError(f"{k}: {exc}") from None
    check_jump_map(raw, where, grid=grid, speed_factor=tuple(factors), brake_time_s=tuple(times))
    note = start_note(raw)
    if note:
        typer.echo(note, err=True)
    out_dir = prepare_out_dir(out, force=force)
    bar, update = progress("jump map")
    with bar:
        result = jump_map(raw, where, grid=grid, speed_factor=tuple(factors), brake_time_s=tuple(times),
                          workers=workers, cluster=cluster, on_progress=update)
    write_jump_map(result, out_dir)
    up = sum(bool(r["got_up"]) for r in result["rows"])
    typer.echo(f"{up} of {len(result['rows'])} jumps got up (one attempt each; speed factor {factors[0]:g} to "
               f"{factors[1]:g} of the needed speed, brake engagement {times[0] * 1e3:g} to {times[1] * 1e3:g} ms); "
               f"wrote {out_dir}/catch_map.csv, catch_map.json, catch_map.png")
    from .studies.jumpmap import HELD_S, undecided
    if undecided(result):
        typer.echo(f"{undecided(result)} cells undecided: the trial ended less than {HELD_S:g} s after the brake; "
                   "give a longer trial.duration")
    typer.echo(SAFETY)


def _catch_map3d(raw, where, sc, *, grid, limits, axes, direction, out, workers, cluster, force) -> None:
    from .core.errors import InputError
    from .core.outputs import prepare_out_dir
    from .core.units import parse_quantity
    from .studies.catchmap3d import axis_labels, catch_map3d, map_kind, write_catch_map3d
    try:
        phi = None if direction is None else parse_quantity(direction, "angle")
    except ValueError as exc:
        raise InputError(f"--direction: {exc}") from None
    map_kind(sc, axes=axes, direction_rad=phi, rate_given=limits[1] is not None)   # before --out is made
    out_dir = prepare_out_dir(out, force=force)
    bar, update = progress("catch map")
    with bar:
        result = catch_map3d(raw, where, grid=grid, angle_max=limits[0], rate_max=limits[1], axes=axes,
                             direction_rad=phi, workers=workers, cluster=cluster, on_progress=update)
    write_catch_map3d(result, out_dir)
    caught = sum(bool(r["caught"]) for r in result["rows"])
    ranges = ", ".join(f"{label} +-{(math.degrees(m) if '[deg]' in label else m):.3g}"
                       for label, m in zip(axis_labels(result), (result["angle_max_rad"], result["rate_max_rad_s"]
                                                                 or result["angle_max_rad"])))
    typer.echo(f"{caught} of {len(result['rows'])} start states caught by {result['strategy']} ({ranges}); "
               f"largest tilt the wheels can hold (statics): {math.degrees(result['holdable_tilt_rad']):.3g} deg; "
               f"wrote {out_dir}/catch_map.csv, catch_map.json, catch_map.png")
    typer.echo(SAFETY)


def main(argv: Optional[list[str]] = None) -> int:
    """Entry point: our errors become one line on stderr and exit code 2."""
    from .core.outputs import forget_fresh_dirs, release_locks
    from .strategies import ALLOW_OUTSIDE_ENV
    forget_fresh_dirs()  # only folders made by this command may be removed on its error
    _ANNOUNCED.clear()
    allowed = os.environ.get(ALLOW_OUTSIDE_ENV)
    try:
        return _main(argv)
    finally:
        release_locks()  # the --out folder's lock: the next command may write there
        # --allow-plugins-outside holds for this command only (main runs many times in tests)
        if allowed is None:
            os.environ.pop(ALLOW_OUTSIDE_ENV, None)
        else:
            os.environ[ALLOW_OUTSIDE_ENV] = allowed


def _main(argv: Optional[list[str]]) -> int:
    from .core.outputs import fault_message
    try:
        code = app(args=argv, standalone_mode=False)
    except WheelbenchError as exc:
        print(f"wheelbench: {exc}", file=sys.stderr)
        from .core.outputs import remove_fresh_dirs
        remove_fresh_dirs()  # an --out folder made before the error was found: nothing written
        return 2
    except KeyboardInterrupt:
        print("wheelbench: interrupted", file=sys.stderr)
        return 130
    except SystemExit as exc:
        return exc.code if isinstance(exc.code, int) else 0
    except OSError as exc:  # a full disk or a read-only folder met while writing: one line, what to do
        message = fault_message(exc)
        if message is None:
            raise
        print(f"wheelbench: {message}", file=sys.stderr)
        return 2
    except Exception as exc:  # click's usage errors arrive here in non-standalone mode
        usage_errors, aborts = _click_error_types()
        if isinstance(exc, usage_errors):
            if type(exc).__name__ == "NoArgsIsHelpError":  # bare `wheelbench`: the help is the answer
                exc.show()
            else:  # one line, like our own errors
                print(f"wheelbench: {exc.format_message()} (see --help)", file=sys.stderr)
            return 2
        if isinstance(exc, aborts):
            print("wheelbench: aborted", file=sys.stderr)
            return 1
        raise
    if code == 130:  # typer turns Ctrl-C into Exit(130) and, in this mode, returns the code
        print("wheelbench: interrupted", file=sys.stderr)
        return 130
    return code if isinstance(code, int) and not isinstance(code, bool) else 0


def _click_error_types() -> tuple[tuple, tuple]:
    """(usage-error classes, abort classes) of click and of the click copy newer typer releases
    ship inside themselves (typer 0.29 raises its own copies, which click's classes do not catch)."""
    import click

    usage = {click.exceptions.ClickException}
    usage.update(c for c in typer.BadParameter.__mro__ if c.__name__ == "ClickException")
    return tuple(usage), (click.exceptions.Abort, typer.Abort)


def entry() -> None:
    """Console-script wrapper: exit with main()'s code."""
    sys.exit(main())


if __name__ == "__main__":
    entry()
