"""A tune from the command to files: the study, the re-check of the best, and what is written.

Files in the output folder: `tune.csv` (one row per evaluation), `best_patch.yaml` (ready for
`wheelbench apply`), `best_scenario.yaml` (the scenario with the patch applied, comments kept),
`verdict.json` and `report.md` of the winner (as `check` writes them), `tune.png` (objective
over evaluations, and which parameters mattered most), and `tune.db` (the study, for resuming).
"""

from __future__ import annotations

import copy
import csv
import io
import math
from dataclasses import dataclass, field
from pathlib import Path

import yaml

from ..model.overrides import set_path
from .tune import OBJECTIVES, Param, failed_criteria, gain_sign
from .tune_study import Evaluation


@dataclass
class TuneOutcome:
    """What a tune found: the winner (None when no design passed), the closest when none passed,
    the evaluations, the files written and notes."""
    winner: Evaluation | None
    closest: Evaluation | None
    verdict: dict | None
    evaluations: list[Evaluation]
    front: list[Evaluation] = field(default_factory=list)
    written: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    params: list = field(default_factory=list)
    objectives: list = field(default_factory=list)
    recheck_failed: dict = field(default_factory=dict)   # evaluation number -> criteria its full check failed


def ranked(evals: list[Evaluation], objectives: list[str]) -> list[Evaluation]:
    """Feasible evaluations, best first (by the first objective; two objectives: the Pareto front
    first, each front by the first objective)."""
    feasible = [e for e in evals if not failed_criteria(e.row, objectives) and e.row["objectives"][0] is not None]
    key = _sort_key(objectives)
    if len(objectives) == 1:
        return sorted(feasible, key=key)
    front = pareto_front(feasible, objectives)
    rest = [e for e in feasible if e not in front]
    return sorted(front, key=key) + sorted(rest, key=key)


def _sort_key(objectives):
    sign = -gain_sign(objectives[0])   # best first
    return lambda e: (sign * e.row["objectives"][0], e.number)


def pareto_front(evals: list[Evaluation], objectives: list[str]) -> list[Evaluation]:
    """Non-dominated evaluations (every objective at least as good, one better, dominates)."""
    signs = [gain_sign(o) for o in objectives]

    def score(e):
        return [s * (v if v is not None else -math.inf * s) for s, v in zip(signs, e.row["objectives"])]

    out = []
    for e in evals:
        se = score(e)
        if not any(all(a >= b for a, b in zip(score(o), se)) and any(a > b for a, b in zip(score(o), se))
                   for o in evals if o is not e):
            out.append(e)
    return out


def closest(evals: list[Evaluation], objectives: list[str]) -> Evaluation | None:
    """The evaluation with the fewest failed criteria (then the best first objective)."""
    if not evals:
        return None
    key = _sort_key(objectives)
    return min(evals, key=lambda e: (len(failed_criteria(e.row, objectives)), key(e) if e.row["objectives"][0]
                                     is not None else (math.inf, e.number)))


def scenario_with(raw: dict, params: list[Param], values: dict) -> dict:
    out = copy.deepcopy(raw)
    for p in params:
        set_path(out, list(p.path), p.assigned(values[p.key]), where="tune")
    return out


def best_patch(raw: dict, params: list[Param], values: dict) -> dict:
    """The top-level sections the parameters live in, as they are with the values set (a list
    such as LQR weights goes whole: a patch replaces lists, it does not merge them)."""
    full = scenario_with(raw, params, values)
    return {top: full[top] for top in dict.fromkeys(p.path[0] for p in params)}


# ----------------------------------------------------------------------------- files

def write_tune_csv(path: Path, evals: list[Evaluation], params: list[Param], objectives: list[str]) -> None:
    from ..core.outputs import write_text
    crit_names = list(dict.fromkeys(c["name"] for e in evals for c in e.row["criteria"]))
    head = (["evaluation", "seed"] + [p.key for p in params]
            + [f"{o}_{OBJECTIVES[o][2].replace(' ', '_').replace('/', '_per_')}" for o in objectives]
            + ["feasible", "failed_criteria"] + crit_names + ["error"])
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(head)
    for e in evals:
        values = {c["name"]: c["value"] for c in e.row["criteria"]}
        failed = failed_criteria(e.row, objectives)
        w.writerow([e.number, e.seed] + [_param_cell(p, e.params[p.key]) for p in params]
                   + ["" if v is None else repr(float(v)) for v in e.row["objectives"]]
                   + [not failed, ";".join(failed)] + [_cell(values.get(n)) for n in crit_names]
                   + [e.row.get("error") or ""])
    write_text(path, buf.getvalue())


