"""`tune`: search a strategy's gains and weights against the `check` verdict.

Each evaluation is the `check` battery without its Monte Carlo part (`verdicts.run_check` with
`trials=0`): the objective is a figure of the battery, and every other criterion is a
constraint (optuna's constrained TPE: a trial is feasible when all constraints are <= 0). The
best few feasible evaluations are then re-checked with the full Monte Carlo; the winner is the
best one that still passes.

Reproducibility: the sampler is seeded; evaluations run in a pipeline of fixed depth (workers + 1)
and are told back in trial order, each next one asked right after the oldest is told; each
evaluation's trials use a seed of their own (from the scenario's `trial.seed` and the evaluation's
number). Same seed and same workers give the same study. The worker count changes the depth, and
with it what TPE has seen when it samples: a study with 2 workers is not the same as one with 1
(optuna's TPE samples from the finished trials only).

Storage: optuna's SQLite storage in the output folder (`tune.db`). Running the same command
again resumes: evaluations that were running when a tune was killed are asked again with the same
parameters, so none is lost or done twice, until the requested number has finished.
"""

from __future__ import annotations

import copy
import math
import re
from dataclasses import dataclass, replace


from ..core.errors import InputError, ScenarioError
from ..model.overrides import parse_path, set_path
from ..model.tolerances import value_at

STUDY = "tune"
RECHECK_BEST = 3
CATCH_GRID = 9          # cells per side of the catch map behind the catch_area objective (cheap)
OBJECTIVES = {
    # name: (direction, what it is, unit)
    "push": ("maximize", "largest push survived in the worse direction", "N m s"),
    "swing_up_time": ("minimize", "time from hanging to caught", "s"),
    "catch_area": ("maximize", "caught share of the catch map", "fraction"),
    "peak_current": ("minimize", "highest current over the battery's runs", "A"),
}
_CRITERION_OF = {"push": "max_push_survived_n_m_s", "swing_up_time": "swing_up_time_s"}


@dataclass(frozen=True)
class Param:
    """One searched scenario key: dotted key, parsed path, bounds (SI), log scale, start, meaning."""
    key: str
    path: tuple
    low: float
    high: float
    log: bool
    start: float | None = None
    does: str = ""
    integer: bool = False
    """Searched over whole numbers (the key's value in the scenario is an integer, e.g. a firmware
    define written as `KP: 240`): the bounds are whole numbers too."""
    as_written: bool = False
    """A firmware define: each value tried is first rounded as best_patch.yaml writes it (7
    significant digits), so that the build an evaluation compiled is the one the winner's
    scenario compiles (a define's text is part of the build)."""

    def assigned(self, value):
        """The value the scenario gets at this key for the search's `value`."""
        if self.integer:
            return int(value)
        return float(f"{value:.7g}") + 0.0 if self.as_written else value


# ----------------------------------------------------------------------------- the search space

PARAM_RE = re.compile(r"^\s*([^=]+?)\s*=\s*([-+0-9.eE]+)\s*\.\.\s*([-+0-9.eE]+)\s*(?::\s*(log|lin))?\s*$")


def parse_param(text: str) -> Param:
    """`KEY=LO..HI[:log]` (SI numbers). InputError naming the option on any problem."""
    m = PARAM_RE.match(text)
    if not m:
        raise InputError(f"--param {text!r}: expected KEY=LO..HI or KEY=LO..HI:log (SI numbers)")
    key, lo, hi, scale = m.group(1), float(m.group(2)), float(m.group(3)), m.group(4)
    if not (math.isfinite(lo) and math.isfinite(hi)):
        raise InputError(f"--param {key}: the range must be finite, found {lo}..{hi}")
    if lo >= hi:
        raise InputError(f"--param {key}: LO must be below HI, found {lo:g}..{hi:g}")
    if scale == "log" and lo <= 0:
        raise InputError(f"--param {key}: a log range must stay above 0, found {lo:g}..{hi:g}")
    return Param(key, tuple(parse_path(key, where=f"--param {key}")), lo, hi, scale == "log")


