"""Plug-in trials in a forked child (sim.core.isolation): stuck or crashing strategy code is an outcome.

The misbehaving plug-ins are in tests/plugins/stuck_laws.py. Each holds 0 V until 0.02 s, like
simple_laws.RaisesLater, so the rows before the failure can be compared with an in-process failure
at the same tick. Run in this process, the stuck ones would never return: `hang_guard` ends the
test run with a traceback after 60 s instead (faulthandler's watchdog thread runs while the main
thread waits in C).
"""

from __future__ import annotations

import csv
import faulthandler
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from conftest import make_scenario, scenario_dict, write_scenario
import sim.run.trial
from sim.cli import main
from sim.core import isolation
from sim.run.metrics import trial_metrics
from sim.run.trace import write_csv
from sim.run.trial import run_trial
from sim.studies.verdicts import EarlyStop, run_until_clear

pytestmark = pytest.mark.skipif(not isolation.AVAILABLE or not sys.platform.startswith("linux"),
                                reason="process isolation needs fork; the stuck plug-ins need Linux's libc")

PLUGINS = Path(__file__).parent / "plugins"
STUCK, SIMPLE = PLUGINS / "stuck_laws.py", PLUGINS / "simple_laws.py"
TRIAL = {"duration": 0.5, "start": {"angle": 0.05}}
NOISY = dict(sensors={"delay": 0.002, "angle": {"counts_per_rev": 4096, "noise": 0.001},
                      "rate_gyro": {"noise": 0.02, "bias": 0.005}, "wheel": {"counts_per_rev": 2048, "noise": 0.5}},
             trial={"duration": 1.0, "start": {"angle": 0.05}, "pushes": [{"at": 0.5, "impulse": 0.005}], "seed": 11})


@pytest.fixture(autouse=True)
def plugins_from_tests_folder(monkeypatch):
    """The scenarios here name plug-ins in tests/plugins/ by absolute path, from files elsewhere:
    allowed explicitly (the refusal itself is tested in tests/test_plugins.py)."""
    from sim.strategies import ALLOW_OUTSIDE_ENV
    monkeypatch.setenv(ALLOW_OUTSIDE_ENV, "1")


@pytest.fixture
def hang_guard():
    faulthandler.dump_traceback_later(60, exit=True, file=sys.__stderr__)
    yield
    faulthandler.cancel_dump_traceback_later()


def plugin(path: Path, cls: str, **params):
    return make_scenario(strategy={"plugin": f"{path}:{cls}", **params}, trial=TRIAL)


def columns(result) -> dict:
    tr = result.trace
    return {name: tr.view(name).copy() for name in (*tr.FLOAT_COLUMNS, "mode")}


def assert_same_rows(a, b) -> None:
    ca, cb = columns(a), columns(b)
    assert a.trace.n == b.trace.n and a.trace.phases == b.trace.phases
    for name in ca:
        assert np.array_equal(ca[name], cb[name]), name     # bit for bit


@pytest.fixture
def short_budget(monkeypatch):
    """A 0.3 s strategy budget and a 0.2 s grace for runs started through the CLI (the forked
    children inherit both), so a stuck plug-in costs half a second instead of a minute."""
    monkeypatch.setattr(sim.run.trial, "STRATEGY_BUDGET_S", 0.3)
    monkeypatch.setattr(isolation, "GRACE_S", 0.2)


class HookStop(Exception):
    """Raised by a test's on_step hook (module level: it must pickle by reference)."""


def timeless(metrics: dict) -> dict:
    return {k: v for k, v in metrics.items() if k != "real_time_factor"}


def in_process_failure_at_the_same_tick():
    """The in-process failure the isolated ones are compared with: a Python exception at 0.02 s."""
    return run_trial(plugin(SIMPLE, "RaisesLater", after_s=0.02), isolate=False)


def test_a_plugin_stuck_in_compiled_code_ends_as_strategy_failed(hang_guard):
    t0 = time.perf_counter()
    r = run_trial(plugin(STUCK, "Deadlocks"), strategy_budget_s=0.5)
    elapsed = time.perf_counter() - t0
    assert r.outcome == "strategy_failed"
    assert r.message == ("strategy code did not return within its 0.5 s budget (stuck in compiled code?) "
                         "at control tick 10 (t = 0.0200 s)")
    # killed at budget + grace (2.5 s) after the call began, not at the end of the world
    assert elapsed < 10.0
    # the trace is cut where the call hung, as for an in-process failure at that tick
    ref = in_process_failure_at_the_same_tick()
    assert r.trace.n == 21 and r.ended_at_s == ref.ended_at_s and r.control_ticks == ref.control_ticks
    assert_same_rows(r, ref)
    assert r.strategy.goal == "balance" and r.strategy.params.after_s == 0.02
    assert trial_metrics(r)["outcome"] == "strategy_failed"


