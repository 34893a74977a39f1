"""Failure outcomes of the trial runner: diverged runs and misbehaving plug-in strategies.

A failed run is an outcome with a message and the time it happened, never an exception out of
`run_trial` (house style, "Outcomes are data"). The plug-ins below are written to temporary
files, the way a user would add one.
"""

from __future__ import annotations

import math
import signal
import textwrap
import threading

import numpy as np
import pytest
from numpy.testing import assert_allclose

from conftest import make_scenario
from sim.core.budget import StrategyClock
from sim.run.trial import run_trial

PLUGIN_HEAD = """
import math, time
from sim.strategies import Strategy

class Base(Strategy):
    goal = "balance"
"""


def plugin_scenario(tmp_path, body: str, cls: str, **sections):
    """A test scenario whose strategy is class `cls` defined by `body` in a plug-in file."""
    path = tmp_path / "plug.py"
    path.write_text(PLUGIN_HEAD + textwrap.dedent(body), encoding="utf-8")
    return make_scenario(strategy={"plugin": f"{path}:{cls}"}, **sections)


def test_nan_voltage_is_strategy_failed_at_its_tick(tmp_path):
    sc = plugin_scenario(tmp_path, """
    class NanAfter(Base):
        def decide(self, reading):
            return float("nan") if reading.t_s >= 0.1 else 0.0
    """, "NanAfter")
    r = run_trial(sc)
    assert r.outcome == "strategy_failed"
    assert "non-finite" in r.message and "t = 0.1000 s" in r.message
    # 500 Hz control on a 1 ms step: ticks at even steps; the NaN comes at step 100 (t = 0.1 s)
    assert_allclose(r.ended_at_s, 0.1, rtol=0, atol=1e-12)
    assert r.trace.n == 101


def test_raising_strategy_is_strategy_failed_with_its_message(tmp_path):
    sc = plugin_scenario(tmp_path, """
    class Raises(Base):
        def decide(self, reading):
            if reading.t_s >= 0.05:
                raise ZeroDivisionError("gain table ran out")
            return 0.0
    """, "Raises")
    r = run_trial(sc)
    assert r.outcome == "strategy_failed"
    assert r.message == "ZeroDivisionError at t = 0.0500 s: gain table ran out"


def test_strategy_calling_exit_is_strategy_failed(tmp_path):
    sc = plugin_scenario(tmp_path, """
    class Exits(Base):
        def decide(self, reading):
            raise SystemExit(3)
    """, "Exits")
    r = run_trial(sc)
    assert r.outcome == "strategy_failed" and r.message.startswith("SystemExit at t = 0.0000 s")


def test_strategy_that_fails_to_build_still_records_the_start(tmp_path):
    sc = plugin_scenario(tmp_path, """
    class BadDesign(Base):
        def __init__(self, **kw):
            super().__init__(**kw)
            raise ValueError("no stabilising gain")
        def decide(self, reading):
            return 0.0
    """, "BadDesign", trial={"start": {"angle": 0.3}})
    r = run_trial(sc)
    assert r.outcome == "strategy_failed"
    assert r.message == "building the strategy failed: ValueError: no stabilising gain"
    assert r.trace.n == 1
    assert_allclose(r.trace.angle[0], 0.3, rtol=1e-12)  # the start angle set by the scenario


HANG = """
class Hangs(Base):
    def decide(self, reading):
        if reading.t_s >= 0.02:
            t0 = time.perf_counter()
            # endless in spirit; bounded so a broken timer fails this test instead of hanging it
            while time.perf_counter() - t0 < 20.0:
                try:
                    pass
                except Exception:   # a broad handler must not swallow the timeout
                    pass
        return 0.0
"""


