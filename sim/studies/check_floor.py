"""`check` on a body on the floor (`body.mount: floor`): the battery of its design mount plus the floor's criteria.

A balance law (`lqr`, ...): the 3D battery (`sim.studies.verdicts3d.run_check3d`) as for the mount the
law designs for (a hinge at the balance edge, a ball at the balance corner). Its runs already count a
slip as lost (outcome `slipped`, cause `contact_slipped`); added here, over the nominal trial and the
hold (while balancing, up to any fall):
- `contact_slip_m`: the largest horizontal travel of the balancing contact, at most `floor.slip_limit`;
- `peak_friction_ratio`: the largest |F_t| / F_n the motion asked of the floor in the hold (no pushes),
  after CONTACT_SETTLE_S, below `floor.friction` (Coulomb's law: a contact holds while |F_t| < mu F_n; at mu it slides). Runs with
  pushes are left to `contact_slip_m`: the floor engine applies a push as a horizontal force at the
  centre of mass over one step, which no friction holds (the note gives their ratios).

A `jump` law: its own criteria instead of the balance battery:
- `jump_up_time_s`: the scenario's own trial (from its face) ends balanced, caught within
  `requirements.swing_up_time`;
- `jump_attempts`: the attempts that trial took, at most JUMP_ATTEMPTS_LIMIT (our choice);
- `jump_margin`: how far over the needed pre-brake speed the motor can go (`sim.strategies.jump_figures`),
  at least JUMP_MARGIN_MIN (our choice: a 20% reserve for friction, brake losses and a low battery);
- `fall_recovered_attempts`: fall and recover. The cube starts balanced on its edge and turning about
  it with a share of the angular momentum that carries it between a face and balance (`face_to_edge` at
  a 45 degree rest tilt: a cube's), the shares RECOVER_KICK_SHARES tried in turn until one tips it onto
  a face (the law jumps) or ends the trial otherwise; the jump law must get it up again: outcome
  balanced, at least one jump and at most JUMP_ATTEMPTS_LIMIT. A start rate, not a push: the floor
  engine applies a push as a horizontal force at the centre of mass over one step, which slides the
  edge instead of tipping the body (on a floor of friction 0.5 a push slid a 10 cm cube 46 mm without
  tipping it, and a smaller one ended the run `slipped`: a failure of the test, not of the design). A
  kick that never tips it fails the criterion (nothing was tested);
- `wheel_speed_margin`, `winding_temperature_c`, `wheel_burst_safety_factor` over these two runs;
- `monte_carlo_pass_fraction` (with `--trials` above 0): the jump-up from the scenario's own start over its
  tolerances (`sim.studies.monte_carlo`, `sim.model.tolerances`), each trial judged by `judge_jump_trial`
  (balanced within `swing_up_time`, at most JUMP_ATTEMPTS_LIMIT jumps, every wheel's speed margin), at
  least `requirements.pass_fraction`, with the Wilson interval.
On a corner device (`balance_on: corner`, `sim.strategies.jump_corner`) the jump figures are the
edge-to-corner jump's, and the fall and recovery starts balanced on the corner at rest, pushed at
RECOVER_CORNER_PUSH_AT_S about the corner jump's axis, in the sense that lays the body back on its edge,
by the shares of the momentum that carries it from the edge to the corner (a floor start cannot turn
about the corner yet, so a push; at 0.25 of that momentum the demo's corner slid 0.9 mm).
"""

from __future__ import annotations

import math

import numpy as np
from pathlib import Path

from ..core.safety import SAFETY_NOTES
from ..model.device3d import Device3D
from ..model.scenario import Push, validate_scenario
from ..run.metrics3d import trial_metrics3d
from ..run.trial3d import run_trial3d
from ..model.tolerances import interval_note
from ..strategies.jump_figures import edge_to_corner, face_to_edge
from .criteria3d import burst_criterion
from .monte_carlo import monte_carlo, outcome_with_cause
from .verdicts import CheckOutcome, _at_least, _at_most, _criterion, _failure_counts, with_trial
from .verdicts3d import _smallest, run_check3d, wheel_figures

JUMP_MARGIN_MIN = 0.2          # jump_margin at least this (our choice, see the module docstring)
JUMP_ATTEMPTS_LIMIT = 3        # a jump-up within three attempts (our choice)
CONTACT_SETTLE_S = 0.01       # the first steps of a trial, while pybullet resolves the body's placement on the
                               # floor, ask a friction ratio near the coefficient: left out (our choice; seen at
                               # 2-3 ms in the floor cube's hold, 0.1 after)