def _param_cell(p: Param, value) -> str:
    """The value the evaluation's scenario had (`Param.assigned`)."""
    value = p.assigned(value)
    return str(value) if p.integer else repr(float(value))


def _cell(v) -> str:
    if v is None:
        return ""
    return repr(float(v)) if isinstance(v, (int, float)) and not isinstance(v, bool) else str(v)


def write_patch_files(out_dir: Path, scenario_path: Path, patch: dict, *, objectives: list[str]) -> list[str]:
    """best_patch.yaml, and best_scenario.yaml through the scenario editor (comments kept)."""
    from ..core.outputs import write_text
    from ..model.scenario_edit import apply_patches, plain_value
    patch = plain_value(patch)
    head = (f"# Parameters found by `wheelbench tune` ({', '.join(objectives)}); SI values.\n"
            f"# Merge with: wheelbench apply {scenario_path} best_patch.yaml --out my_scenario.yaml\n")
    write_text(out_dir / "best_patch.yaml", head + yaml.safe_dump(patch, sort_keys=False))
    edit = apply_patches(scenario_path, [patch], dest=out_dir / "best_scenario.yaml", patch_names=["best_patch.yaml"])
    write_text(out_dir / "best_scenario.yaml",
               f"# {scenario_path} with best_patch.yaml applied (wheelbench tune).\n" + edit.text)
    return ["best_patch.yaml", "best_scenario.yaml"]


