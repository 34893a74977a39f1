"""Plug-ins: user strategies by file path, module path and entry point; failures become outcomes."""

from __future__ import annotations

import csv
import json
import math
import shutil
from importlib.metadata import EntryPoint
from pathlib import Path

import numpy as np
import pytest

from sim.cli import main
from sim.core.errors import ScenarioError
from sim.model.scenario_yaml import load_scenario
from sim.run.metrics import trial_metrics
from sim.run.trial import run_trial
from conftest import scenario_dict, write_scenario

PLUGIN_FILE = Path(__file__).parent / "plugins" / "simple_laws.py"


def _scenario_with(tmp_path: Path, strategy: dict, **sections) -> Path:
    shutil.copy(PLUGIN_FILE, tmp_path / "simple_laws.py")
    raw = scenario_dict(strategy=strategy, trial={"duration": 0.5, "start": {"angle": "3 deg"}}, **sections)
    return write_scenario(tmp_path / "plug.yaml", raw)


def test_plugin_from_a_file_beside_the_scenario_runs_with_its_parameters(tmp_path):
    path = _scenario_with(tmp_path, {"plugin": "simple_laws.py:ProportionalDamping", "gain": 120.0})
    sc = load_scenario(path)
    assert sc.strategy.params.gain == 120.0 and sc.strategy.params.damping == 10.0
    res = run_trial(sc)
    assert res.outcome == "balanced"        # a PD law of this size holds the test device from 3 deg
    assert res.strategy.calls == res.control_ticks
    assert "user law" in res.trace.phases


def test_plugin_by_absolute_path_and_by_module_path(tmp_path):
    inside = tmp_path / "simple_laws.py"     # an absolute path into the scenario's own folder
    sc = load_scenario(_scenario_with(tmp_path, {"plugin": f"{inside}:ProportionalDamping"}))
    assert sc.strategy.cls.__name__ == "ProportionalDamping"
    sc = load_scenario(_scenario_with(tmp_path, {"plugin": "sim.strategies.pid:PidBalance", "kp": 50.0}))
    assert sc.strategy.params.kp == 50.0


def test_plugin_from_an_entry_point(tmp_path, monkeypatch):
    import sim.strategies as registry
    ep = EntryPoint(name="my_pid", value="sim.strategies.pid:PidBalance", group=registry.ENTRY_POINT_GROUP)
    monkeypatch.setattr(registry, "_entry_points", lambda: [ep])
    sc = load_scenario(_scenario_with(tmp_path, {"kind": "my_pid"}))
    assert sc.strategy.cls.__name__ == "PidBalance"
    assert "my_pid" in registry.known_kinds()


@pytest.mark.parametrize("plugin,needle", [
    ("simple_laws.py:NotAStrategy", "not a subclass"),
    ("simple_laws.py:Missing", "has no class 'Missing'"),
    ("nowhere.py:X", "no such file"),
    ("simple_laws.py:ProportionalDamping:extra", "expected"),
])
def test_bad_plugins_are_refused_at_load_naming_the_key(tmp_path, plugin, needle):
    with pytest.raises(ScenarioError, match=r"strategy\.plugin") as info:
        load_scenario(_scenario_with(tmp_path, {"plugin": plugin}))
    assert needle in str(info.value)


def test_a_plugin_that_never_finishes_importing_is_refused_within_the_budget(tmp_path, monkeypatch):
    import sim.strategies

    (tmp_path / "endless.py").write_text("while True:\n    pass\n")
    monkeypatch.setattr(sim.strategies, "IMPORT_BUDGET_S", 0.3)
    with pytest.raises(ScenarioError, match=r"strategy\.plugin: importing .*TimeoutError"):
        load_scenario(_scenario_with(tmp_path, {"plugin": "endless.py:Law"}))