@pytest.mark.parametrize("cls,how", [("Segfaults", "signal 11, SIGSEGV"), ("ExitsProcess", "exit status 3")])
def test_a_plugin_that_kills_its_process_ends_as_strategy_failed(cls, how):
    r = run_trial(plugin(STUCK, cls))
    assert r.outcome == "strategy_failed"
    assert r.message == f"the strategy's process died ({how}) at control tick 10 (t = 0.0200 s)"
    assert_same_rows(r, in_process_failure_at_the_same_tick())


def test_a_plugin_stuck_while_being_built_records_the_start(hang_guard):
    r = run_trial(plugin(STUCK, "Deadlocks", in_build=True), strategy_budget_s=0.3)
    assert r.outcome == "strategy_failed"
    assert r.message == ("building the strategy failed: strategy code did not return within its 0.3 s budget "
                         "(stuck in compiled code?)")
    assert r.trace.n == 1 and r.trace.angle[0] == 0.05 and r.control_ticks == 0 and r.ended_at_s == 0.0


def test_isolated_and_in_process_runs_are_identical(tmp_path):
    sc = make_scenario(strategy={"plugin": f"{SIMPLE}:ProportionalDamping"}, **NOISY)
    here, there = run_trial(sc, isolate=False), run_trial(sc, isolate=True)
    assert there.trace.file_backed and not here.trace.file_backed     # really two different paths
    assert here.outcome == there.outcome == "balanced"
    assert_same_rows(here, there)
    write_csv(here.trace, tmp_path / "here.csv")
    write_csv(there.trace, tmp_path / "there.csv")
    assert (tmp_path / "here.csv").read_bytes() == (tmp_path / "there.csv").read_bytes()
    assert timeless(trial_metrics(here)) == timeless(trial_metrics(there))
    # the strategy's own attributes come back (a plug-in's counter, the base's bookkeeping)
    assert there.strategy.calls == here.strategy.calls == there.control_ticks
    assert there.strategy.kind == "proportional damping" and there.strategy.device is there.device


def test_isolation_is_chosen_for_plugins_only(monkeypatch):
    calls = []
    real = isolation.run_in_child
    monkeypatch.setattr(isolation, "run_in_child", lambda *a, **kw: calls.append(1) or real(*a, **kw))
    short = {"duration": 0.05}
    run_trial(make_scenario(strategy={"kind": "lqr"}, trial=short))
    run_trial(make_scenario(strategy={"kind": "swing_and_catch"}, trial=short))
    assert calls == []
    run_trial(make_scenario(strategy={"plugin": f"{SIMPLE}:ProportionalDamping"}, trial=short))
    nested = {"kind": "swing_and_catch", "balance": {"plugin": f"{SIMPLE}:ProportionalDamping"}}
    run_trial(make_scenario(strategy=nested, trial=short))
    assert calls == [1, 1]
    run_trial(make_scenario(strategy={"kind": "lqr"}, trial=short), isolate=True)
    run_trial(make_scenario(strategy=nested, trial=short), isolate=False)
    assert calls == [1, 1, 1]
    with pytest.raises(ValueError, match="no visual"):
        run_trial(make_scenario(strategy=nested, trial=short), isolate=True, visual=object())


def test_an_on_step_hook_raising_comes_back_with_what_the_hook_saw():
    # sim.studies.verdicts' early stop raises an exception whose __init__ takes other arguments than its
    # args, and keeps a record (the peak wheel speed) that the caller reads afterwards
    sc = make_scenario(strategy={"plugin": f"{SIMPLE}:ProportionalDamping"},
                       trial={"duration": 3.0, "start": {"angle": 0.05}})
    assert run_until_clear(sc, seed=3) == _in_process(lambda: run_until_clear(sc, seed=3))
    watch = EarlyStop(sc)

    def hook(k, engine):
        watch(k, engine)
        if k == 100:
            raise HookStop("stop here", k)

    with pytest.raises(HookStop) as info:
        run_trial(sc, on_step=hook, isolate=True)
    assert info.value.args == ("stop here", 100)


def _in_process(fn):
    """fn() with isolation switched off (the reference for the isolated run)."""
    old = isolation.AVAILABLE
    isolation.AVAILABLE = False
    try:
        return fn()
    finally:
        isolation.AVAILABLE = old


def test_an_interrupted_parent_kills_its_child(hang_guard, monkeypatch):
    pids = []
    real_fork = os.fork
    monkeypatch.setattr(os, "fork", lambda: pids.append(real_fork()) or pids[-1])

    def interrupt(signum, frame):
        raise KeyboardInterrupt

    previous = signal.signal(signal.SIGALRM, interrupt)
    signal.setitimer(signal.ITIMER_REAL, 0.5)      # while the child is stuck, with 60 s of budget left
    try:
        with pytest.raises(KeyboardInterrupt):
            run_trial(plugin(STUCK, "Deadlocks"))
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0.0)
        signal.signal(signal.SIGALRM, previous)
    assert len(pids) == 1 and pids[0] > 0
    with pytest.raises(ProcessLookupError):        # killed and reaped
        os.kill(pids[0], 0)


