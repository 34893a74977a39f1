"""Which fit a bench log gets: `fit_log` hands a log to the fit module for its test.

Kept apart from `sim.fit.fitting` (the result type and shared helpers), which the fit modules
import, so that nothing imports in a circle: fitting <- fit_swing, fit_wheel <- bench_tests.
"""

from __future__ import annotations

from ..core.errors import InputError
from .bench3d import pick_wheel, retarget, swing_bench, target, unscenarioed_target, wheel_bench
from .fitting import TESTS, FitResult

__all__ = ["TESTS", "fit_log"]


def fit_log(log, test: str, *, scenario=None, wheel: int | None = None) -> FitResult:
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

    Times in the result (facts, plot) count from the log's first sample, whose logged time is
    `facts["log_start_s"]`: a log stamped in seconds since 1970 keeps full precision that way.

    Raises
    ------
    InputError : a missing column, too few cycles, a log that does not look like the test.
    """
    from dataclasses import replace

    if test not in TESTS:
        raise InputError(f"--test: unknown test {test!r}; known: {', '.join(TESTS)}")
    device, view, where = _bench_figures(scenario, test, wheel)
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
    return result


def _bench_figures(scenario, test: str, wheel: int | None):
    """(device figures for the fit, scenario or a view of it, where the patch goes)."""
    if wheel is not None and test == "free-swing":
        raise InputError(f"--wheel {wheel}: free-swing fits the body's swing, not a wheel; leave --wheel out")
    if scenario is None:
        return None, None, unscenarioed_target(wheel)
    if scenario.is_planar:
        from ..model.device import Device
        pick_wheel(scenario, wheel, test=test)      # a one-wheel device takes --wheel 1 only
        return Device.from_scenario(scenario), scenario, target(None, None)
    if test == "free-swing":
        return swing_bench(scenario), scenario, target(None, None)
    i = pick_wheel(scenario, wheel, test=test)
    device, view = wheel_bench(scenario, i)
    return device, view, target(scenario, i)
