"""The tune's optuna study: ask in rounds, evaluate on the workers, tell in order, resume after a kill.

Optuna (TPE sampler, seeded; constrained through `constraints_func`; NSGA-II style Pareto ranking
for two objectives, which optuna's TPE supports directly) with its SQLite storage in the output
folder. The study remembers what it is (scenario, space, objectives, seed) in its user attributes;
a different tune in the same folder is refused.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass

from ..core.errors import InputError
from ..model.tolerances import trial_seed
from ..run.parallel import WorkerPool
from .tune import OBJECTIVES, STUDY, Param, constraints, evaluate, gain_sign

DB = "tune.db"
PENALTY = 1e6   # objective told to optuna for a value that could not be found (minimised objectives)


@dataclass
class Evaluation:
    """One finished evaluation: optuna's trial number, parameters (SI, by key), the row from `evaluate`."""
    number: int
    params: dict
    row: dict
    seed: int


def _quiet_optuna():
    import optuna
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    return optuna


def study_spec(raw: dict, params: list[Param], objectives: list[str], seed: int) -> str:
    from ..core.outputs import clean_json
    # an integer search is marked only where it applies: the spec of every other tune is as before
    space = [(p.key, p.low, p.high, p.log) + (("integer",) if p.integer else ()) for p in params]
    text = json.dumps({"raw": clean_json(raw), "params": space,
                       "objectives": objectives, "seed": seed}, sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def open_study(out_dir, *, storage: str | None, spec: str, objectives: list[str], seed: int, n_startup: int):
    """Create or load the study; refuse a study made for another tune."""
    optuna = _quiet_optuna()
    url = storage or f"sqlite:///{(out_dir / DB).resolve()}"

    # constraints reach the sampler through Trial.set_constraint (optuna >= 5)
    sampler = optuna.samplers.TPESampler(seed=seed, n_startup_trials=n_startup, multivariate=True)
    try:
        study = optuna.create_study(study_name=STUDY, storage=url, load_if_exists=True, sampler=sampler,
                                    directions=[OBJECTIVES[o][0] for o in objectives])
    except ValueError as exc:   # directions of an existing study differ
        raise InputError(f"--out {out_dir}: it holds a different tune ({exc}); choose another folder") from None
    except Exception as exc:    # a storage URL optuna cannot open
        raise InputError(f"--storage {url}: cannot open the study ({str(exc).splitlines()[0]})") from None
    have = study.user_attrs.get("spec")
    if have is None:
        study.set_user_attr("spec", spec)
    elif have != spec:
        raise InputError(f"--out {out_dir}: it holds a tune of another scenario, search space, objective or seed; "
                         "choose another folder (or run the same command to resume that one)")
    return study


def requeue_interrupted(study) -> int:
    """Trials left RUNNING by a killed tune: asked again with the same parameters, the old ones
    marked failed. Returns how many."""
    optuna = _quiet_optuna()
    stale = study.get_trials(deepcopy=False, states=(optuna.trial.TrialState.RUNNING,))
    for t in stale:
        study._storage.set_trial_state_values(t._trial_id, state=optuna.trial.TrialState.FAIL)
        study.enqueue_trial(t.params, user_attrs={"requeued_from": t.number}, skip_if_exists=False)
    return len(stale)


def distributions(params: list[Param]) -> dict:
    from optuna.distributions import FloatDistribution, IntDistribution
    return {p.key: (IntDistribution(int(p.low), int(p.high), log=p.log) if p.integer
                    else FloatDistribution(p.low, p.high, log=p.log)) for p in params}


def run_study(study, raw: dict, where: str, params: list[Param], objectives: list[str], *, n_trials: int,
              workers: int | None, cluster, base_seed: int, on_done=None) -> list[Evaluation]:
    """Evaluate until the study holds `n_trials` finished evaluations. Returns them all, in number order.

    A pipeline with a fixed depth: `depth` evaluations are in flight; the oldest is waited for,
    told, and the next one asked at once. Asks and tells thus come in the same order whatever the
    workers' timing (evaluation n + depth is asked right after n is told), so the same seed and
    workers give the same study, while no worker waits for a whole round to finish.
    """
    optuna = _quiet_optuna()
    dists = distributions(params)
    by_key = {p.key: p for p in params}
    if not study.trials:
        start = {p.key: p.start for p in params if p.start is not None and p.low <= p.start <= p.high}
        if len(start) == len(params):   # the model-based starting point is the first evaluation
            study.enqueue_trial(start, user_attrs={"start": True})
    requeue_interrupted(study)
    complete = len(study.get_trials(deepcopy=False, states=(optuna.trial.TrialState.COMPLETE,)))
    with WorkerPool(workers=workers, cluster=cluster) as pool:
        depth = pool.size + 1 if pool.size > 1 else 1   # one queued beyond the workers: none idles between tasks
        flight: list = []

        def ask_one():
            trial = study.ask(dists)
            seed = trial_seed(base_seed, trial.number)
            trial.set_user_attr("seed", seed)
            payload = {"raw": raw, "where": where, "objectives": objectives, "seed": seed,
                       "assign": [(list(by_key[k].path), by_key[k].assigned(v)) for k, v in trial.params.items()]}
            flight.append((trial, pool.submit(evaluate, payload)))

        while complete + len(flight) < n_trials and len(flight) < depth:
            ask_one()
        while flight:
            trial, fut = flight.pop(0)           # the oldest: asks and tells in number order
            row = fut.result()
            trial.set_user_attr("row", json.dumps(row, default=_json_default))
            for name, value in constraints(row, objectives).items():
                trial.set_constraint(name, value)
            study.tell(trial, [_told(v, o) for v, o in zip(row["objectives"], objectives)])
            complete += 1
            if on_done is not None:
                on_done(trial.number, row)
            if complete + len(flight) < n_trials:
                ask_one()
    return finished(study)


def finished(study) -> list[Evaluation]:
    optuna = _quiet_optuna()
    out = []
    for t in study.get_trials(deepcopy=False, states=(optuna.trial.TrialState.COMPLETE,)):
        out.append(Evaluation(t.number, dict(t.params), json.loads(t.user_attrs["row"]), t.user_attrs.get("seed", 0)))
    return sorted(out, key=lambda e: e.number)


def _told(value, objective: str) -> float:
    if value is None or not math.isfinite(value):
        return 0.0 if gain_sign(objective) > 0 else PENALTY
    return float(value)


def _json_default(value):
    import numpy as np
    if isinstance(value, np.generic):
        return value.item()
    return str(value)