@pytest.mark.skipif(not hasattr(signal, "setitimer"), reason="interval timers are POSIX only")
def test_hanging_strategy_is_interrupted_at_its_budget(tmp_path):
    sc = plugin_scenario(tmp_path, HANG, "Hangs")
    before = signal.getsignal(signal.SIGALRM)
    r = run_trial(sc, strategy_budget_s=0.3)
    assert r.outcome == "strategy_failed"
    assert r.message.startswith("StrategyTimeout at t = 0.0200 s")
    assert "0.3 s budget" in r.message
    # interrupted by the timer, well before the plug-in's own 20 s bound
    assert r.wall_s < 10.0
    # the runner leaves the process's alarm as it found it
    assert signal.getsignal(signal.SIGALRM) is before
    assert signal.getitimer(signal.ITIMER_REAL) == (0.0, 0.0)


def test_slow_strategy_outside_the_main_thread_fails_when_the_call_returns(tmp_path):
    sc = plugin_scenario(tmp_path, """
    class Slow(Base):
        def decide(self, reading):
            time.sleep(0.02)
            return 0.0
    """, "Slow")
    box = {}
    worker = threading.Thread(target=lambda: box.setdefault("r", run_trial(sc, strategy_budget_s=0.1)))
    worker.start()
    worker.join(60)
    r = box["r"]
    assert r.outcome == "strategy_failed" and "StrategyTimeout" in r.message
    # 0.1 s of budget at >= 0.02 s per call: it cannot outlast 6 ticks (t = 0.010 s)
    assert r.ended_at_s <= 0.010 + 1e-12


def test_slow_build_counts_against_the_budget(tmp_path):
    sc = plugin_scenario(tmp_path, """
    class SlowDesign(Base):
        def __init__(self, **kw):
            super().__init__(**kw)
            time.sleep(0.3)
        def decide(self, reading):
            return 0.0
    """, "SlowDesign")
    r = run_trial(sc, strategy_budget_s=0.1)
    assert r.outcome == "strategy_failed"
    assert r.message.startswith("building the strategy failed: StrategyTimeout")


def test_clock_leaves_a_running_timer_alone():
    """A caller's own interval timer (e.g. a test-timeout plug-in) is not replaced."""
    if not hasattr(signal, "setitimer"):
        pytest.skip("interval timers are POSIX only")
    previous = signal.signal(signal.SIGALRM, lambda *a: None)
    signal.setitimer(signal.ITIMER_REAL, 100.0)
    try:
        with StrategyClock(1.0) as clock:
            assert not clock.interrupts
        remaining, _ = signal.getitimer(signal.ITIMER_REAL)
        assert 0.0 < remaining <= 100.0
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0.0)
        signal.signal(signal.SIGALRM, previous)


def test_huge_push_diverges_with_its_time():
    # 1000 N m s over one 1 ms step on a body with J ~ 9e-3 kg m^2 asks for ~1e5 rad/s: far past
    # the runner's 1e4 rad/s "absurd" bound, so the step after the push is judged diverged.
    sc = make_scenario(trial={"duration": 0.5, "pushes": [{"at": 0.1, "impulse": 1000.0}]})
    r = run_trial(sc)
    assert r.outcome == "diverged"
    assert "t = 0.1010 s" in r.message
    assert_allclose(r.ended_at_s, 0.101, rtol=0, atol=1e-12)
    assert r.trace.n == 102 and abs(r.trace.rate[101]) > 1e4


def test_non_finite_state_is_diverged(monkeypatch):
    """The engine returning NaN (as a blown-up solver would) ends the run as diverged."""
    import sim.run.trial as trial_mod

    real = trial_mod.EngineModel

    class NanEngine(real):
        def io(self):
            read, advance = super().io()
            calls = {"n": 0}

            def nan_read():
                calls["n"] += 1
                th, thd, ph, phd = read()
                return (math.nan, thd, ph, phd) if calls["n"] > 50 else (th, thd, ph, phd)

            return nan_read, advance

    monkeypatch.setattr(trial_mod, "EngineModel", NanEngine)
    r = run_trial(make_scenario())
    assert r.outcome == "diverged" and "t = 0.0500 s" in r.message
    assert np.isnan(r.trace.angle[50]) and r.trace.n == 51