def default_space(sc, device) -> list[Param]:
    """The search space a strategy's kind suggests, around model-based starting values."""
    spec, prefix = sc.strategy, ("strategy",)
    kind = spec.kind
    if kind == "swing_and_catch":
        p = spec.params
        top = math.degrees(p.release_angle) - 2.0
        return (_law_space(p.swing_up, device, prefix + ("swing_up",))
                + _law_space(p.balance, device, prefix + ("balance",))
                + [Param("strategy.catch_angle", prefix + ("catch_angle",), math.radians(3.0),
                         math.radians(max(4.0, min(top, 45.0))), False, p.catch_angle,
                         "where the balance law takes over from the swing-up: too wide and it catches what it "
                         "cannot hold, too narrow and the swing passes the top without a catch")])
    return _law_space(spec, device, prefix)


def _law_space(spec, device, prefix: tuple) -> list[Param]:
    from .gains import PID_TERMS
    from ..strategies.lqr_design import bryson_weights
    from ..strategies.pid import default_pd_gains

    key = ".".join(prefix)
    if spec.kind == "lqr":
        q0, r0 = bryson_weights(device) if not hasattr(device, "wheels") else _bryson_per_kind(device)
        names = ("angle", "body rate", "wheel speed")
        out = [Param(f"{key}.weights[{i}]", prefix + ("weights", i), q / 30.0, q * 30.0, True, float(q),
                     f"weight on the {names[i]}: higher holds it closer to zero, at the cost of effort"
                     + (" (bleeds wheel speed: without it the wheel creeps to its limit under a sensor bias)"
                        if i == 2 else ""))
               for i, q in enumerate(q0)]
        command = "current" if getattr(device, "drive_mode", "voltage") == "current" else "voltage"   # the law's input
        return out + [Param(f"{key}.effort", prefix + ("effort",), r0 / 30.0, r0 * 30.0, True, float(r0),
                            f"weight on the {command}: higher gives softer gains that saturate less")]
    if spec.kind == "pid":
        kp0, ki0, kd0 = default_pd_gains(device)
        hold = device.gravity_torque_coeff_n_m * device.resistance_ohm / device.k_t_n_m_a
        tau = 0.5   # the wheel loop's bleed time the PID docstring derives its gains from
        wkp = device.I_w_kg_m2 / max(device.gravity_torque_coeff_n_m * tau, 1e-12)
        wki = wkp / (4.0 * tau)
        ranges = {"kp": (1.1 * hold, 4.0 * kp0, kp0), "ki": (ki0 / 100.0, 10.0 * ki0, ki0),
                  "kd": (kd0 / 10.0, 10.0 * kd0, kd0), "wheel_kp": (wkp / 30.0, wkp * 10.0, wkp),
                  "wheel_ki": (wki / 30.0, wki * 10.0, wki)}
        return [Param(f"{key}.{n}", prefix + (n,), lo, hi, True, start, PID_TERMS[n][1])
                for n, (lo, hi, start) in ranges.items()]
    if spec.kind == "firmware":
        return _define_space(spec, prefix)
    return _generic_space(spec, device, prefix)


def _bryson_per_kind(device) -> tuple[list[float], float]:
    """A multi-wheel design's three weights (angles, rates, wheel speeds) and effort by Bryson's rule
    (`lqr_design.bryson_limits`), one number per kind: the geometric mean over the wheels where
    their limits differ (three weights are what `MultiWheelLqr.Params` takes)."""
    import numpy as np

    from ..strategies.lqr_design import bryson_limits, state_kind
    spec = device.linear_spec()
    model = spec.linear_model()
    x_max, u_max = bryson_limits(spec, model)
    kinds = np.array([state_kind(n) for n in model.state_names])
    q = [float(np.exp(np.mean(np.log(1.0 / x_max[kinds == k] ** 2)))) for k in (0, 1, 2)]
    return q, float(np.exp(np.mean(np.log(1.0 / u_max ** 2))))


