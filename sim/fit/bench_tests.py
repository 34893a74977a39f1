"""Which fit a bench log gets: `fit_log` hands a log to the fit module for its test.

Kept apart from `sim.fit.fitting` (the result type and shared helpers), which the fit modules
import, so that nothing imports in a circle: fitting <- fit_swing, fit_wheel <- bench_tests.
"""

from __future__ import annotations

from ..core.errors import InputError
from .fitting import TESTS, FitResult

__all__ = ["TESTS", "fit_log"]


def fit_log(log, test: str, *, scenario=None) -> FitResult:
    """Fit a bench log (`sim.fit.logs.BenchLog`) as the named `test`.

    Parameters
    ----------
    log : the bench log, SI.
    test : "free-swing", "spin-up" or "coast-down".
    scenario : a validated `Scenario` giving the figures a fit cannot measure (m g d, the wheel's
        inertia, friction), or None.

    Times in the result (facts, plot) count from the log's first sample, whose logged time is
    `facts["log_start_s"]`: a log stamped in seconds since 1970 keeps full precision that way.

    Raises
    ------
    InputError : a missing column, too few cycles, a log that does not look like the test.
    """
    from dataclasses import replace

    if test not in TESTS:
        raise InputError(f"--test: unknown test {test!r}; known: {', '.join(TESTS)}")
    device = None
    if scenario is not None:
        from ..model.device import Device
        device = Device.from_scenario(scenario)
    start = float(log.t_s[0])
    log = replace(log, t_s=log.t_s - start)
    if test == "free-swing":
        from .fit_swing import fit_free_swing as fit
    elif test == "spin-up":
        from .fit_wheel import fit_spin_up as fit
    else:
        from .fit_wheel import fit_coast_down as fit
    result = fit(log, device=device, scenario=scenario)
    result.facts["log_start_s"] = start
    return result