def test_a_plugin_whose_import_hangs_in_compiled_code_is_refused(tmp_path, monkeypatch, capsys):
    # a double pthread_mutex_lock (Linux/glibc) waits where no signal reaches: only the forked
    # trial import can be given up on
    import sys as _sys
    import sim.strategies
    if not _sys.platform.startswith("linux"):
        pytest.skip("needs Linux's libc")
    (tmp_path / "locks.py").write_text(
        "import ctypes\nlibc = ctypes.CDLL(None)\nm = ctypes.create_string_buffer(64)\n"
        "libc.pthread_mutex_lock(m)\nlibc.pthread_mutex_lock(m)\n")
    monkeypatch.setattr(sim.strategies, "IMPORT_BUDGET_S", 0.3)
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(strategy={"plugin": "locks.py:Law"}))
    assert main(["validate", str(path)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "strategy.plugin: importing" in err[0]
    assert "did not finish within 0.3 s (stuck in compiled code?)" in err[0]


def test_unknown_kind_names_the_nearest(tmp_path):
    with pytest.raises(ScenarioError, match="did you mean 'swing_and_catch'"):
        load_scenario(_scenario_with(tmp_path, {"kind": "swing_and_cach"}))


def test_a_raising_plugin_ends_with_strategy_failed_and_its_message_in_metrics(tmp_path, capsys):
    path = _scenario_with(tmp_path, {"plugin": "simple_laws.py:RaisesLater", "after_s": 0.1})
    out = tmp_path / "out"
    code = main(["run", str(path), "--out", str(out)])
    assert code == 0                        # a failed run is an outcome, not a crash
    metrics = json.loads((out / "metrics.json").read_text())
    assert metrics["outcome"] == "strategy_failed"
    assert "sensor bus lost" in metrics["message"] and "RuntimeError" in metrics["message"]
    # the trace ends at the failing tick (t = 0.1 s, 1 ms steps): rows 0..100, 0 V throughout (the
    # law asked for nothing else), starting at the scenario's 3 deg
    with open(out / "trace.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 101 and float(rows[-1]["t_s"]) == pytest.approx(0.1, abs=1e-12)
    assert all(float(r["voltage_v"]) == 0.0 for r in rows)
    assert float(rows[0]["angle_rad"]) == pytest.approx(math.radians(3.0), rel=1e-8)
    assert metrics["simulated_s"] == pytest.approx(0.1, abs=1e-12)


def test_a_nested_plugin_resolves_beside_the_scenario(tmp_path):
    # swing_and_catch's nested specs go through the same resolver, with the scenario's folder as base
    path = _scenario_with(tmp_path, {"kind": "swing_and_catch",
                                     "balance": {"plugin": "simple_laws.py:ProportionalDamping", "gain": 130.0}})
    sc = load_scenario(path)
    assert sc.strategy.params.balance.cls.__name__ == "ProportionalDamping"
    assert sc.strategy.params.balance.params.gain == 130.0
    res = run_trial(sc)                     # starts at 3 deg: caught at once by the user's law
    assert res.outcome == "balanced" and "user law" in res.trace.phases


# ----------------------------------------------------------------- hostile plug-ins (issue 13)

HOSTILE_FILE = Path(__file__).parent / "plugins" / "hostile_laws.py"


def _hostile(tmp_path: Path, cls: str, *, duration: float = 0.1, **params) -> Path:
    shutil.copy(HOSTILE_FILE, tmp_path / "hostile_laws.py")
    raw = scenario_dict(strategy={"plugin": f"hostile_laws.py:{cls}", **params},
                        trial={"duration": duration, "start": {"angle": "3 deg"}})
    return write_scenario(tmp_path / "hostile.yaml", raw)


def _run(tmp_path: Path, scenario: Path, capsys, *extra: str) -> tuple[int, dict, str]:
    out = tmp_path / "out"
    code = main(["run", str(scenario), "--out", str(out), *extra])
    err = capsys.readouterr().err
    return code, json.loads((out / "metrics.json").read_text()), err


@pytest.mark.parametrize("isolate", [True, False])
@pytest.mark.parametrize("what,message", [
    ("exit0", "SystemExit at t = 0.0200 s: 0"), ("exit3", "SystemExit at t = 0.0200 s: 3"),
    ("interrupt", "KeyboardInterrupt at t = 0.0200 s"), ("bare", "Bare at t = 0.0200 s: below Exception"),
    ("unprintable", "Unprintable at t = 0.0200 s: (its message could not be read: __str__ raised ValueError)"),
])
def test_exits_and_odd_exceptions_inside_decide_are_strategy_failed(tmp_path, what, message, isolate):
    sc = load_scenario(_hostile(tmp_path, "Misbehaves", what=what))
    res = run_trial(sc, isolate=isolate)
    assert res.outcome == "strategy_failed" and res.message == message
    assert res.trace.n == 21                # cut at the failing tick, as for any raising strategy


@pytest.mark.parametrize("isolate", [True, False])
@pytest.mark.parametrize("in_build", [True, False])
def test_an_exception_whose_message_never_comes_is_strategy_failed(tmp_path, isolate, in_build):
    # its __str__ loops for ever: describing it is timed like the strategy's own calls
    sc = load_scenario(_hostile(tmp_path, "Misbehaves", what="endless_str", in_build=in_build))
    res = run_trial(sc, isolate=isolate, strategy_budget_s=0.3)
    text = "(its message could not be read: __str__ raised StrategyTimeout)"
    assert res.outcome == "strategy_failed"
    where = "building the strategy failed: Endless:" if in_build else "Endless at t = 0.0200 s:"
    assert res.message == f"{where} {text}"


@pytest.mark.parametrize("what", ["exit0", "exit3", "interrupt", "bare", "unprintable"])
def test_exits_while_being_built_are_strategy_failed(tmp_path, what):
    res = run_trial(load_scenario(_hostile(tmp_path, "Misbehaves", what=what, in_build=True)))
    assert res.outcome == "strategy_failed" and res.message.startswith("building the strategy failed: ")


@pytest.mark.parametrize("what", ["exit0", "exit3", "interrupt", "unprintable"])
def test_run_with_an_exiting_plugin_writes_its_outcome(tmp_path, capsys, what):
    # sys.exit(0) inside decide once made the command end with 0 and no files: now it is the run's outcome
    code, metrics, err = _run(tmp_path, _hostile(tmp_path, "Misbehaves", what=what), capsys)
    assert code == 0 and metrics["outcome"] == "strategy_failed"
    assert "Traceback" not in err and "interrupted" not in err
    assert (tmp_path / "out" / "trace.csv").is_file()


def test_check_with_a_plugin_that_interrupts_itself_is_judged_and_fails(tmp_path, capsys):
    # a KeyboardInterrupt raised inside decide once ended `check` with exit 130 ("interrupted")
    path = _hostile(tmp_path, "Misbehaves", what="interrupt", after_s=0.3, duration=1.0)
    out = tmp_path / "out"
    assert main(["check", str(path), "--out", str(out), "--trials", "2", "--workers", "1"]) == 1
    verdict = json.loads((out / "verdict.json").read_text())
    assert verdict["passed"] is False
    assert "interrupted" not in capsys.readouterr().err


def test_a_real_interrupt_during_an_in_process_strategy_still_stops_the_command(tmp_path):
    # Ctrl-C (SIGINT) while the strategy runs is the user's, not the strategy's: it goes on out
    import signal as sig
    (tmp_path / "slow.py").write_text(
        "import os, signal\nfrom sim.strategies import Strategy\n"
        "class Law(Strategy):\n    def decide(self, reading):\n"
        "        if reading.t_s >= 0.01:\n            os.kill(os.getpid(), signal.SIGINT)\n        return 0.0\n")
    sc = load_scenario(write_scenario(tmp_path / "s.yaml", scenario_dict(strategy={"plugin": "slow.py:Law"})))
    assert sig.getsignal(sig.SIGINT) is sig.default_int_handler
    with pytest.raises(KeyboardInterrupt):
        run_trial(sc, isolate=False)
    assert sig.getsignal(sig.SIGINT) is sig.default_int_handler   # restored


@pytest.mark.parametrize("isolate", [True, False])
@pytest.mark.parametrize("form,kept,dropped", [
    ("list", {}, "must be a dict, found list"), ("set", {}, "must be a dict, found set"),
    ("object", {}, "must be a dict, found OddObject"),
    ("mixed", {"good_count": 3, "good_speed_rad_s": 1.5}, "'bad', 'a int key', 'huge'"),
])
def test_extra_metrics_that_are_not_json_are_dropped_with_a_note(tmp_path, capsys, form, kept, dropped, isolate):
    path = _hostile(tmp_path, "BadExtraMetrics", form=form)
    res = run_trial(load_scenario(path), isolate=isolate)
    assert res.outcome == "completed"
    metrics = trial_metrics(res)
    for key, value in kept.items():
        assert metrics[key] == value
    assert dropped in metrics["extra_metrics_dropped"]
    if isolate:                             # and through the command: metrics.json is written
        code, written, _ = _run(tmp_path, path, capsys)
        assert code == 0 and dropped in written["extra_metrics_dropped"]
        assert {k: written[k] for k in kept} == kept


def test_many_phase_names_are_bounded_and_the_bookkeeping_is_not_timed(tmp_path, monkeypatch):
    import sim.core.budget
    from sim.run.trace import MAX_PHASES, OVERFLOW_PHASE, Trace

    inside, seen = [False], []
    enter, leave, abandon = sim.core.budget.StrategyClock.enter, sim.core.budget.StrategyClock.leave, sim.core.budget.StrategyClock.abandon
    code = Trace.phase_code
    monkeypatch.setattr(sim.core.budget.StrategyClock, "enter", lambda self, k=-1: (inside.__setitem__(0, True), enter(self, k))[1])
    monkeypatch.setattr(sim.core.budget.StrategyClock, "leave", lambda self: (inside.__setitem__(0, False), leave(self))[1])
    monkeypatch.setattr(sim.core.budget.StrategyClock, "abandon", lambda self: (inside.__setitem__(0, False), abandon(self))[1])
    monkeypatch.setattr(Trace, "phase_code", lambda self, phase: (seen.append(inside[0]), code(self, phase))[1])
    # 2 s at the default 500 Hz control rate: 1,000 distinct names
    res = run_trial(load_scenario(_hostile(tmp_path, "ManyPhases", duration=2.0)), isolate=False)
    assert res.outcome == "completed" and res.strategy.ticks == 1000
    assert len(seen) == 1000 and not any(seen)      # never inside the strategy's timed window
    tr = res.trace
    assert len(tr.phases) == MAX_PHASES + 1 and tr.phases[-1] == OVERFLOW_PHASE
    assert tr.phases[:3] == ["step 1", "step 2", "step 3"] and tr.phases[MAX_PHASES - 1] == f"step {MAX_PHASES}"
    assert int(tr.view("mode").max()) == MAX_PHASES < 2**15 - 1


def test_many_phase_names_in_an_isolated_trial(tmp_path, capsys):
    from sim.run.trace import MAX_PHASES, OVERFLOW_PHASE
    path = _hostile(tmp_path, "ManyPhases", duration=2.0)
    res = run_trial(load_scenario(path), isolate=True)
    assert res.outcome == "completed" and len(res.trace.phases) == MAX_PHASES + 1
    code, metrics, _ = _run(tmp_path, path, capsys)
    assert code == 0 and metrics["outcome"] == "completed"
    import csv
    with open(tmp_path / "out" / "trace.csv", newline="", encoding="utf-8") as fh:
        modes = [row["mode"] for row in csv.DictReader(fh)]
    # the mode column holds the tick's phase, held over the tick's physics steps
    assert modes[0] == "step 1" and modes[-1] == OVERFLOW_PHASE and len(set(modes)) == MAX_PHASES + 1


def test_odd_phase_names_round_trip_through_the_csv(tmp_path, capsys):
    import csv
    from plugins.hostile_laws import OddPhaseNames
    code, metrics, _ = _run(tmp_path, _hostile(tmp_path, "OddPhaseNames"), capsys)
    assert code == 0 and metrics["outcome"] == "completed"
    with open(tmp_path / "out" / "trace.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    header, body = rows[0], rows[1:]
    assert len(body) == 100 and all(len(row) == len(header) for row in body)
    names = OddPhaseNames.NAMES
    steps_per_tick = 2                      # 1 kHz physics, 500 Hz control
    assert [row[-1] for row in body] == [names[(k // steps_per_tick) % len(names)] for k in range(100)]
    assert float(body[3][0]) == 0.003       # the numbers still parse (t_s, 9 significant digits)


def test_a_full_temporary_folder_falls_back_for_the_shared_trace(tmp_path, monkeypatch):
    import sim.run.trace
    from sim.run.trace import Trace

    sc = load_scenario(_scenario_with(tmp_path, {"plugin": "simple_laws.py:ProportionalDamping"}))
    reference = run_trial(sc, isolate=False)
    monkeypatch.setattr(sim.run.trace, "_file_backed", lambda n_bytes: None)   # no room in the temporary folder
    shared = run_trial(sc, isolate=True)
    assert shared.trace.file_backed is False and shared.outcome == reference.outcome == "balanced"
    for name in Trace.FLOAT_COLUMNS:
        np.testing.assert_array_equal(shared.trace.view(name), reference.trace.view(name))  # exact: same run
    monkeypatch.setattr(sim.run.trace, "_anonymous_shared", lambda n_bytes: None)  # and no shared memory either
    here = run_trial(sc, isolate=True)      # runs in this process instead
    assert here.outcome == "balanced" and here.strategy.calls == reference.strategy.calls


def test_a_tiny_temporary_folder_falls_back_for_the_shared_trace(tmp_path, monkeypatch):
    # a real 64 KiB tmpfs as the temporary folder (root with mount rights only)
    import subprocess
    import tempfile
    tiny = tmp_path / "tiny"
    tiny.mkdir()
    if subprocess.run(["mount", "-t", "tmpfs", "-o", "size=64k", "tmpfs", str(tiny)],
                      capture_output=True).returncode != 0:
        pytest.skip("cannot mount a tmpfs here")
    try:
        monkeypatch.setattr(tempfile, "tempdir", str(tiny))
        # 2 s at 1 kHz: 2,001 rows of 90 bytes, more than the folder holds
        sc = load_scenario(_scenario_with(tmp_path, {"plugin": "simple_laws.py:ProportionalDamping"}),
                           overrides=["trial.duration=2.0"])
        res = run_trial(sc, isolate=True)
        assert res.outcome == "balanced" and not res.trace.file_backed
        assert res.strategy.calls == res.control_ticks == 1000
    finally:
        subprocess.run(["umount", str(tiny)], check=False)


# ----------------------------------------------------------------- where plug-ins may come from

def _outside_cases(tmp_path: Path) -> dict[str, str]:
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    shutil.copy(PLUGIN_FILE, elsewhere / "simple_laws.py")
    (tmp_path / "proj").mkdir()
    (tmp_path / "proj" / "linked.py").symlink_to(elsewhere / "simple_laws.py")
    return {"absolute": f"{elsewhere / 'simple_laws.py'}:ProportionalDamping",
            "dotdot": "../elsewhere/simple_laws.py:ProportionalDamping",
            "symlink": "linked.py:ProportionalDamping"}


@pytest.mark.parametrize("case", ["absolute", "dotdot", "symlink"])
def test_plugin_files_outside_the_scenario_folder_are_refused_unless_allowed(tmp_path, capsys, case):
    plugin = _outside_cases(tmp_path)[case]
    path = write_scenario(tmp_path / "proj" / "s.yaml", scenario_dict(strategy={"plugin": plugin}))
    code = main(["validate", str(path)])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1
    assert "strategy.plugin" in err[0] and "outside the scenario's folder" in err[0]
    assert main(["--allow-plugins-outside", "validate", str(path)]) == 0
    assert main(["validate", str(path)]) == 2     # the option held for that command only
    capsys.readouterr()


def test_the_environment_variable_allows_outside_plugins(tmp_path, monkeypatch):
    from sim.strategies import ALLOW_OUTSIDE_ENV
    plugin = _outside_cases(tmp_path)["dotdot"]
    path = write_scenario(tmp_path / "proj" / "s.yaml", scenario_dict(strategy={"plugin": plugin}))
    with pytest.raises(ScenarioError, match="outside the scenario's folder"):
        load_scenario(path)
    monkeypatch.setenv(ALLOW_OUTSIDE_ENV, "1")
    assert load_scenario(path).strategy.cls.__name__ == "ProportionalDamping"


def test_loading_a_plugin_prints_a_notice_once(tmp_path, capsys):
    path = _scenario_with(tmp_path, {"plugin": "simple_laws.py:ProportionalDamping"})
    assert main(["validate", str(path)]) == 0
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "simple_laws.py" in err[0] and "is a program" in err[0]
    nested = _scenario_with(tmp_path, {"kind": "swing_and_catch",
                                       "balance": {"plugin": "simple_laws.py:ProportionalDamping"},
                                       "swing_up": {"plugin": "simple_laws.py:ProportionalDamping"}})
    assert main(["validate", str(nested)]) == 0
    assert len(capsys.readouterr().err.strip().splitlines()) == 1      # one file, one notice
    assert main(["validate", str(_scenario_with(tmp_path, {"plugin": "sim.strategies.pid:PidBalance"}))]) == 0
    err = capsys.readouterr().err
    assert "imports module 'sim.strategies.pid' from wherever Python finds it" in err
    assert main(["validate", str(_scenario_with(tmp_path, {"kind": "lqr"}))]) == 0
    assert capsys.readouterr().err == ""    # built-ins: no notice
