"""`wheelbench run` and `wheelbench validate` end to end: exit codes, messages, files written.

The output contract (file names, metrics keys, trace columns) is issue 2's; the numbers in the
files are cross-checked against each other and against V/k_e (references.md, "Motor").
"""

from __future__ import annotations

import csv
import json
import math
import subprocess
import sys

import numpy as np
import pytest
from numpy.testing import assert_allclose

from conftest import scenario_dict, write_scenario
from sim.cli import main

METRIC_KEYS = ("outcome", "caught_at_s", "settle_time_s", "peak_wheel_speed_rad_s", "wheel_speed_limit_rad_s",
               "peak_current_a", "rms_current_a", "voltage_saturated_fraction", "energy_from_supply_j",
               "real_time_factor")
TRACE_COLUMNS = ("t_s", "angle_rad", "rate_rad_s", "wheel_speed_rad_s", "voltage_v", "current_a", "torque_n_m",
                 "mode")
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), section 5.2


def noisy_scenario(**extra) -> dict:
    """The test device at 6 V with noisy sensors, so seeds matter."""
    return scenario_dict(sensors={"angle": {"noise": "0.1 deg", "counts_per_rev": 4096},
                                  "rate_gyro": {"noise": 0.02, "bias": 0.01}, "wheel": {"noise": 0.5}},
                         strategy={"kind": "fixed_voltage", "volts": "6 V"},
                         trial={"duration": 0.4, "start": {"angle": "170 deg"}}, **extra)