RECOVER_KICK_SHARES = (0.25, 0.35, 0.5, 0.7, 1.0, 1.4, 2.0)   # of the face-to-balance momentum, tried in
# turn until one tips the body onto a face (our choice)
RECOVER_CORNER_PUSH_AT_S = 1.0  # a corner device's fall-and-recover push, after the law has settled on the corner
RECOVER_EXTRA_S = 2.5          # after the push: falling, coming to rest, the hold after the catch (our choice)


def run_check_floor(raw: dict, where: str, *, trials: int, workers=None, cluster=None, on_stage=None,
                    on_done=None) -> CheckOutcome:
    """`check` on a floor device (see the module docstring)."""
    sc = validate_scenario(raw, where=where)
    if sc.strategy.kind == "jump":
        return run_jump_check(sc, raw=raw, where=where, trials=trials, workers=workers, cluster=cluster,
                              on_stage=on_stage, on_done=on_done)
    outcome = run_check3d(raw, where, trials=trials, workers=workers, cluster=cluster, on_stage=on_stage,
                          on_done=on_done)
    metrics = {name: trial_metrics3d(r) for name, r in outcome.runs.items()}
    v = outcome.verdict
    v["criteria"] += floor_criteria(sc, metrics, hold_ratio=held_friction_ratio(outcome.runs["hold"]))
    v["passed"] = all(c["passed"] for c in v["criteria"])
    v["floor"] = {name: _floor_keys(m) for name, m in metrics.items()}
    return outcome


def _floor_keys(m: dict) -> dict:
    keys = ("slip_m", "slip_limit_m", "slipped_at_s", "lift_off_s", "lifted", "lifted_at_s", "longest_lift_off_s",
            "rest_face", "peak_friction_ratio", "floor_friction", "balance_on")
    return {k: m.get(k) for k in keys}


def held_friction_ratio(result) -> float | None:
    """The largest |F_t| / F_n over a trial's trace after CONTACT_SETTLE_S, up to a fall (None: no steps)."""
    tr = result.trace
    k0 = int(round(CONTACT_SETTLE_S / tr.step_s))
    end = tr.n if result.fell_at_s is None else min(tr.n, int(round(result.fell_at_s / tr.step_s)))
    return float(np.max(tr.friction_ratio[k0:end])) if end > k0 else None


def floor_criteria(sc, metrics: dict, *, hold_ratio: float | None) -> list[dict]:
    """`contact_slip_m` (the worst over the runs: name -> trial metrics) and `peak_friction_ratio` (the
    hold's, `held_friction_ratio`)."""
    slip_run = max(metrics, key=lambda n: metrics[n]["slip_m"])
    slipped = [n for n, m in metrics.items() if m["outcome"] == "slipped"]
    others = ", ".join(f"{n} {m['peak_friction_ratio']:.3g}" for n, m in metrics.items()
                       if n != "hold" and m["peak_friction_ratio"] is not None)
    slip = metrics[slip_run]["slip_m"]
    mu = sc.floor.friction
    lifted = ", ".join(f"{n} {m['lift_off_s']:.3g} s" for n, m in metrics.items())
    return [
        _criterion("contact_slip_m", slip, sc.floor.slip_limit, slip <= sc.floor.slip_limit and not slipped,
                   f"largest travel of the balancing contact while balancing, in the {slip_run} run"
                   + (f"; slipped in: {', '.join(slipped)}" if slipped else "") + f"; off the floor: {lifted}"),
        _criterion("peak_friction_ratio", hold_ratio, mu, hold_ratio is not None and hold_ratio < mu,
                   f"largest |F_t|/F_n asked of the floor in the hold (no pushes; after its first "
                   f"{CONTACT_SETTLE_S * 1e3:g} ms), below the "
                   f"friction coefficient {mu:g} (Coulomb: at the coefficient the contact slides)"
                   + (f"; with pushes (their impact slides the edge, judged by contact_slip_m): {others}" if others else "")),
    ]


# ----------------------------------------------------------------------------- the jump law

def face_to_balance_momentum(device) -> tuple[float, float]:
    """(the body's angular momentum that carries it just to balance, N m s; the body's inertia about the axis it
    turns about, kg m^2): about the edge from a face (45 deg) for an edge device, about the corner jump's axis
    from the edge for a corner device."""
    fig = edge_to_corner(device) if _on_corner(device) else face_to_edge(device, rest_tilt_rad=math.radians(45.0))
    return fig.inertia_kg_m2 * abs(fig.body_rate_rad_s), fig.inertia_kg_m2


def _on_corner(device) -> bool:
    return device.floor is not None and device.floor.balance_on == "corner"