def _define_space(spec, prefix: tuple) -> list[Param]:
    """Compiled firmware: each define the scenario gives as a positive real number (`KP: 240.0`), a
    decade either side, on a log scale. Integer defines are left to --param (an integer may be a
    switch, a size or a fixed-point shift as well as a gain); so are defines the firmware defaults
    itself (`#ifndef`). The firmware is not built here (its wb_init would run in this process)."""
    out = []
    for name, value in spec.params.defines.items():
        if isinstance(value, float) and value > 0:
            path = prefix + ("defines", name)
            out.append(Param(".".join(path), path, value / 10.0, value * 10.0, True, value,
                             f"firmware define {name}", as_written=True))
    return out


def _generic_space(spec, device, prefix: tuple) -> list[Param]:
    """Swing-up laws (and others): each positive numeric parameter over a decade either side of the
    value in use (the scenario's, or the default the law derives from the device)."""
    from ..model.device_figures import strategy_in_use

    skip = {"release_angle", "energy_target", "kick_direction", "catch_level", "wheel_limit"}
    out = []
    if "wheel_limit" in type(spec.params).model_fields:   # a share of the no-load speed: a range of its own
        key = ".".join(prefix + ("wheel_limit",))
        out.append(Param(key, prefix + ("wheel_limit",), 0.5, 1.0, False, float(spec.params.wheel_limit),
                         "how far the swing-up may spin the wheel (share of its no-load speed): lower keeps "
                         "speed in hand for the catch, at the cost of a slower swing-up"))
    for name, (value, _) in strategy_in_use(spec, device).items():
        if name in skip or isinstance(value, bool) or not isinstance(value, (int, float)) or not value > 0:
            continue
        out.append(Param(".".join(prefix + (name,)), prefix + (name,), value / 10.0, value * 10.0, True, float(value),
                         f"{spec.kind} {name.replace('_', ' ')}"))
    return out


def check_space(raw: dict, where: str, params: list[Param]) -> None:
    """Each key at both ends of its range must give a valid, numeric scenario value."""
    from ..model.scenario import validate_scenario
    if not params:
        raise InputError("tune: nothing to search: the strategy has no default search space; give --param KEY=LO..HI")
    seen = set()
    for p in params:
        if p.path in seen:
            raise InputError(f"--param {p.key}: the key is given twice")
        seen.add(p.path)
        for value in (p.assigned(p.low), p.assigned(p.high)):   # as an evaluation would set them
            trial = copy.deepcopy(raw)
            set_path(trial, list(p.path), value, where=f"{where} (--param {p.key})")
            try:
                sc = validate_scenario(trial, where=where)
            except ScenarioError as exc:
                raise ScenarioError(f"{exc} (from --param {p.key}={value:g})") from None
            got = value_at(sc, list(p.path))
            if isinstance(got, bool) or not isinstance(got, (int, float)):
                raise InputError(f"--param {p.key}: not a numeric scenario key (found {type(got).__name__})")


def prefill(raw: dict, sc, params: list[Param]) -> dict:
    """A copy of `raw` where every searched key has a place: nested strategy mappings that were left
    to their defaults get their kind, and a list searched item by item (LQR weights) starts as the
    values in use. The scenario means the same as before (the defaults written out)."""
    out = copy.deepcopy(raw)
    for p in params:
        path = list(p.path)
        if "strategy" == path[0]:
            spec, node = sc.strategy, out.setdefault("strategy", {})
            for key in path[1:]:
                sub = getattr(spec.params, key, None) if isinstance(key, str) else None
                if hasattr(sub, "cls") and hasattr(sub, "kind"):     # a nested strategy
                    if not isinstance(node.get(key), dict):
                        node[key] = {"kind": sub.kind}
                    spec, node = sub, node[key]
                else:
                    break
        for i, key in enumerate(path):
            if isinstance(key, int):
                parent = path[:i]
                if value_at_raw(out, parent) is None:
                    items = sorted((q.path[i], q.start) for q in params if list(q.path[:i]) == parent)
                    set_path(out, parent, [v for _, v in items], where="tune")
    return out