def test_a_killed_parent_leaves_no_child_behind(tmp_path):
    pid_file = tmp_path / "child.pid"
    scen = write_scenario(tmp_path / "s.yaml", scenario_dict(
        strategy={"plugin": f"{STUCK}:Deadlocks", "pid_file": str(pid_file)}, trial=TRIAL))
    parent = subprocess.Popen([sys.executable, "-m", "sim.cli", "run", str(scen), "--out", str(tmp_path / "out")],
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 30
        while not pid_file.exists() or not pid_file.read_text():
            assert time.monotonic() < deadline and parent.poll() is None
            time.sleep(0.05)
        child = int(pid_file.read_text())
        parent.send_signal(signal.SIGTERM)
        parent.wait(30)
    finally:
        parent.kill()
    deadline = time.monotonic() + 10
    while _alive(child):
        assert time.monotonic() < deadline, "the child outlived its parent"
        time.sleep(0.05)


def _alive(pid: int) -> bool:
    """Running or sleeping (a zombie waiting for its reaper counts as gone)."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return False
    return stat.rsplit(")", 1)[1].split()[0] not in ("Z", "X")


def test_wheelbench_run_with_a_stuck_plugin_finishes_and_reports_it(tmp_path, capsys, short_budget, hang_guard):
    scen = write_scenario(tmp_path / "s.yaml", scenario_dict(strategy={"plugin": f"{STUCK}:Deadlocks"}, trial=TRIAL))
    out = tmp_path / "out"
    code = main(["run", str(scen), "--out", str(out), "--set", "strategy.after_s=0.0"])
    assert code == 0                            # as for any other strategy failure: an outcome, not a crash
    metrics = json.loads((out / "metrics.json").read_text())
    assert metrics["outcome"] == "strategy_failed"
    assert metrics["message"] == ("strategy code did not return within its 0.3 s budget (stuck in compiled code?) "
                                  "at control tick 0 (t = 0.0000 s)")
    assert "strategy_failed" in capsys.readouterr().out
    assert (out / "trace.csv").read_text().count("\n") == 2   # the header and the row at t = 0


def test_a_sweep_over_a_stuck_plugin_records_each_point(tmp_path, short_budget, hang_guard):
    scen = write_scenario(tmp_path / "s.yaml", scenario_dict(strategy={"plugin": f"{STUCK}:Deadlocks"}, trial=TRIAL))
    out = tmp_path / "sweep"
    code = main(["sweep", str(scen), "--vary", "strategy.after_s=0.01,0.03", "--out", str(out), "--workers", "1"])
    assert code in (0, 1)
    with open(out / "results.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [row["outcome"] for row in rows] == ["strategy_failed", "strategy_failed"]
    assert ["t = 0.0100 s" in rows[0]["message"], "t = 0.0300 s" in rows[1]["message"]] == [True, True]


def test_the_heartbeat_carries_odd_and_many_phase_names():
    beat = isolation.Heartbeat()
    odd = ['a,b', 'say "hi"', "two\nlines", "", "[/]", "\u00e9t\u00e9"]
    beat.publish_phases(odd)
    assert beat.phases() == odd
    many = [f"phase name {i:03d} " + "x" * 40 for i in range(257)]     # more than PHASE_BYTES of JSON
    beat.publish_phases(many)
    got = beat.phases()
    kept = next(i for i, name in enumerate(got) if name != many[i])
    assert 0 < kept < 257 and got[:kept] == many[:kept]                 # the leading names that fit
    assert got[kept:] == [f"phase {i}" for i in range(kept, 257)]       # the rest by number
    assert int(beat.slots[isolation.Heartbeat.PHASE_LENGTH]) <= isolation.Heartbeat.PHASE_BYTES


def test_probe_in_child_tells_each_ending_apart(capfd):
    from plugins.stuck_laws import deadlock

    def talks():
        print("said at import", flush=True)
        os.write(2, b"written to stderr\n")

    assert isolation.probe_in_child(talks, timeout_s=10) == ("ok", "")
    assert capfd.readouterr() == ("", "")      # the trial import's output is silenced
    assert isolation.probe_in_child(lambda: "it broke", timeout_s=10) == ("failed", "it broke")
    assert isolation.probe_in_child(lambda: os._exit(0), timeout_s=10) == ("ended", "exit status 0")
    assert isolation.probe_in_child(deadlock, timeout_s=0.3) == ("stuck", "")