def read_trace(path) -> tuple[list[str], dict[str, np.ndarray], list[str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    header, body = rows[0], rows[1:]
    cols = {name: np.array([float(r[i]) for r in body]) for i, name in enumerate(header) if name != "mode"}
    return header, cols, [r[header.index("mode")] for r in body]


def run_cli(capsys, *args) -> tuple[int, str, str]:
    code = main([str(a) for a in args])
    out, err = capsys.readouterr()
    return code, out, err


# ----------------------------------------------------------------------------- end to end

def test_run_writes_metrics_trace_and_summary(tmp_path, capsys):
    path = write_scenario(tmp_path / "noisy.yaml", noisy_scenario())
    out = tmp_path / "out"
    code, stdout, err = run_cli(capsys, "run", path, "--out", out)
    assert code == 0, err
    metrics = json.loads((out / "metrics.json").read_text())
    assert set(METRIC_KEYS) <= set(metrics)
    assert metrics["outcome"] == "completed"  # a bench strategy has no balance goal (issue 2)
    assert metrics["caught_at_s"] is None and metrics["settle_time_s"] is None
    header, cols, modes = read_trace(out / "trace.csv")
    assert set(TRACE_COLUMNS) <= set(header)
    # one row per physics step: 0.4 s at 1 ms (README, trace.csv)
    assert len(cols["t_s"]) == 400
    assert_allclose(cols["t_s"], np.arange(400) * 1e-3, atol=1e-12)
    assert np.all(cols["angle_rad"] > -math.pi) and np.all(cols["angle_rad"] <= math.pi)
    assert set(modes) == {"fixed voltage"}
    # metrics agree with the trace they came from (values written with 9 significant digits)
    assert_allclose(metrics["peak_current_a"], np.max(np.abs(cols["current_a"])), rtol=1e-8)
    assert_allclose(metrics["rms_current_a"], np.sqrt(np.mean(cols["current_a"] ** 2)), rtol=1e-8)
    assert_allclose(metrics["peak_wheel_speed_rad_s"], np.max(np.abs(cols["wheel_speed_rad_s"])), rtol=1e-8)
    assert_allclose(metrics["energy_from_supply_j"], np.sum(cols["voltage_v"] * cols["current_a"]) * 1e-3, rtol=1e-7)
    # no-load speed V/k_e at the 12 V supply, Kv 300 rpm/V (references.md, "Motor")
    assert_allclose(metrics["wheel_speed_limit_rad_s"], 12 * 300 * 2 * math.pi / 60, rtol=1e-12)
    assert metrics["real_time_factor"] > 0
    png = (out / "summary.png").read_bytes()
    assert png.startswith(PNG_SIGNATURE) and len(png) > 10_000
    assert "metrics.json" in stdout


@pytest.mark.slow
def test_run_with_no_scenario_runs_the_bundled_default(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code, _, err = run_cli(capsys, "run", "--out", "default")
    assert code == 0, err
    metrics = json.loads((tmp_path / "default" / "metrics.json").read_text())
    # The bundled demo says what it does (its header): it starts hanging, swings up, is caught by
    # LQR (in about two seconds; here: before the tap at 5 s), settles and survives the tap.
    assert metrics["outcome"] == "balanced", metrics["message"]
    assert 0.5 < metrics["caught_at_s"] < 5.0
    assert [p["survived"] for p in metrics["pushes"]] == [True]
    with open(tmp_path / "default" / "trace.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    col = {name: np.array([float(r[name]) for r in rows]) for name in ("t_s", "angle_rad", "wheel_speed_rad_s")}
    dt = metrics["physics_step_s"]
    assert len(rows) == round(metrics["simulated_s"] / dt)
    assert_allclose(abs(col["angle_rad"][0]), math.pi, rtol=1e-8)               # hanging at the start
    caught_row = round(metrics["caught_at_s"] / dt)
    assert rows[caught_row]["mode"] != rows[0]["mode"] and rows[-1]["mode"] == rows[caught_row]["mode"]
    assert abs(col["angle_rad"][-1]) < math.radians(1.0)                         # settled upright at the end
    assert_allclose(metrics["final_angle_rad"], col["angle_rad"][-1], rtol=1e-8, atol=1e-12)
    # the metric is the trace's own peak (the CSV keeps 9 significant digits)
    assert_allclose(metrics["peak_wheel_speed_rad_s"], np.max(np.abs(col["wheel_speed_rad_s"])), rtol=1e-8)
    assert metrics["peak_wheel_speed_rad_s"] < metrics["wheel_speed_limit_rad_s"]
    assert (tmp_path / "default" / "summary.png").read_bytes().startswith(PNG_SIGNATURE)


def test_seed_makes_runs_reproducible(tmp_path, capsys):
    path = write_scenario(tmp_path / "noisy.yaml", noisy_scenario())
    for name, seed in (("a", 5), ("b", 5), ("c", 6)):
        code, _, err = run_cli(capsys, "run", path, "--out", tmp_path / name, "--seed", seed)
        assert code == 0, err
    trace = {name: (tmp_path / name / "trace.csv").read_bytes() for name in "abc"}
    assert trace["a"] == trace["b"]
    assert trace["a"] != trace["c"]
    assert json.loads((tmp_path / "a" / "metrics.json").read_text())["seed"] == 5


def test_set_supply_changes_the_wheel_speed_limit(tmp_path, capsys):
    # no-load speed V/k_e (references.md, "Motor"): 24 V at Kv 300 rpm/V -> 753.98 rad/s
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(trial={"duration": 0.05}))
    code, _, err = run_cli(capsys, "run", path, "--out", tmp_path / "o", "--set", "drive.supply=24V")
    assert code == 0, err
    metrics = json.loads((tmp_path / "o" / "metrics.json").read_text())
    assert_allclose(metrics["wheel_speed_limit_rad_s"], 24 * 300 * 2 * math.pi / 60, rtol=1e-12)


def test_out_refuses_a_foreign_folder_and_force_keeps_the_users_files(tmp_path, capsys):
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(trial={"duration": 0.05}))
    out = tmp_path / "mine"
    out.mkdir()
    (out / "notes.txt").write_text("my notes")
    code, _, err = run_cli(capsys, "run", path, "--out", out)
    assert code == 2
    assert len(err.strip().splitlines()) == 1 and "--out" in err and str(out) in err
    assert sorted(p.name for p in out.iterdir()) == ["notes.txt"]
    code, _, err = run_cli(capsys, "run", path, "--out", out, "--force")
    assert code == 0, err
    assert (out / "notes.txt").read_text() == "my notes"
    assert (out / "metrics.json").exists()
    # a folder wheelbench wrote may be written again without --force
    code, _, err = run_cli(capsys, "run", path, "--out", out)
    assert code == 0, err


def test_validate_prints_device_figures(tmp_path, capsys):
    path = write_scenario(tmp_path / "s.yaml", scenario_dict())
    code, out, err = run_cli(capsys, "validate", path)
    assert code == 0, err
    assert "valid" in out and "no-load speed 377.0 rad/s" in out  # 12 V / k_e at Kv 300 rpm/V


# ----------------------------------------------------------------------------- bad input

def _set(section, key, value):
    def change(raw):
        raw[section][key] = value
    return change


def _set_part(section, index, key, value):
    def change(raw):
        raw[section]["parts"][index][key] = value
    return change


BAD_FILES = {
    # name: (file text or a change to the test mapping, text the stderr line must contain)
    "YAML syntax error": ("name: x\nbody: [1, 2\n", "YAML syntax error"),
    "unknown key": (_set("wheel", "bearing_fricton", {"viscous": 1}), "did you mean 'bearing_friction'"),
    "wrong unit": (_set("motor", "resistance", "2 kg"), "motor.resistance"),
    "negative size": (_set_part("body", 0, "length", "-20 cm"), "body.parts[0].length"),
    "zero size": (_set_part("wheel", 0, "radius", 0), "wheel.parts[0].radius"),
    "zero mass": (_set_part("body", 1, "mass", "0 g"), "body.parts[1].mass"),
    "negative mass": (_set_part("wheel", 0, "mass", -0.1), "wheel.parts[0].mass"),
    "NaN": (_set("drive", "supply", float("nan")), "drive.supply"),
    "absurd step count": (_set("trial", "duration", "1e5 s"), "trial.duration"),
    "python object tag": ("name: !!python/object/apply:os.system ['echo hacked > {canary}']\n", "tags"),
    "empty file": ("", "empty"),
}


def _bad_file(tmp_path, name):
    spec, word = BAD_FILES[name]
    path = tmp_path / "bad.yaml"
    if isinstance(spec, str):
        path.write_text(spec.replace("{canary}", str(tmp_path / "canary")))
    else:
        raw = scenario_dict()
        spec(raw)
        write_scenario(path, raw)
    return path, word


def _assert_one_clean_line(err: str, *words: str) -> None:
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert "Traceback" not in err
    for w in words:
        assert w in lines[0], lines[0]


@pytest.mark.parametrize("name", list(BAD_FILES))
def test_run_bad_file_exits_2_with_one_line_and_writes_nothing(tmp_path, capsys, name):
    path, word = _bad_file(tmp_path, name)
    out = tmp_path / "out"
    code, _, err = run_cli(capsys, "run", path, "--out", out)
    assert code == 2
    _assert_one_clean_line(err, str(path), word)
    assert not out.exists()
    assert not (tmp_path / "canary").exists()


@pytest.mark.parametrize("name", ["YAML syntax error", "unknown key", "wrong unit", "NaN", "python object tag"])
def test_validate_bad_file_exits_2_with_one_line(tmp_path, capsys, name):
    path, word = _bad_file(tmp_path, name)
    code, _, err = run_cli(capsys, "validate", path)
    assert code == 2
    _assert_one_clean_line(err, str(path), word)


def test_run_missing_file(tmp_path, capsys):
    out = tmp_path / "out"
    code, _, err = run_cli(capsys, "run", tmp_path / "nope.yaml", "--out", out)
    assert code == 2
    _assert_one_clean_line(err, "nope.yaml", "cannot read")
    assert not out.exists()


@pytest.mark.parametrize("override, word", [("drive.supply", "key.path=value"), ("drive..supply=3", "malformed"),
                                            ("drive.supply=2 kg", "drive.supply")])
def test_run_bad_set_exits_2(tmp_path, capsys, override, word):
    path = write_scenario(tmp_path / "s.yaml", scenario_dict())
    out = tmp_path / "out"
    code, _, err = run_cli(capsys, "run", path, "--out", out, "--set", override)
    assert code == 2
    _assert_one_clean_line(err, str(path), word)
    assert not out.exists()


@pytest.mark.parametrize("command", ["run", "validate"])
def test_installed_command_exit_code_and_stderr(tmp_path, command):
    # As a user runs it: a separate process, the real exit status and streams.
    path, _ = _bad_file(tmp_path, "wrong unit")
    args = [sys.executable, "-m", "sim.cli", command, str(path)]
    if command == "run":
        args += ["--out", str(tmp_path / "out")]
    proc = subprocess.run(args, capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2
    _assert_one_clean_line(proc.stderr, str(path), "motor.resistance", "ohm")
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("args, word", [
    (["--seed", "-1"], "--seed -1"),
    (["--seed", "abc"], "--seed"),
    (["--bogus"], "--bogus"),
])
def test_run_bad_options_exit_2_with_one_line(tmp_path, capsys, args, word):
    path = write_scenario(tmp_path / "s.yaml", scenario_dict())
    out = tmp_path / "out"
    code, _, err = run_cli(capsys, "run", path, "--out", out, *args)
    assert code == 2
    _assert_one_clean_line(err, word)
    assert not out.exists()


def test_installed_command_successful_run_keeps_stderr_clean(tmp_path):
    # A run that works prints nothing on stderr (pybullet's start-up banner is silenced), so a
    # script can treat any stderr line as a problem.
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(trial={"duration": 0.05}))
    proc = subprocess.run([sys.executable, "-m", "sim.cli", "run", str(path), "--out", str(tmp_path / "o")],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert proc.stderr == ""
    assert (tmp_path / "o" / "metrics.json").exists()


def test_summary_plot_drawn_beside_the_csv_matches_one_drawn_here(tmp_path, monkeypatch):
    """The plot drawn in a forked child is byte for byte the one this process draws; a child that
    fails leaves the drawing to this process."""
    import os

    import sim.run.runfiles as runfiles
    from sim.model.scenario_yaml import load_scenario

    sc = load_scenario(None, overrides=["trial.duration=1", "trial.pushes=[]"])
    runfiles.run_to_folder(sc, tmp_path / "forked")
    monkeypatch.delattr(os, "fork")                       # no fork: drawn in this process
    runfiles.run_to_folder(sc, tmp_path / "here")
    monkeypatch.undo()
    assert (tmp_path / "forked" / "summary.png").read_bytes() == (tmp_path / "here" / "summary.png").read_bytes()

    parent, real = os.getpid(), runfiles.save_figure
    def fails_in_a_child(fig, path):
        if os.getpid() != parent:
            raise RuntimeError("drawing failed in the child")
        real(fig, path)
    monkeypatch.setattr(runfiles, "save_figure", fails_in_a_child)
    runfiles.run_to_folder(sc, tmp_path / "fallback")
    assert (tmp_path / "fallback" / "summary.png").read_bytes() == (tmp_path / "here" / "summary.png").read_bytes()
    assert not [p for p in (tmp_path / "fallback").iterdir() if p.name.startswith(".summary")]


def test_the_written_paths_stay_whole_however_long(tmp_path, capsys):
    # a user copies the path from the last line: the console must not fold it (seen: a long pytest tmp
    # path came out as ".../met\nrics.json" on an 80-column pipe)
    out = tmp_path / ("a-long-folder-name-" * 6) / "out"
    code, stdout, _ = run_cli(capsys, "run", write_scenario(tmp_path / "s.yaml", noisy_scenario()), "--out", out)
    assert code == 0
    assert f"wrote {out}/metrics.json, trace.csv, summary.png" in stdout.splitlines()