def value_at_raw(raw: dict, path: list):
    node = raw
    for key in path:
        if isinstance(key, int):
            if not isinstance(node, list) or key >= len(node):
                return None
            node = node[key]
        elif isinstance(node, dict):
            node = node.get(key)
        else:
            return None
    return node


@dataclass(frozen=True)
class SearchSetup:
    """What a tune searches, checked: the validated scenario, the objectives, the space, and the raw
    mapping with every searched key given a place (`prefill`)."""
    scenario: object
    objectives: list
    params: list
    raw: dict


def search_setup(raw: dict, where: str, *, param_texts: list[str], only: bool, objective: str) -> SearchSetup:
    """Check --objective and --param against the scenario and build the space (InputError or
    ScenarioError on bad input, before anything is simulated or written)."""
    from ..model.device import Device
    from ..model.device3d import Device3D
    from ..model.scenario import validate_scenario
    sc = validate_scenario(raw, where=where)
    objectives = parse_objectives(objective, sc)
    device = (Device if sc.is_planar else Device3D).from_scenario(sc)
    given = [parse_param(t) for t in param_texts]
    if only and not given:
        raise InputError("--only: give the keys to search with --param KEY=LO..HI")
    given = [_given_param(p, sc) for p in given]
    keys = {p.key for p in given}
    params = ([] if only else [p for p in default_space(sc, device) if p.key not in keys]) + given
    filled = prefill(raw, sc, params)
    check_space(filled, where, params)
    return SearchSetup(sc, objectives, params, filled)


def _given_param(p: Param, sc) -> Param:
    """A --param key as searched. Under a firmware's `defines` its values are rounded as written
    (`Param.as_written`) and the scenario's value, inside the range, is the first evaluation's. Over
    whole numbers when the scenario holds an integer at the key (a define written as `N: 4`, an
    encoder's counts per revolution); over real numbers otherwise (also for a define the scenario
    does not give, which the firmware defaults itself with `#ifndef`)."""
    try:
        parent = value_at(sc, list(p.path[:-1]))
    except KeyError:
        parent = None
    if isinstance(parent, dict):        # a firmware's defines: the only mapping keyed by the user's names
        p = replace(p, as_written=True)
    try:
        now = value_at(sc, list(p.path))
    except KeyError:
        return p
    if p.as_written and isinstance(now, (int, float)) and not isinstance(now, bool) and p.low <= now <= p.high:
        p = replace(p, start=now)
    if isinstance(now, bool) or not isinstance(now, int):
        return p
    low, high = math.ceil(p.low), math.floor(p.high)
    if low >= high:
        raise InputError(f"--param {p.key}: the scenario gives an integer here ({now}), so the range must hold "
                         f"two whole numbers, found {p.low:g}..{p.high:g}")
    if p.log and low <= 0:
        raise InputError(f"--param {p.key}: a log range of whole numbers must start at 1 or more, "
                         f"found {p.low:g}..{p.high:g}")
    return replace(p, low=float(low), high=float(high), integer=True)


def gain_sign(objective: str) -> float:
    """+1 for an objective to maximise, -1 for one to minimise: sign * value grows as it gets better."""
    return 1.0 if OBJECTIVES[objective][0] == "maximize" else -1.0


def is_better(objective: str, value: float, than: float | None) -> bool:
    """Is `value` of `objective` better than `than` (None: nothing yet)?"""
    return than is None or gain_sign(objective) * (value - than) > 0


