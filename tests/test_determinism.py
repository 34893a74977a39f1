"""Same seed, same numbers: repeat runs and different worker counts give identical results.

Only wall-clock figures (`real_time_factor` and keys naming wall time) may differ. A different
seed must change the noisy trace, or the checks below could pass with the noise switched off.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import make_scenario, scenario_dict, timeless, write_scenario
from sim.cli import app, main
from sim.run.metrics import trial_metrics
from sim.run.trial import run_trial

NOISY = dict(
    strategy={"kind": "lqr"},
    sensors={"delay": 0.002, "angle": {"counts_per_rev": 4096, "noise": 0.001},
             "rate_gyro": {"noise": 0.02, "bias": 0.005}, "wheel": {"counts_per_rev": 2048, "noise": 0.5}},
    trial={"duration": 1.0, "start": {"angle": 0.05}, "pushes": [{"at": 0.5, "impulse": 0.005}], "seed": 11},
)
COMMANDS = {c.name or c.callback.__name__ for c in app.registered_commands}


_timeless = timeless


def _trace_arrays(result) -> dict:
    tr = result.trace
    return {name: tr.view(name).copy() for name in (*tr.FLOAT_COLUMNS, "mode")}


def test_repeat_trial_is_identical():
    sc = make_scenario(**NOISY)
    a, b = run_trial(sc), run_trial(sc)
    ta, tb = _trace_arrays(a), _trace_arrays(b)
    for name in ta:
        assert np.array_equal(ta[name], tb[name]), name  # bit for bit, no tolerance
    assert _timeless(trial_metrics(a)) == _timeless(trial_metrics(b))


def test_seed_changes_the_noise():
    sc = make_scenario(**NOISY)
    a, b = run_trial(sc), run_trial(sc, seed=12)
    assert not np.array_equal(a.trace.view("meas_rate"), b.trace.view("meas_rate"))


def _run_cli(argv):
    code = main(argv)
    assert code == 0, argv
    return code


def test_repeat_cli_run_gives_identical_files(tmp_path, capsys):
    path = write_scenario(tmp_path / "noisy.yaml", scenario_dict(**NOISY))
    for name in ("a", "b"):
        _run_cli(["run", str(path), "--out", str(tmp_path / name), "--seed", "5"])
    capsys.readouterr()
    assert (tmp_path / "a" / "trace.csv").read_bytes() == (tmp_path / "b" / "trace.csv").read_bytes()
    ma, mb = (json.loads((tmp_path / n / "metrics.json").read_text()) for n in ("a", "b"))
    assert _timeless(ma) == _timeless(mb)
    assert ma["seed"] == 5


def _on_one_and_two_workers(tmp_path, capsys, trial: dict, argv: list[str], result: str) -> tuple[str, str]:
    """The `result` file's text from the command run with --workers 1 and with --workers 2."""
    path = write_scenario(tmp_path / "noisy.yaml", scenario_dict(**{**NOISY, "trial": {**NOISY["trial"], **trial}}))
    for workers in ("1", "2"):
        main([argv[0], str(path), *argv[1:], "--out", str(tmp_path / workers), "--workers", workers])
    capsys.readouterr()
    return tuple((tmp_path / w / result).read_text() for w in ("1", "2"))


@pytest.mark.slow
@pytest.mark.skipif("sweep" not in COMMANDS, reason="no sweep command yet")
def test_sweep_is_the_same_on_one_and_two_workers(tmp_path, capsys):
    a, b = _on_one_and_two_workers(tmp_path, capsys, {"duration": 0.6},
                                   ["sweep", "--vary", "drive.supply=9..12:4"], "results.csv")
    assert a == b and a.count("\n") == 5


@pytest.mark.slow
@pytest.mark.skipif("catch-map" not in COMMANDS, reason="no catch-map command yet")
def test_catch_map_is_the_same_on_one_and_two_workers(tmp_path, capsys):
    # 8 x 8: enough cells that two workers get them two per round trip (sim.studies.catchmap batches)
    a, b = _on_one_and_two_workers(tmp_path, capsys, {"pushes": []}, ["catch-map", "--grid", "8"], "catch_map.csv")
    assert a == b and a.count("\n") == 65


@pytest.mark.slow
@pytest.mark.skipif("check" not in COMMANDS, reason="no check command yet")
def test_check_is_the_same_on_one_and_two_workers(tmp_path, capsys):
    a, b = _on_one_and_two_workers(tmp_path, capsys, {}, ["check", "--trials", "2"], "verdict.json")
    assert _timeless(json.loads(a)) == _timeless(json.loads(b))
