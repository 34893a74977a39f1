"""Which fit a bench log gets: `fit_log` hands a log to the fit module for its test.

Kept apart from `sim.fit.fitting` (the result type and shared helpers), which the fit modules
import, so that nothing imports in a circle: fitting <- fit_swing, fit_wheel <- bench_tests.
"""

from __future__ import annotations

from ..core.errors import InputError
from ..model.device3d import Device3D
from .bench3d import body_x_swing, pick_wheel, retarget, swing_bench, target, unscenarioed_target, wheel_bench
from .fitting import TESTS, FitResult

__all__ = ["TESTS", "fit_log"]


def fit_log(log, test: str, *, scenario=None, wheel: int | None = None, axis: str | None = None) -> FitResult:
    """Fit a bench log (`sim.fit.logs.BenchLog`) as the named `test`.

    Parameters
    ----------
    log : the bench log, SI.
    test : "free-swing", "spin-up" or "coast-down".
    scenario : a validated `Scenario` giving the figures a fit cannot measure (m g d, the wheel's
        inertia, friction), or None. A 3D device (`Scenario.is_planar` false) is read through
        `sim.fit.bench3d`: the wheel tests fit one wheel, free-swing a hinge about its hinge.
    wheel : the wheel a spin-up or coast-down was taken on, from 1 (needed when the scenario has
        several wheels; without a scenario it only places the patch under `wheels[wheel - 1]`).
    axis : a free swing on a ball mount: the world axis ("x" or "y", body upright) it swings about.

    Times in the result (facts, plot) count from the log's first sample, whose logged time is
    `facts["log_start_s"]`: a log stamped in seconds since 1970 keeps full precision that way.

    Raises
    ------
    InputError : a missing column, too few cycles, a log that does not look like the test.
    """
    from dataclasses import replace

    if test not in TESTS:
        raise InputError(f"--test: unknown test {test!r}; known: {', '.join(TESTS)}")
    device, view, where = _bench_figures(scenario, test, wheel, axis)
    start = float(log.t_s[0])
    log = replace(log, t_s=log.t_s - start)
    if test == "free-swing":
        from .fit_swing import fit_free_swing as fit
    elif test == "spin-up":
        from .fit_wheel import fit_spin_up as fit
    else:
        from .fit_wheel import fit_coast_down as fit
    result = fit(log, device=device, scenario=view)
    result.facts["log_start_s"] = start
    if where.note is not None and "motor" in result.patch:
        result.notes.append(where.note)
        result.target_note = where.note
    result.patch = retarget(result.patch, where)
    if axis is not None and "inertia_correction" in result.patch.get("body", {}) and not body_x_swing(
            Device3D.from_scenario(scenario), axis):
        del result.patch["body"]["inertia_correction"]
        result.notes.append(f"The swing about world {axis} is not about body x, the axis body.inertia_correction acts "
                            "about: the fitted inertia is reported, not patched.")
    return result


def _bench_figures(scenario, test: str, wheel: int | None, axis: str | None):
    """(device figures for the fit, scenario or a view of it, where the patch goes)."""
    if wheel is not None and test == "free-swing":
        raise InputError(f"--wheel {wheel}: free-swing fits the body's swing, not a wheel; leave --wheel out")
    if axis is not None and (test != "free-swing" or scenario is None or scenario.is_planar):
        raise InputError(f"--axis {axis}: only a free swing on a ball mount (with its --scenario) takes an axis")
    if scenario is None:
        return None, None, unscenarioed_target(wheel)
    if scenario.is_planar:
        from ..model.device import Device
        pick_wheel(scenario, wheel, test=test)      # a one-wheel device takes --wheel 1 only
        return Device.from_scenario(scenario), scenario, target(None, None)
    if test == "free-swing":
        return swing_bench(scenario, axis), scenario, target(None, None)
    i = pick_wheel(scenario, wheel, test=test)
    device, view = wheel_bench(scenario, i)
    return device, view, target(scenario, i)