def tune_figure(evals: list[Evaluation], params: list[Param], objectives: list[str], importances: dict | None):
    """Objective over evaluations (feasible dots, infeasible crosses, best so far) and the
    parameters' importances."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from ..media.plots import ACCENT, INK, MUTED

    obj = objectives[0]
    sign = gain_sign(obj)
    fig, (ax, axi) = plt.subplots(1, 2, figsize=(11, 4.2), constrained_layout=True, width_ratios=[3, 2])
    best, xs, ys = None, [], []
    for e in evals:
        v = e.row["objectives"][0]
        ok = not failed_criteria(e.row, objectives)
        if v is not None:
            ax.scatter(e.number, v, marker="o" if ok else "x", color=ACCENT if ok else MUTED, s=18, zorder=3)
        if ok and v is not None and (best is None or sign * v > sign * best):
            best = v
        if best is not None:
            xs.append(e.number)
            ys.append(best)
    if len(objectives) == 2:
        _pareto_panel(ax, evals, objectives)
        xs = []
    if xs:
        ax.step(xs, ys, where="post", color=INK, lw=1.2, label="best passing so far")
        ax.legend(loc="upper left", bbox_to_anchor=(0.0, -0.16), fontsize=8, frameon=False)
    if len(objectives) == 1:
        ax.set_xlabel("evaluation")
        ax.set_ylabel(f"{obj} [{OBJECTIVES[obj][2]}]")
    ax.set_title("o passes every other criterion, x fails one", fontsize=9, color=INK)
    if importances:
        names = list(importances)[::-1]
        axi.barh(names, [importances[n] for n in names], color=ACCENT)
        axi.set_xlabel("importance (PED-ANOVA)")
    else:
        axi.text(0.5, 0.5, "too few evaluations\nto rank the parameters", ha="center", va="center",
                 transform=axi.transAxes, color=MUTED)
        axi.set_axis_off()
    for a in (ax, axi):
        a.spines[["top", "right"]].set_visible(False)
    return fig


def _pareto_panel(ax, evals: list[Evaluation], objectives: list[str]) -> None:
    """Two objectives against each other: every evaluation, the Pareto front of the passing ones joined."""
    from ..media.plots import ACCENT, INK, MUTED
    ax.cla()
    for e in evals:
        a, b = e.row["objectives"][:2]
        if a is not None and b is not None:
            ok = not failed_criteria(e.row, objectives)
            ax.scatter(a, b, marker="o" if ok else "x", color=ACCENT if ok else MUTED, s=18, zorder=3)
    front = sorted((e.row["objectives"][0], e.row["objectives"][1]) for e in
                   pareto_front(ranked(evals, objectives), objectives))
    if front:
        ax.plot(*zip(*front), color=INK, lw=1.0, label="Pareto front of the passing ones")
        ax.legend(loc="upper left", bbox_to_anchor=(0.0, -0.16), fontsize=8, frameon=False)
    ax.set_xlabel(f"{objectives[0]} [{OBJECTIVES[objectives[0]][2]}]")
    ax.set_ylabel(f"{objectives[1]} [{OBJECTIVES[objectives[1]][2]}]")
    ax.set_title("o passes every other criterion, x fails one", fontsize=9, color=INK)


def importances(study, objectives: list[str]) -> dict | None:
    """Parameter importances of the first objective, or None when too few trials.

    PED-ANOVA (Watanabe et al., IJCAI 2023, as optuna implements it): how much each parameter's
    distribution among the best evaluations differs from its distribution among all of them; it
    needs no extra library (optuna's fANOVA needs scikit-learn).
    """
    import warnings

    import optuna
    if len(study.trials) < 4:
        return None
    # PED-ANOVA ranks what makes the target low: a maximised objective is negated
    sign = -gain_sign(objectives[0])
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")   # optuna's notes on degenerate quantiles; the figure says enough
            return optuna.importance.get_param_importances(
                study, evaluator=optuna.importance.PedAnovaImportanceEvaluator(),
                target=lambda t: sign * t.values[0])
    except (RuntimeError, ValueError, ZeroDivisionError):
        return None


# ----------------------------------------------------------------------------- the whole tune

def run_tune(setup, where: str, scenario_path: Path, out_dir: Path, *, n_trials: int, mc_trials: int,
             workers: int | None, cluster, seed: int | None, storage: str | None, on_done=None) -> TuneOutcome:
    """Search (`setup` from `tune.search_setup`), re-check the best with the full Monte Carlo, write
    the files. `out_dir` is prepared."""
    from .tune import RECHECK_BEST, run_battery
    from .tune_study import open_study, run_study, study_spec
    from .verdict_report import write_check_outputs

    sc, objectives, params, raw = setup.scenario, setup.objectives, setup.params, setup.raw
    base_seed = sc.trial.seed if seed is None else seed
    study = open_study(out_dir, storage=storage, spec=study_spec(raw, params, objectives, base_seed),
                       objectives=objectives, seed=base_seed, n_startup=min(10, max(3, n_trials // 4)))
    evals = run_study(study, raw, where, params, objectives, n_trials=n_trials, workers=workers, cluster=cluster,
                      base_seed=base_seed, on_done=on_done)
    outcome = TuneOutcome(winner=None, closest=None, verdict=None, evaluations=evals)
    write_tune_csv(out_dir / "tune.csv", evals, params, objectives)
    outcome.written.append("tune.csv")
    order = ranked(evals, objectives)
    outcome.front = pareto_front(order, objectives) if len(objectives) > 1 else order[:1]
    for cand in order[:RECHECK_BEST]:
        check = run_battery(scenario_with(raw, params, cand.params), where, trials=mc_trials, workers=workers,
                            cluster=cluster)
        if check.verdict["passed"]:
            outcome.winner, outcome.verdict = cand, check.verdict
            if sc.is_planar:
                outcome.written += write_check_outputs(check, out_dir)
            else:
                from .battery3d import write_battery3d
                outcome.written += write_battery3d(check, out_dir)
            outcome.written += write_patch_files(out_dir, scenario_path, best_patch(raw, params, cand.params),
                                                 objectives=objectives)
            break
        mc = check.verdict.get("monte_carlo") or {}
        why = ", ".join(f"{k} x{n}" for k, n in (mc.get("failures") or {}).items())
        failed = [c["name"] for c in check.verdict["criteria"] if not c["passed"]]
        outcome.notes.append(f"evaluation {cand.number} passed without Monte Carlo but failed the full check: "
                             + ", ".join(failed) + (f" (Monte Carlo trials failed on: {why})" if why else ""))
        outcome.recheck_failed.setdefault(cand.number, failed)
    if outcome.winner is None:
        outcome.closest = closest(evals, objectives)
        if outcome.closest is not None and not failed_criteria(outcome.closest.row, objectives) and order:
            outcome.closest = order[0]   # every feasible one failed only the full check: the best of those
        if outcome.closest is not None:
            from ..core.outputs import write_text
            from ..model.scenario_edit import plain_value
            write_text(out_dir / "closest_patch.yaml",
                       "# The closest design `wheelbench tune` found; it did NOT pass check (see the terminal and\n"
                       "# tune.csv for what it failed). SI values.\n"
                       + yaml.safe_dump(plain_value(best_patch(raw, params, outcome.closest.params)), sort_keys=False))
            outcome.written.append("closest_patch.yaml")
    from ..media.plots import save_figure
    save_figure(tune_figure(evals, params, objectives, importances(study, objectives)), out_dir / "tune.png")
    outcome.written.append("tune.png")
    outcome.params = params
    outcome.objectives = objectives
    return outcome
