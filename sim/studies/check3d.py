"""The `check` battery's trials for a 3D device (one to three wheels, a hinge or a ball mount).

The planar battery (`sim.studies.verdicts`) judges one angle and one wheel; here:
1. the scenario's own trial ("nominal");
2. a hold: HOLD_S from a small tilt (HOLD_TILT_RAD; on a ball split evenly about x and y), at rest,
   the scenario's sensor noise, no pushes: a law that is wrong about an axis shows it here, where a
   start exactly upright would leave it idle;
3. the largest push survived, by bisection on the impulse, about each of `push_directions`
   (world horizontal axes; every 45 degrees on a ball, +-x on a hinge); the worst direction is the
   figure judged;
4. Monte Carlo over the tolerances (`sim.studies.monte_carlo`, judged by `sim.studies.judge3d`);
5. long holds (`requirements.hold_time`) with the angle sensor's bias at each end of its tolerance
   band, one tilt axis at a time (x, and y on a ball): each wheel's drift fitted and extrapolated to
   its own no-load speed, the linear model's prediction beside it (`sim.studies.criteria3d`, which
   the 3D judge of sweep and tune shares); with an estimator the band is the IMU's misalignment's
   (`sim.studies.verdicts.bias_ends`), its offset from the scenario's own added to the estimated tilt
   about that axis (to first order what a board turned about that axis reads);
7. with an estimator, its steady and push errors (`sim.studies.sensing_checks.sensing_checks3d`);
6. on a hinge with a wheel off the hinge axis, the same design with every wheel axis along the hinge
   (`axis_twin`), for what the tilt costs.
Criteria and files: `sim.studies.verdicts3d`, `sim.studies.verdict_report3d`.
"""

from __future__ import annotations

import copy
import math

from ..model.device3d import Device3D
from ..model.scenario import Push, validate_scenario
from ..run.metrics import PUSH_RECOVER_S, push_outcomes
from ..run.metrics3d import trial_metrics3d
from ..run.trial3d import run_trial3d
from .battery3d import EarlyStop3D
from .criteria3d import at_rest as _at_rest
from .verdicts import HOLD_S, PUSH_AT_S, _Stop, largest_survived, with_trial

HOLD_TILT_RAD = math.radians(1.0)   # the hold's start tilt from upright (our choice: inside any release angle,
                                    # outside the 1 degree settle band's centre, so the law has work to do)
BALL_DIRECTIONS = {"+x": 0, "+x+y": 45, "+y": 90, "-x+y": 135, "-x": 180, "-x-y": 225, "-y": 270, "+x-y": 315}
"""A ball's push axes: label -> angle in the horizontal plane from world +x toward +y, degrees."""
PUSH_FLOOR_SHARE = 1 / 16   # bisection stops below min_push / 16: enough to tell how far a design falls short (our choice)


def push_directions(device) -> dict[str, tuple[float, float, float]]:
    """Unit world axes the pushes' angular impulses act about, by label ("+x+y": halfway between +x and
    +y). A hinge takes only the x component, so it is pushed about +-x."""
    if device.mount != "ball":
        return {"+x": (1.0, 0.0, 0.0), "-x": (-1.0, 0.0, 0.0)}
    return {label: (math.cos(math.radians(deg)), math.sin(math.radians(deg)), 0.0)
            for label, deg in BALL_DIRECTIONS.items()}


def hold_scenario3d(sc):
    """The hold: HOLD_S from HOLD_TILT_RAD at rest, no pushes."""
    return with_trial(sc, duration=HOLD_S, start=_at_rest(sc, tilt_rad=HOLD_TILT_RAD), pushes=[])


def push_scenario3d(sc, impulse: tuple[float, float, float]):
    """Upright at rest, one push of this world angular impulse (N m s) after PUSH_AT_S."""
    value = impulse[0] if sc.design_mount != "ball" else tuple(float(v) for v in impulse)
    return with_trial(sc, duration=PUSH_AT_S + PUSH_RECOVER_S, pushes=[Push(at=PUSH_AT_S, impulse=value)],
                      start=_at_rest(sc))


# ----------------------------------------------------------------------------- early stopping

# `EarlyStop3D` (sim.studies.battery3d): the planar early stop's rules on the tilt and the horizontal rates


def push_survived3d(sc, impulse: tuple[float, float, float], *, seed: int) -> bool:
    """Does the design, held upright at rest, recover from one push of this world angular impulse (N m s)?"""
    scen = push_scenario3d(sc, impulse)
    watch = EarlyStop3D(scen, not_before_s=PUSH_AT_S + scen.world.step)
    try:
        result = run_trial3d(scen, seed=seed, stop_early=True, on_step=watch)
    except _Stop as stop:
        return stop.outcome == "caught"
    return result.outcome == "balanced" and all(p["survived"] for p in push_outcomes(result, result.trace.tilt[: result.trace.n]))


def max_push3d(sc, direction: tuple[float, float, float], *, seed: int) -> dict:
    """Largest push survived about one world axis (`sim.studies.verdicts.largest_survived`), the
    bisection ending early below PUSH_FLOOR_SHARE of `requirements.min_push`."""
    return largest_survived(lambda x: push_survived3d(sc, tuple(x * d for d in direction), seed=seed),
                            start_n_m_s=max(sc.requirements.min_push, 1e-3),
                            floor_n_m_s=PUSH_FLOOR_SHARE * sc.requirements.min_push)


# ----------------------------------------------------------------------------- a tilted wheel's cost

def hinge_shares(device) -> list[float]:
    """Each wheel's hinge-wise torque share |a_x| (the cosine of its axis's angle from the hinge; a
    hinge turns with the torque's x component only, the rest goes into the bearing: statics)."""
    return [abs(w.axis[0]) for w in device.wheels]


def aligned_raw(raw: dict) -> dict:
    """The raw scenario with every wheel's axis along the hinge ([1, 0, 0]), all else kept."""
    out = copy.deepcopy(raw)
    for key in ("wheels", "wheel"):
        wheels = out.get(key)
        for w in (wheels if isinstance(wheels, list) else [wheels] if isinstance(wheels, dict) else []):
            if isinstance(w, dict):
                w["axis"] = [1, 0, 0]
    return out


def axis_twin(raw: dict, where: str, sc, device, *, seed: int, on_stage) -> dict | None:
    """On a hinge with a wheel axis off the hinge: the same device with its axes along the hinge, its
    own LQR, and its trials (nominal, largest push each way), for `verdicts3d.axis_cost`. None otherwise."""
    if device.mount != "hinge" or min(hinge_shares(device)) > 1.0 - 1e-9:
        return None
    on_stage("the same design with its wheel axes along the hinge")
    twin = validate_scenario(aligned_raw(raw), where=where)
    twin_device = Device3D.from_scenario(twin)
    nominal = trial_metrics3d(run_trial3d(twin))
    pushes = {label: max_push3d(twin, d, seed=seed) for label, d in push_directions(twin_device).items()}
    return {"device": twin_device, "nominal": nominal, "pushes": pushes}
