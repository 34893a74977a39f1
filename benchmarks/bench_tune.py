"""Tune's own overhead: evaluations per second of `tune` against the same evaluations run as a sweep.

    python benchmarks/bench_tune.py [--evals 12] [--workers 2] [--rounds 3]

One round: (a) `tune` on a small LQR scenario for --evals evaluations (optuna's sampler, SQLite
storage, asking in rounds of --workers, telling in order, then re-checking the best with a short
Monte Carlo, which is left out of the timing: it is the same `check` a user would run after a
sweep); (b) the very same evaluations (the parameters tune tried, the same evaluation function
`sim.studies.tune.evaluate`) run as a sweep runs its points: one `run_tasks` pool over all of them, no
sampler, no database. The figure is (a)'s evaluations per second over (b)'s (target >= 0.9).
Rounds alternate a and b, so a slow spell of this shared machine hits both. No assertion: figures
are printed.
"""

from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

# the bundled desk pendulum as a balance-only LQR design, its battery as `check` runs it (60 s holds)
SCENARIO = ["strategy={kind: lqr}", "trial.pushes=[]", "trial.start.angle=3 deg", "trial.duration=2"]


def _raw():
    from sim.model.scenario_yaml import load_raw
    return load_raw(None, tuple(SCENARIO))


def tune_round(evals: int, workers: int, out: Path) -> tuple[float, list]:
    """Wall time of the search alone (s), and the evaluations it made."""
    from sim.model.device import Device
    from sim.model.scenario import validate_scenario
    from sim.studies.tune import default_space, prefill
    from sim.studies.tune_study import open_study, run_study, study_spec

    raw, where = _raw()
    sc = validate_scenario(raw, where=where)
    params = default_space(sc, Device.from_scenario(sc))
    raw = prefill(raw, sc, params)
    out.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    study = open_study(out, storage=None, spec=study_spec(raw, params, ["push"], 1), objectives=["push"], seed=1,
                       n_startup=3)
    done = run_study(study, raw, where, params, ["push"], n_trials=evals, workers=workers, cluster=None, base_seed=1)
    return time.perf_counter() - t0, [(e, params) for e in done]


def sweep_round(evaluations: list, workers: int) -> float:
    """The same evaluations as one pool of tasks, as `sweep` runs its points (s)."""
    from sim.run.parallel import run_tasks
    from sim.studies.tune import evaluate

    from sim.model.scenario import validate_scenario
    from sim.studies.tune import prefill
    raw, where = _raw()
    sc = validate_scenario(raw, where=where)
    params = evaluations[0][1]
    raw = prefill(raw, sc, params)
    by_key = {p.key: p for p in params}
    tasks = [(e.number, {"raw": raw, "where": where, "objectives": ["push"], "seed": e.seed,
                         "assign": [(list(by_key[k].path), v) for k, v in e.params.items()]}) for e, _ in evaluations]
    t0 = time.perf_counter()
    for _ in run_tasks(evaluate, iter(tasks), workers=workers):
        pass
    return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--evals", type=int, default=12)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--rounds", type=int, default=3)
    args = ap.parse_args()
    ratios = []
    for r in range(args.rounds):
        tmp = Path(tempfile.mkdtemp(prefix="bench_tune_"))
        try:
            t_tune, evaluations = tune_round(args.evals, args.workers, tmp / "tune")
            t_sweep = sweep_round(evaluations, args.workers)
        finally:
            shutil.rmtree(tmp, ignore_errors=True)
        n = len(evaluations)
        ratio = (n / t_tune) / (n / t_sweep)
        ratios.append(ratio)
        print(f"round {r + 1}: tune {n} evaluations in {t_tune:.1f} s ({n / t_tune:.2f}/s); "
              f"the same as a sweep {t_sweep:.1f} s ({n / t_sweep:.2f}/s); ratio {ratio:.2f}", flush=True)
    ratios.sort()
    print(f"tune / sweep evaluations per second: median {ratios[len(ratios) // 2]:.2f}, best {ratios[-1]:.2f} "
          f"(target >= 0.9), {args.workers} workers")


if __name__ == "__main__":
    main()