def recover_scenario(sc, nominal: dict, kick_n_m_s: float, inertia_kg_m2: float, device=None):
    """Balanced on the edge, turning about it at kick / inertia rad/s (an ideal kick, the edge its pivot); on a
    corner (`device` given), balanced on it at rest and pushed by the kick at RECOVER_CORNER_PUSH_AT_S about
    the corner jump's axis, back towards its edge. Long enough for the fall, the rest and the jump-up as the
    nominal trial took it, then a hold."""
    jump_s = nominal["caught_at_s"] if nominal["caught_at_s"] is not None else sc.trial.duration
    if device is not None and _on_corner(device):
        n_world = np.array(device.upright()) @ np.array(edge_to_corner(device).axis)
        impulse = tuple(float(v) for v in -kick_n_m_s * n_world)
        return with_trial(sc, duration=RECOVER_CORNER_PUSH_AT_S + RECOVER_EXTRA_S + jump_s,
                          start={"resting_on": "corner", "wheel_speed": 0.0},
                          pushes=[Push(at=RECOVER_CORNER_PUSH_AT_S, impulse=impulse)])
    return with_trial(sc, duration=RECOVER_EXTRA_S + jump_s, pushes=[],
                      start={"angle": 0.0, "rate": kick_n_m_s / inertia_kg_m2, "wheel_speed": 0.0})


def run_jump_check(sc, *, raw: dict | None = None, where: str | None = None, trials: int = 0, workers=None,
                   cluster=None, on_stage=None, on_done=None) -> CheckOutcome:
    """The jump law's battery: its own trial from the face, the fall and recovery, and with `trials` > 0 (and
    the raw mapping) Monte Carlo of the jump-up over the tolerances (module docstring)."""
    stage = on_stage or (lambda text: None)
    device = Device3D.from_scenario(sc)
    runs = {}
    stage("the scenario's own trial: the jump-up")
    runs["nominal"] = run_trial3d(sc)
    nominal = trial_metrics3d(runs["nominal"])
    momentum, inertia = face_to_balance_momentum(device)
    tries = []
    for share in RECOVER_KICK_SHARES:
        push = share * momentum
        how = "push towards its edge" if device.floor.balance_on == "corner" else "kick"   # `recover_scenario`
        stage(f"fall and recover: a {push * 1e3:.3g} mN m s {how} from balance")
        runs["recover"] = run_trial3d(recover_scenario(sc, nominal, push, inertia, device))
        rec = trial_metrics3d(runs["recover"])
        tries.append({"kick_n_m_s": push, "outcome": rec["outcome"], "jump_attempts": rec.get("jump_attempts")})
        if (rec.get("jump_attempts") or 0) >= 1 or rec["outcome"] != "balanced":
            break
    metrics = {"nominal": nominal, "recover": rec}
    mc = None
    if trials > 0 and raw is not None:
        stage(f"Monte Carlo of the jump-up, {trials} trials")
        mc = monte_carlo(raw, where, sc, trials=trials, workers=workers, cluster=cluster, on_done=on_done,
                         judge=judge_jump_trial)
    wheels = wheel_figures(sc, device, runs, metrics)
    crit = jump_criteria(sc, metrics, push, corner=_on_corner(device)) + _wheel_criteria(sc, wheels, mc)
    verdict = {
        "passed": all(c["passed"] for c in crit),
        "scenario": sc.source, "name": sc.name, "strategy": sc.strategy.kind,
        "mount": device.mount, "wheel_count": device.n_wheels, "criteria": crit,
        "wheels": wheels,
        "wheel_burst_safety_factor": _smallest([w["burst"]["safety_factor"] for w in wheels]),
        "recover_kick_n_m_s": push, "recover_tries": tries,
        "runs": {name: {k: m.get(k) for k in (
            "outcome", "message", "cause", "cause_detail", "caught_at_s", "settle_time_s", "peak_tilt_rad",
            "peak_wheel_speed_rad_s", "wheel_speed_margin", "needed_wheel_speed_rad_s",
            "reached_wheel_speed_rad_s", "jump_attempts", "jump_margin", "rest_face", "slip_m", "lift_off_s",
            "face_jump_attempts", "face_needed_wheel_speed_rad_s", "face_reached_wheel_speed_rad_s")}
            for name, m in metrics.items()},
        "floor": {name: _floor_keys(m) for name, m in metrics.items()},
        "jump_margin_min": JUMP_MARGIN_MIN, "jump_attempts_limit": JUMP_ATTEMPTS_LIMIT,
        "monte_carlo": (None if mc is None else
                        {k: v for k, v in mc.items() if k != "rows"} | {"failures": _failure_counts(mc["rows"])}),
        "pushes": {}, "balance_on": device.floor.balance_on,
        "requirements": sc.requirements.model_dump(),
        "safety": list(SAFETY_NOTES),
    }
    return CheckOutcome(verdict=verdict, runs=runs, mc_rows=mc["rows"] if mc else [])