def parse_objectives(text: str, sc) -> list[str]:
    names = [n.strip() for n in text.split(",") if n.strip()]
    if not 1 <= len(names) <= 2:
        raise InputError(f"--objective {text!r}: give one objective or two separated by a comma")
    for n in names:
        if n not in OBJECTIVES:
            raise InputError(f"--objective {n!r}: unknown; known: {', '.join(OBJECTIVES)}")
        if n == "swing_up_time" and not getattr(sc.strategy.cls, "swings_up", False):
            raise InputError(f"--objective swing_up_time: strategy {sc.strategy.kind!r} does not swing up")
        if n == "catch_area" and sc.strategy.cls.goal != "balance":
            raise InputError(f"--objective catch_area: strategy {sc.strategy.kind!r} has no balance goal")
    if len(set(names)) != len(names):
        raise InputError(f"--objective {text!r}: the same objective twice")
    return names


# ----------------------------------------------------------------------------- one evaluation

def evaluate(payload: dict) -> dict:
    """One evaluation (module-level, so worker processes can run it): the check battery without
    Monte Carlo on the scenario with the trial's parameters. Returns a flat, JSON-ready row."""
    raw = copy.deepcopy(payload["raw"])
    for path, value in payload["assign"]:
        set_path(raw, list(path), value, where=payload["where"])   # values as `Param.assigned` gave them
    raw.setdefault("trial", {})["seed"] = payload["seed"]
    try:
        outcome = run_battery(raw, payload["where"], trials=0, workers=1)
    except ScenarioError as exc:
        return {"error": str(exc), "criteria": [], "objectives": [None] * len(payload["objectives"])}
    v = outcome.verdict
    values = [objective_value(name, v, outcome, raw, payload["where"]) for name in payload["objectives"]]
    crit = [{"name": c["name"], "value": c["value"], "limit": c["limit"], "passed": c["passed"]} for c in v["criteria"]]
    return {"error": None, "criteria": crit, "objectives": values}


def run_battery(raw: dict, where: str, *, trials: int, workers: int | None = None, cluster=None):
    """`check`'s battery for a planar device (`verdicts.run_check`); for a 3D device the battery of
    `sim.studies.battery3d` (nominal, hold, largest push per direction, Monte Carlo). Both give an
    object with `verdict` (criteria, max_push_survived_n_m_s, runs)."""
    from ..model.scenario import validate_scenario
    if validate_scenario(raw, where=where).is_planar:
        from .verdicts import run_check
        return run_check(raw, where, trials=trials, workers=workers, cluster=cluster)
    from .battery3d import run_battery3d
    return run_battery3d(raw, where, trials=trials)


def objective_value(name: str, verdict: dict, outcome, raw: dict, where: str) -> float | None:
    if name == "push":
        return verdict["max_push_survived_n_m_s"]
    if name == "swing_up_time":
        got = next((c for c in verdict["criteria"] if c["name"] == "swing_up_time_s"), None)
        return got["value"] if got else None
    if name == "peak_current":
        return max(r["peak_current_a"] for r in verdict["runs"].values())
    if name == "catch_area":
        from .catchmap import catch_map
        from .catchmap3d import catch_map3d
        planar = outcome.verdict.get("wheel_count") is None     # the 3D battery's verdict names its wheels
        rows = (catch_map if planar else catch_map3d)(raw, where, grid=CATCH_GRID, workers=1)["rows"]
        return sum(bool(r["caught"]) for r in rows) / len(rows)
    raise ValueError(name)


def constraints(row: dict, objectives: list[str]) -> dict[str, float]:
    """Optuna's constraint (feasible when <= 0): the number of failed criteria that are not an
    objective's own (an invalid scenario counts as one more than any). One value, not one per
    criterion: TPE ranks infeasible trials by the sum of their positive constraints anyway
    (optuna 5, `TPESampler`), and each named constraint is a write to the study's database."""
    if row["error"]:
        return {"failed_criteria": 1000.0}
    return {"failed_criteria": float(len(failed_criteria(row, objectives)))}


def failed_criteria(row: dict, objectives: list[str]) -> list[str]:
    if row["error"]:
        return ["invalid"]
    own = {_CRITERION_OF.get(o) for o in objectives}
    return [c["name"] for c in row["criteria"] if not c["passed"] and c["name"] not in own]
