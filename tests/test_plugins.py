"""Plug-ins: user strategies by file path, module path and entry point; failures become outcomes."""

from __future__ import annotations

import csv
import json
import math
import shutil
from importlib.metadata import EntryPoint
from pathlib import Path

import pytest

from sim.cli import main
from sim.errors import ScenarioError
from sim.scenario import load_scenario
from sim.trial import run_trial
from tests.conftest import scenario_dict, write_scenario

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
    sc = load_scenario(_scenario_with(tmp_path, {"plugin": f"{PLUGIN_FILE}:ProportionalDamping"}))
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