def judge_jump_trial(scenario, *, seed: int) -> dict:
    """One Monte Carlo trial of the jump-up, judged as the jump criteria judge the nominal one: balanced, caught
    within `requirements.swing_up_time`, at most JUMP_ATTEMPTS_LIMIT jumps, every wheel's speed margin. A flat row."""
    m = trial_metrics3d(run_trial3d(scenario, seed=seed))
    req = scenario.requirements
    reasons = []
    if m["outcome"] != "balanced":
        reasons.append(outcome_with_cause(m))
    elif m["caught_at_s"] is None or m["caught_at_s"] > req.swing_up_time:
        reasons.append("slow to get up")
    if (m.get("jump_attempts") or 0) > JUMP_ATTEMPTS_LIMIT:
        reasons.append("too many jumps")
    if min(w["speed_margin"] for w in m["wheels"]) < req.wheel_speed_margin:
        reasons.append("wheel speed margin")
    keys = ("outcome", "message", "caught_at_s", "jump_attempts", "needed_wheel_speed_rad_s",
            "reached_wheel_speed_rad_s", "jump_margin", "face_jump_attempts", "wheel_speed_margin", "slip_m",
            "lift_off_s")
    return {k: m.get(k) for k in keys} | {"passed": not reasons, "fail_reasons": ";".join(reasons)}


def jump_criteria(sc, metrics: dict, push_n_m_s: float, *, corner: bool = False) -> list[dict]:
    """`jump_up_time_s`, `jump_attempts`, `jump_margin`, `fall_recovered_attempts` (module docstring)."""
    nominal, rec = metrics["nominal"], metrics["recover"]
    up = nominal["outcome"] == "balanced" and nominal["caught_at_s"] is not None
    attempts = nominal.get("jump_attempts")
    rec_attempts = rec.get("jump_attempts") or 0
    tipped = rec_attempts >= 1
    where = "off its corner" if corner else "onto a face"
    if tipped:
        how = f"tipped {where}, {rec_attempts} jump(s) after: {outcome_with_cause(rec)}"
    else:
        how = f"the kick did not tip it {where}, so no recovery was tested: {outcome_with_cause(rec)}"
    return [
        _criterion("jump_up_time_s", nominal["caught_at_s"], sc.requirements.swing_up_time,
                   up and nominal["caught_at_s"] <= sc.requirements.swing_up_time,
                   f"the scenario's own trial from its face: {outcome_with_cause(nominal)}"),
        _criterion("jump_attempts", attempts, JUMP_ATTEMPTS_LIMIT,
                   attempts is not None and 1 <= attempts <= JUMP_ATTEMPTS_LIMIT and up,
                   f"jumps the jump-up took (limit: our choice); needed wheel speed "
                   f"{_num(nominal.get('needed_wheel_speed_rad_s'))} rad/s, reached "
                   f"{_num(nominal.get('reached_wheel_speed_rad_s'))} rad/s"),
        _at_least("jump_margin", nominal.get("jump_margin"), JUMP_MARGIN_MIN,
                  "how far over the needed pre-brake wheel speed the motor can go at this supply "
                  f"(limit {JUMP_MARGIN_MIN:g}: our choice)"),
        _criterion("fall_recovered_attempts", rec_attempts, JUMP_ATTEMPTS_LIMIT,
                   tipped and rec["outcome"] == "balanced" and rec_attempts <= JUMP_ATTEMPTS_LIMIT,
                   (f"balanced on the corner, pushed back towards its edge with {push_n_m_s * 1e3:.3g} mN m s at "
                    f"{RECOVER_CORNER_PUSH_AT_S:g} s: {how}" if corner else
                    f"balanced on the edge, started turning about it with {push_n_m_s * 1e3:.3g} mN m s: {how}")),
    ]


