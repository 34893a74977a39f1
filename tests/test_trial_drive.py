"""The trial loop's drive and bookkeeping (sim.run.trial): the voltage limit is the scenario's supply,
enforced outside the strategy whatever a plug-in does; the phase after a fall reads "fallen";
balanced traces are the same numbers as before the clamp moved. Devices as in trial_cases.py."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from conftest import make_scenario
from sim.run.metrics import trial_metrics
from sim.run.trial import run_trial
from trial_cases import BIG_WHEEL, bias_pid, plugin_scenario


LOUD = {
    "own_supply": """
    class Loud(Base):
        def decide(self, reading):
            self.supply_v = 1e6
            return 1e6
    """,
    "device_supply": """
    class Loud(Base):
        def decide(self, reading):
            object.__setattr__(self.device, "supply_v", 1e6)
            return -1e6
    """,
    "own_command": """
    class Loud(Base):
        def decide(self, reading):
            return 0.0
        def command(self, reading):
            return 1e6
    """,
}


def test_the_phase_after_a_fall_reads_fallen():
    result = run_trial(bias_pid(3.0, 8.0), stop_early=False)
    k = int(round(result.fell_at_s / result.trace.step_s))
    modes = result.trace.modes()
    assert set(modes[:k]) == {"balance"} and set(modes[k:]) == {"fallen"}


@pytest.mark.parametrize("how", list(LOUD))
def test_the_drive_never_applies_more_than_the_scenarios_supply(tmp_path, how):
    sections = {"body": {"locked": True}, "trial": {"duration": 0.3}}
    result = run_trial(plugin_scenario(tmp_path, LOUD[how], "Loud", **sections))
    sign = -1.0 if how == "device_supply" else 1.0
    honest = run_trial(make_scenario(strategy={"kind": "fixed_voltage", "volts": 12.0 * sign}, **sections))
    assert result.outcome == "completed"
    assert_allclose(result.trace.view("voltage"), 12.0 * sign, rtol=0)
    # the same currents as a law asking for the supply itself; stall current V/R = 6 A bounds them
    assert_allclose(result.trace.view("current"), honest.trace.view("current"), rtol=0, atol=1e-12)
    assert np.max(np.abs(result.trace.view("current"))) <= 12.0 / 2.0 + 1e-9  # Ohm's law (common practice, no source)
    assert trial_metrics(result)["supply_v"] == 12.0


def test_a_law_that_clamps_itself_gives_the_same_trace_as_the_drives_clamp(tmp_path):
    # An LQR that saturates at 12 V early on, with a push, balanced: the same law clamping its own
    # command to the supply (as the strategy base did before the clamp moved into the runner's
    # drive) gives the very same trace, row for row.
    sections = {"wheel": BIG_WHEEL,
                "trial": {"duration": 2.0, "start": {"angle": "6 deg"}, "pushes": [{"at": 1.0, "impulse": 0.02}]}}
    sc = make_scenario(strategy={"kind": "lqr"}, **sections)
    own = plugin_scenario(tmp_path, """
    from sim.strategies.lqr import LqrBalance

    class SelfClamped(LqrBalance):
        def decide(self, reading):
            v = super().decide(reading)
            return max(-self.supply_v, min(self.supply_v, v))
    """, "SelfClamped", **sections)
    tr, tr_own = run_trial(sc).trace, run_trial(own, isolate=False).trace
    v = tr.view("voltage")
    assert_allclose(np.max(np.abs(v)), 12.0, rtol=0)             # it does saturate
    for col in ("voltage", "current", "angle", "wheel_speed"):
        assert_allclose(tr.view(col), tr_own.view(col), rtol=0, atol=0)
    assert tr.phases == ["balance"]


@pytest.mark.parametrize("answer", ["float('inf')", "float('nan')", "'12 V'"])
def test_a_replaced_command_that_is_no_finite_voltage_fails_the_strategy(tmp_path, answer):
    sc = plugin_scenario(tmp_path, f"""
    class Odd(Base):
        def decide(self, reading):
            return 0.0
        def command(self, reading):
            return {answer} if reading.t_s >= 0.01 else 0.0
    """, "Odd", trial={"duration": 0.1})
    result = run_trial(sc)
    assert result.outcome == "strategy_failed" and "t = 0.0100 s" in result.message
    assert result.cause == "strategy_failed"


@pytest.mark.parametrize("isolate", [True, False])
def test_a_strategy_that_rewrites_its_device_gets_no_more_current_or_volts(tmp_path, isolate):
    # a 1 A drive; the plug-in lifts its device's current limit and supply, then asks for 1e6 V
    sc = plugin_scenario(tmp_path, """
    class Greedy(Base):
        def __init__(self, **kw):
            super().__init__(**kw)
            object.__setattr__(self.device, "current_limit_a", float("inf"))
            object.__setattr__(self.device, "supply_v", 1e6)
        def decide(self, reading):
            return 1e6
    """, "Greedy", body={"locked": True}, motor={"current_limit": 1.0}, trial={"duration": 0.2})
    result = run_trial(sc, isolate=isolate)
    assert result.outcome == "completed"
    assert np.max(np.abs(result.trace.view("voltage"))) == 12.0
    assert np.max(np.abs(result.trace.view("current"))) <= 1.0 + 1e-12
    assert result.device.current_limit_a == 1.0 and result.device.supply_v == 12.0