def _wheel_criteria(sc, wheels: list[dict], mc: dict | None = None) -> list[dict]:
    low = min(wheels, key=lambda w: w["speed_margin"])
    hot = max(wheels, key=lambda w: w["winding_temperature_c"] - w["max_winding_temperature_c"])
    req = sc.requirements
    return [
        _at_least("wheel_speed_margin", low["speed_margin"], req.wheel_speed_margin,
                  f"worst wheel {low['wheel']} in the {low['speed_margin_run']} run"),
        _at_most("winding_temperature_c", hot["winding_temperature_c"], hot["max_winding_temperature_c"],
                 f"wheel {hot['wheel']}'s motor at {hot['rms_current_a']:.3g} A RMS over the jump-up trial, steady state"),
        burst_criterion(sc, [w["burst"] for w in wheels]),
    ] + ([] if mc is None else [
        _at_least("monte_carlo_pass_fraction", mc["pass_fraction"], req.pass_fraction,
                  f"{mc['trials']} jump-ups over the tolerances (balanced within swing_up_time, at most "
                  f"{JUMP_ATTEMPTS_LIMIT} jumps, wheel speed margin); "
                  + interval_note(mc["passed_trials"], mc["trials"], req.pass_fraction))])


def _num(x) -> str:
    return "-" if x is None else f"{x:.4g}"


# ----------------------------------------------------------------------------- files

def write_check_outputs_floor(outcome: CheckOutcome, out_dir) -> list[str]:
    """A balance law's files as any 3D check's (`verdict_report3d`); a jump law's: each run's plot,
    monte_carlo.csv (when it ran), report.md and verdict.json (last)."""
    from ..core.outputs import write_json, write_text
    from ..media.plots import save_figure
    from ..media.plots3d import summary_figure3d
    from .verdict_report3d import write_check_outputs3d
    if outcome.verdict["strategy"] != "jump":
        return write_check_outputs3d(outcome, out_dir)
    written = []
    for name, result in outcome.runs.items():
        save_figure(summary_figure3d(result), out_dir / f"{name}.png")
        written.append(f"{name}.png")
    mc = outcome.verdict["monte_carlo"]
    if mc is not None:
        from .verdict_report import monte_carlo_csv
        write_text(out_dir / "monte_carlo.csv", monte_carlo_csv(outcome.mc_rows, list(mc["tolerances"])))
        written.append("monte_carlo.csv")
    write_text(out_dir / "report.md", jump_report_markdown(outcome.verdict, written))
    write_json(out_dir / "verdict.json", outcome.verdict)
    return written + ["report.md", "verdict.json"]


def jump_report_markdown(v: dict, images: list[str]) -> str:
    """report.md of a jump law's check on the floor."""
    from .verdict_report import format_value, monte_carlo_markdown, run_causes_markdown
    from .verdict_report3d import criteria_table
    lines = [f"# Check: {v['name']}", "",
             f"Scenario `{v['scenario']}`, strategy `jump`, on the floor ({v['mount']} at the balance "
             f"{v.get('balance_on', 'edge')}), "
             f"{v['wheel_count']} wheel{'s' if v['wheel_count'] > 1 else ''}.", "",
             f"**Verdict: {'PASS' if v['passed'] else 'FAIL'}**", ""] + criteria_table(v)
    lines += ["", "## The jumps", "", "| run | outcome | caught at | jumps | needed / reached wheel speed | slip | rest face |",
              "|---|---|---|---|---|---|---|"]
    for name, r in v["runs"].items():
        lines.append(f"| {name} | {r['outcome']} | {format_value('_s', r['caught_at_s'])} | {r['jump_attempts']} | "
                     f"{_num(r['needed_wheel_speed_rad_s'])} / {_num(r['reached_wheel_speed_rad_s'])} rad/s | "
                     f"{_num(None if r['slip_m'] is None else r['slip_m'] * 1e3)} mm | {r['rest_face'] or '-'} |")
    if v.get("balance_on") == "corner":
        lines += ["", "The jumps above are the edge-to-corner ones; from a face first onto the edge:", "",
                  "| run | jumps face to edge | needed / reached wheel speed |", "|---|---|---|"]
        lines += [f"| {name} | {r['face_jump_attempts'] or 0} | {_num(r['face_needed_wheel_speed_rad_s'])} / "
                  f"{_num(r['face_reached_wheel_speed_rad_s'])} rad/s |" for name, r in v["runs"].items()]
    lines += ["", f"Limits of our choosing: jump_margin at least {JUMP_MARGIN_MIN:g}, at most "
              f"{JUMP_ATTEMPTS_LIMIT} jumps. No push bisection or bias holds for a jump law here.", ""]
    if v["monte_carlo"] is not None:
        lines += monte_carlo_markdown(v["monte_carlo"])[1:] + [""]
    lines += run_causes_markdown(v)
    lines += ["## Plots", ""] + [f"![{Path(img).stem}]({img})" for img in images if img.endswith(".png")] + [""]
    lines += ["## Safety", ""] + [f"- {s}" for s in SAFETY_NOTES] + [""]
    return "\n".join(lines)
