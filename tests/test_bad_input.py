"""The bad-input corpus: every command, fed broken scenarios, options and logs.

Each case must give exit code 2, exactly one line on stderr that starts with "wheelbench:",
names the file (or option) and the key, shows no traceback, and leaves nothing in --out
(house style, "Check input once, at load" and "Errors"). Whole-file cases live as data in
tests/bad_inputs/ (the first line says what the message must contain); key-level cases are
built from the shared test scenario below. Commands are taken from the CLI as it stands, so a
new command joins the corpus when it is added to COMMANDS.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from conftest import scenario_dict, write_scenario
from sim.cli import app, main

HERE = Path(__file__).parent / "bad_inputs"


def _commands() -> dict:
    """argv builders, per command that takes a scenario file: (scenario path, out folder) -> argv."""
    table = {
        "validate": lambda f, out: ["validate", str(f)],
        "run": lambda f, out: ["run", str(f), "--out", str(out)],
        "gains": lambda f, out: ["gains", str(f)],
        "check": lambda f, out: ["check", str(f), "--out", str(out), "--trials", "1", "--workers", "1"],
        "sweep": lambda f, out: ["sweep", str(f), "--vary", "drive.supply=10..12:2", "--out", str(out),
                                 "--workers", "1"],
        "catch-map": lambda f, out: ["catch-map", str(f), "--grid", "2", "--out", str(out), "--workers", "1"],
        "compare": lambda f, out: ["compare", str(f), "--video", str(out / "clip.gif")],
    }
    present = {c.name or c.callback.__name__ for c in app.registered_commands}
    return {name: build for name, build in table.items() if name in present}


COMMANDS = _commands()


def run_cli(capsys, argv: list[str]) -> tuple[int, str, str]:
    """Run the CLI in-process as the console script does; (exit code, stdout, stderr)."""
    code = main(argv)
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def assert_rejected(code: int, err: str, *, names: list[str], out: Path | None = None) -> None:
    lines = [line for line in err.splitlines() if line.strip()]
    assert code == 2, err
    assert len(lines) == 1, f"expected one stderr line, got: {err!r}"
    assert lines[0].startswith("wheelbench: "), lines[0]
    assert "Traceback" not in err
    for fragment in names:
        assert fragment in lines[0], f"{fragment!r} not in {lines[0]!r}"
    if out is not None:
        assert not out.exists(), f"{out} was made: {list(out.iterdir())}"


# --------------------------------------------------------------------- whole-file cases (data)

def _file_cases():
    for path in sorted(HERE.glob("*.yaml")):
        first = path.read_bytes().split(b"\n", 1)[0].decode("utf-8", "replace")
        expect = first.removeprefix("# expect: ") if first.startswith("# expect: ") else None
        if path.name == "nul_bytes.yaml":  # a comment line cannot carry it: the NUL comes first
            expect = "special characters are not allowed"
        yield pytest.param(path, expect, id=path.stem)


@pytest.mark.parametrize("command", sorted(COMMANDS))
@pytest.mark.parametrize("path,expect", list(_file_cases()))
def test_bad_file(capsys, tmp_path, command, path, expect):
    assert expect, f"{path.name}: first line must be '# expect: ...'"
    out = tmp_path / "out"
    code, _, err = run_cli(capsys, COMMANDS[command](path, out))
    assert_rejected(code, err, names=[str(path), expect], out=out)


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_empty_and_missing_files(capsys, tmp_path, command):
    empty = tmp_path / "empty.yaml"
    empty.write_bytes(b"")
    out = tmp_path / "out"
    code, _, err = run_cli(capsys, COMMANDS[command](empty, out))
    assert_rejected(code, err, names=[str(empty), "the file is empty"], out=out)
    missing = tmp_path / "no_such.yaml"
    code, _, err = run_cli(capsys, COMMANDS[command](missing, out))
    assert_rejected(code, err, names=[str(missing), "cannot read"], out=out)
    code, _, err = run_cli(capsys, COMMANDS[command](tmp_path, out))  # a folder, not a file
    assert_rejected(code, err, names=[str(tmp_path), "not a file"], out=out)


def test_oversized_and_non_utf8_files(capsys, tmp_path):
    big = tmp_path / "big.yaml"
    big.write_text("# padding\n" * 200_000)
    code, _, err = run_cli(capsys, ["validate", str(big)])
    assert_rejected(code, err, names=[str(big), "too large"])
    latin = tmp_path / "latin1.yaml"
    latin.write_bytes("name: caf\u00e9\n".encode("latin-1"))
    code, _, err = run_cli(capsys, ["validate", str(latin)])
    assert_rejected(code, err, names=[str(latin), "UTF-8"])


# --------------------------------------------------------------------- key-level cases

KEY_CASES = {
    # id: (sections merged into the test scenario, fragments the message must hold)
    "wrong_type": ({"drive": {"supply": "twelve volts"}}, ["drive.supply", "unreadable"]),
    "wrong_unit": ({"drive": {"supply": "12 kg"}}, ["drive.supply", "voltage"]),
    "wrong_unit_length": ({"wheel": {"at": "200 g"}}, ["wheel.at", "length"]),
    "step_too_long": ({"world": {"step": "1 s"}}, ["world.step", "less than or equal"]),
    "negative_mass": ({"motor": {"mass": "-5 g"}}, ["motor.mass", "greater than or equal"]),
    "zero_resistance": ({"motor": {"resistance": 0}}, ["motor.resistance", "greater than"]),
    "negative_gravity": ({"world": {"gravity": -9.81}}, ["world.gravity"]),
    "imu_only_without_estimator": ({"sensors": {"angle": None, "imu": {"at": [0, 0, 0.1]}}},
                                   ["sensors.estimator", "IMU-only device", "needs an estimator"]),
    "imu_axes_repeated": ({"sensors": {"imu": {"orientation": {"axes": ["x", "-x", "z"]}}}},
                          ["sensors.imu.orientation.axes", "each of x, y and z once"]),
    "imu_rate_off_grid": ({"sensors": {"imu": {"rate": "300 Hz"}}}, ["sensors.imu.rate", "whole number of physics steps"]),
    "estimator_unknown": ({"sensors": {"imu": {}, "estimator": {"kind": "kalmann"}}},
                          ["sensors.estimator.kind", "unknown estimator"]),
    "timing_overrun_rule": ({"timing": {"overrun": "drop"}}, ["timing.overrun", "skip", "hold"]),
    "inner_radius_too_big": ({"wheel": {"parts": [{"shape": "ring", "outer_radius": 0.05, "inner_radius": 0.06,
                                                   "thickness": 0.005, "mass": 0.1}]}},
                             ["wheel.parts[0].inner_radius"]),
    "unknown_top_key": ({"wheeel": {"at": 0.2}}, ["wheeel", "did you mean 'wheel'"]),
    "unknown_nested_key": ({"motor": {"resistence": 2.0}}, ["motor.resistence", "did you mean 'resistance'"]),
    "unknown_shape": ({"body": {"parts": [{"shape": "sphere", "mass": 0.1}]}}, ["body.parts[0].shape", "sphere"]),
    "unknown_material": ({"body": {"parts": [{"shape": "rod", "length": 0.2, "radius": 0.005,
                                              "material": "unobtainium"}]}}, ["body.parts[0].material"]),
    "unknown_strategy": ({"strategy": {"kind": "lqrr"}}, ["strategy.kind", "did you mean 'lqr'"]),
    "strategy_not_mapping": ({"strategy": "lqr"}, ["strategy", "mapping"]),
    "wheel_null": ({"wheel": None}, ["wheel", "missing", "wheels"]),     # found by the property test
    # a section given as a number names the keys it takes (not a class name)
    "section_not_mapping": ({"sensors": {"imu": {}, "estimator": {"kind": "kalman", "process_noise": 0.001}}},
                            ["sensors.estimator.process_noise", "expected a mapping with keys among rate, bias",
                             "found 0.001"]),
    "missing_plugin_file": ({"strategy": {"plugin": "no_such_plugin.py:Law"}}, ["strategy.plugin", "no such file"]),
    "malformed_plugin": ({"strategy": {"plugin": "a:b:c"}}, ["strategy.plugin"]),
    "missing_required": ({"motor": {"resistance": None}}, ["motor.resistance"]),
    "both_speed_constants": ({"motor": {"back_emf_constant": 0.03}}, ["motor.speed_constant", "exactly one"]),
    "absurd_steps": ({"trial": {"duration": "1e9 s"}}, ["trial.duration", "steps"]),
    "absurd_steps_tiny_step": ({"world": {"step": "1 ns"}, "trial": {"duration": 10}}, ["trial.duration", "steps"]),
    "rate_not_whole_steps": ({"sensors": {"rate": "300 Hz"}}, ["sensors.rate", "whole number"]),
    "float_count": ({"wheel": {"parts": [{"shape": "point", "mass": 0.01, "at": 0.05, "count": 2.5}]}},
                    ["wheel.parts[0].count"]),
    "string_seed": ({"trial": {"seed": "seven"}}, ["trial.seed"]),
    "negative_seed": ({"trial": {"seed": -1}}, ["trial.seed"]),
    "push_after_end": ({"trial": {"pushes": [{"at": 5.0, "impulse": 0.01}]}}, ["trial.pushes"]),
    "parts_not_list": ({"body": {"parts": {"shape": "point", "mass": 0.1}}}, ["body.parts", "list"]),
    "too_many_parts": ({"body": {"parts": [{"shape": "point", "mass": 0.001, "at": 0.1} for _ in range(201)]}},
                       ["body.parts"]),
    "long_unit_string": ({"drive": {"supply": "1" * 300 + " V"}}, ["drive.supply", "characters"]),
    # issue 13 part 4: what would crash a run is refused at load (bounds: sim/model/scenario.py docstring)
    "huge_wheel_distance": ({"wheel": {"at": 1e300}}, ["wheel.at", "less than or equal to 100"]),
    "huge_rate_noise": ({"sensors": {"rate_gyro": {"noise": 1e308}}}, ["sensors.rate_gyro.noise", "less than or equal"]),
    "huge_start_speed": ({"trial": {"start": {"wheel_speed": 1e300}}}, ["trial.start.wheel_speed", "less than"]),
    "huge_friction": ({"body": {"pivot_friction": {"coulomb": 1e300}}}, ["body.pivot_friction.coulomb"]),
    "tiny_resistance": ({"motor": {"resistance": 1e-300}}, ["motor.resistance", "greater than or equal"]),
    "push_after_last_step": ({"trial": {"pushes": [{"at": 0.4996, "impulse": 0.01}]}},
                             ["trial.pushes[0].at", "at or after the end"]),
    "tolerance_breaks_rate_rule": ({"tolerances": {"sensors.rate": "10%"}},
                                   ["tolerances.sensors.rate", "low end of its band", "whole number"]),
    "tolerance_breaks_step_rule": ({"tolerances": {"world.step": "1%"}}, ["tolerances.world.step", "whole number"]),
    "tolerance_on_default_nested_strategy": (
        {"strategy": {"kind": "swing_and_catch"}, "tolerances": {"strategy.swing_up.energy_target": 0.01}},
        ["tolerances.strategy.swing_up.energy_target", "strategy.swing_up is a default"]),
    "default_tolerance_past_a_bound": ({"drive": {"supply": 1000}},
                                       ["tolerances.drive.supply", "high end", "a default tolerance"]),
    # issue 14 item 9: the refusal says what would work (1 ms does not divide 2.5 ms; 0.625 ms does)
    "rate_step_suggestion": ({"sensors": {"rate": "400 Hz"}}, ["sensors.rate", "0.625 ms", "500 Hz"]),
    # issue 14 item 10 and issue 13 part 9: every problem, unknown keys first; the inline material's field
    "every_problem_listed": ({"motor": {"resistence": 2.0, "mass": -1.0}},
                             ["motor.resistence: unknown key (did you mean 'resistance'?); ", "motor.mass"]),
    "inline_material_field": ({"body": {"parts": [{"shape": "rod", "length": 0.2, "radius": 0.005,
                                                   "material": {"density": 2700, "tensile_strenght": 3e8}}]}},
                              ["body.parts[0].material.tensile_strenght", "did you mean 'tensile_strength'"]),
    # issue 17: the power chain's keys
    "supply_and_battery": ({"battery": {"cells": 3, "chemistry": "lipo", "capacity": "450 mAh",
                                        "internal_resistance": 0.3}}, ["drive.supply", "exactly one"]),
    "no_supply_at_all": ({"drive": {"supply": None}}, ["drive.supply", "exactly one"]),
    "battery_unknown_chemistry": ({"drive": {"supply": None}, "battery": {"cells": 3, "chemistry": "lead",
                                   "capacity": "450 mAh", "internal_resistance": 0.3}}, ["battery.chemistry"]),
    "battery_capacity_in_volts": ({"drive": {"supply": None}, "battery": {"cells": 3, "chemistry": "lipo",
                                   "capacity": "450 V", "internal_resistance": 0.3}}, ["battery.capacity", "charge"]),
    "battery_two_resistances": ({"drive": {"supply": None}, "battery": {"cells": 3, "chemistry": "lipo",
                                 "capacity": "450 mAh", "internal_resistance": 0.3, "cell_resistance": 0.1}},
                                ["battery.internal_resistance", "exactly one"]),
    "current_mode_without_bandwidth": ({"drive": {"mode": "current"}}, ["drive.current_bandwidth"]),
    "current_mode_with_a_volts_law": ({"drive": {"mode": "current", "current_bandwidth": "1 kHz"}},
                                      ["drive.mode", "commands volts only"]),
    "dead_time_without_frequency": ({"drive": {"pwm": {"resolution_bits": 8, "dead_time": "1 us"}}},
                                    ["drive.pwm.dead_time", "frequency"]),
    "trip_without_current": ({"drive": {"trip": {"time": "1 ms"}}}, ["drive.trip.current"]),
    "curve_torque_rising": ({"motor": {"speed_constant": "300 rpm/V", "torque_constant": "0.033 N*m/A",
                                       "resistance": 2.0, "curve": {"voltage": "12 V", "points": [
                                           {"speed": "0 rpm", "torque": 0.1}, {"speed": "1000 rpm", "torque": 0.2}]}}},
                            ["motor.curve.points[1].torque", "must not rise"]),
}


def _pairs(cases: dict, sample: set[str]) -> list:
    """Every case on `validate` and `run`; a sample of them on the other commands.

    The loader is shared, so the full list on two commands checks the messages; the sample on
    the rest checks that each command loads (and fails) before it does anything else.
    """
    full = {"validate", "run"}
    return [pytest.param(cmd, case, id=f"{case}-{cmd}") for cmd in sorted(COMMANDS) for case in sorted(cases)
            if cmd in full or case in sample]


@pytest.mark.parametrize("command,case", _pairs(KEY_CASES, {"wrong_unit", "unknown_nested_key",
                                                            "missing_plugin_file", "absurd_steps"}))
def test_bad_key(capsys, tmp_path, command, case):
    sections, fragments = KEY_CASES[case]
    mapping = scenario_dict(**{k: v for k, v in sections.items() if k in ("strategy",)})
    for key, value in sections.items():
        if key == "strategy":
            continue
        if isinstance(value, dict) and isinstance(mapping.get(key), dict):
            mapping[key] = {**mapping[key], **value}
        else:
            mapping[key] = value
    if case == "missing_required":
        del mapping["motor"]["resistance"]
    path = write_scenario(tmp_path / "bad.yaml", mapping)
    out = tmp_path / "out"
    code, _, err = run_cli(capsys, COMMANDS[command](path, out))
    assert_rejected(code, err, names=[str(path), *fragments], out=out)


# --------------------------------------------------------------------- --set, options, --out

SET_CASES = {
    "no_equals": ("drive.supply", ["--set 'drive.supply'", "key.path=value"]),
    "empty_key": ("=3", ["--set '=3'", "empty key path"]),
    "double_dot": ("drive..supply=3", ["malformed key path"]),
    "index_first": ("[0]=1", ["malformed key path"]),
    "index_out_of_range": ("wheel.parts[99].mass=3", ["wheel.parts[99]", "no such list item"]),
    "into_scalar": ("drive.supply.x=1", ["drive.supply.x", "not a mapping"]),
    "unclosed_value": ("drive.supply=[1, 2", ["--set 'drive.supply=[1, 2'", "not readable"]),
    "object_tag": ("drive.supply=!!python/name:os.system", ["not readable"]),
    "out_of_range_value": ("drive.supply=-3", ["drive.supply", "greater than"]),
    "unknown_key": ("drive.suply=3", ["drive.suply", "did you mean 'supply'"]),
    "wrong_unit": ("drive.supply=3 m", ["drive.supply", "voltage"]),
    "self_alias": ("drive.supply=&a [*a]", ["drive.supply"]),
    # issue 13 part 3: a huge integer and YAML 1.1 forms in --set, read as in a file
    "huge_integer": ("drive.supply=" + "9" * 5000, ["drive.supply", "5000 digits"]),
    "base60": ("drive.supply=1:30", ["drive.supply", "YAML 1.1 number form"]),
    "binary": ("drive.supply=0b1100", ["drive.supply", "YAML 1.1 number form"]),
}


@pytest.mark.parametrize("command,case", _pairs(SET_CASES, {"no_equals", "index_out_of_range", "wrong_unit"}))
def test_bad_set(capsys, tmp_path, scenario_file, command, case):
    text, fragments = SET_CASES[case]
    out = tmp_path / "out"
    argv = COMMANDS[command](scenario_file, out) + ["--set", text]
    code, _, err = run_cli(capsys, argv)
    assert_rejected(code, err, names=[str(scenario_file), *fragments], out=out)


def test_kind_change_then_a_bad_key_is_still_one_line(capsys, tmp_path):
    """issue 14 item 6: the note about dropped parameters is said only when the result loads."""
    path = write_scenario(tmp_path / "pid.yaml", scenario_dict(strategy={"kind": "pid", "kp": 30.0}))
    out = tmp_path / "out"
    code, _, err = run_cli(capsys, ["run", str(path), "--out", str(out),
                                    "--set", "strategy.kind=lqr", "--set", "strategy.kp=3"])
    assert_rejected(code, err, names=[str(path), "strategy.kp: unknown key"], out=out)
    code, _, err = run_cli(capsys, ["validate", str(path), "--set", "strategy.kind=lqr"])
    assert code == 0 and err.count("\n") == 1 and err.startswith("note: --set strategy.kind=lqr: the pid parameters kp")


@pytest.mark.parametrize("seed", ["-1", str(2**64)])
def test_bad_seed(capsys, tmp_path, scenario_file, seed):
    out = tmp_path / "out"
    code, _, err = run_cli(capsys, ["run", str(scenario_file), "--out", str(out), "--seed", seed])
    assert_rejected(code, err, names=["--seed"], out=out)


def test_out_is_a_file(capsys, tmp_path, scenario_file):
    target = tmp_path / "results.txt"
    target.write_text("mine\n")
    code, _, err = run_cli(capsys, ["run", str(scenario_file), "--out", str(target)])
    assert_rejected(code, err, names=["--out", str(target), "not a folder"])
    assert target.read_text() == "mine\n"


@pytest.mark.parametrize("command", sorted(set(COMMANDS) & {"run", "check", "sweep", "catch-map"}))
def test_out_is_someone_elses_folder(capsys, tmp_path, scenario_file, command):
    out = tmp_path / "thesis"
    out.mkdir()
    (out / "chapter1.tex").write_text("years of work\n")
    code, _, err = run_cli(capsys, COMMANDS[command](scenario_file, out))
    assert_rejected(code, err, names=["--out", str(out), "--force"])
    assert sorted(p.name for p in out.iterdir()) == ["chapter1.tex"]
    assert (out / "chapter1.tex").read_text() == "years of work\n"


def test_unknown_option_is_a_usage_error(capsys, tmp_path, scenario_file):
    code, _, err = run_cli(capsys, ["run", str(scenario_file), "--outt", str(tmp_path / "o")])
    assert code == 2 and "Traceback" not in err and "--outt" in err
    assert not (tmp_path / "o").exists()


# --------------------------------------------------------------------- as a user runs it

@pytest.mark.parametrize("name", ["deep_nesting.yaml", "tag_apply.yaml"])
def test_console_script_gives_one_line(tmp_path, name):
    """Through a real process: no traceback, no banner, one line, exit 2, nothing written."""
    path = HERE / name
    out = tmp_path / "out"
    proc = subprocess.run([sys.executable, "-m", "sim.cli", "run", str(path), "--out", str(out)],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2, proc.stderr
    assert proc.stderr.count("\n") == 1 and proc.stderr.startswith(f"wheelbench: {path}: "), proc.stderr
    assert proc.stdout == ""
    assert not out.exists()


# --------------------------------------------------------------------- bench logs for `fit`

_GOOD_LOG = "t_s,angle_rad\n" + "".join(f"{i * 0.01:g},{0.1 * (-1) ** i}\n" for i in range(50))
LOG_CASES = {
    # id: (log text, fragments the message must hold)
    "empty": ("", ["the log is empty"]),
    "header_only": ("t_s,angle_rad\n", ["only 0 data rows"]),
    "too_few_rows": ("t_s,angle_rad\n0,0\n0.01,0\n", ["only 2 data rows"]),
    "no_time_column": ("angle_rad\n" + "0.1\n" * 20, ["missing column t_s"]),
    "no_unit": ("t,angle\n" + "0,0\n" * 20, ["column 't' has no unit"]),
    "unknown_unit": ("t_s,angle_furlong\n" + "".join(f"{i},0\n" for i in range(20)), ["unknown unit 'furlong'"]),
    "text_in_cell": (_GOOD_LOG.replace("0.1\n", "abc\n", 1), ["column 'angle_rad', data row", "'abc'"]),
    "nan_in_cell": (_GOOD_LOG.replace("0.1\n", "nan\n", 1), ["column 'angle_rad', data row", "not finite"]),
    "time_not_increasing": ("t_s,angle_rad\n" + "".join(f"{(i % 5) * 0.01},0.1\n" for i in range(20)),
                            ["column 't_s' must increase"]),
    "two_columns_one_quantity": ("t_s,angle_rad,angle_deg\n" + "".join(f"{i},0,0\n" for i in range(20)),
                                 ["'angle_rad' and 'angle_deg' both give angle"]),
}


@pytest.mark.skipif("fit" not in {c.name or c.callback.__name__ for c in app.registered_commands},
                    reason="no fit command yet")
@pytest.mark.parametrize("case", sorted(LOG_CASES))
def test_bad_log(capsys, tmp_path, case):
    text, fragments = LOG_CASES[case]
    log = tmp_path / "bench.csv"
    log.write_text(text, encoding="utf-8")
    out = tmp_path / "out"
    code, _, err = run_cli(capsys, ["fit", str(log), "--test", "free-swing", "--out", str(out)])
    assert_rejected(code, err, names=[str(log), *fragments], out=out)


# --------------------------------------------------------------------- command options

OPTION_CASES = {
    # id: (command, extra argv after the scenario, fragments)
    "vary_no_equals": ("sweep", ["--vary", "drive.supply"], ["--vary 'drive.supply'", "KEY=LO..HI:N"]),
    "vary_zero_points": ("sweep", ["--vary", "drive.supply=1..2:0"], ["N must be from 1"]),
    "vary_too_many_points": ("sweep", ["--vary", "drive.supply=1..2:999999"], ["N must be from 1"]),
    "vary_mixed_units": ("sweep", ["--vary", "drive.supply=1 V..2 kg:3"], ["same kind"]),
    "vary_power_bomb": ("sweep", ["--vary", "drive.supply=10**10**10..1:2"], ["LO and HI"]),
    "vary_infinite": ("sweep", ["--vary", "drive.supply=inf..12:2"], ["--vary", "must be finite", "'inf'"]),
    "vary_unknown_key": ("sweep", ["--vary", "drive.suply=1,2"], ["drive.suply", "unknown key"]),
    "vary_bad_path": ("sweep", ["--vary", "drive..supply=1,2"], ["malformed key path"]),
    "vary_empty_item": ("sweep", ["--vary", "drive.supply=1,,2"], ["empty value"]),
    "vary_out_of_range": ("sweep", ["--vary", "drive.supply=-1,2"], ["drive.supply", "greater than"]),
    "vary_no_such_item": ("sweep", ["--vary", "wheel.parts[99].mass=1,2"], ["wheel.parts[99]", "no such list item"]),
    "vary_same_key_twice": ("sweep", ["--vary", "drive.supply=10,12", "--vary", "drive.supply=8..9:2"],
                            ["--vary drive.supply", "varied twice"]),
    "sweep_negative_trials": ("sweep", ["--vary", "drive.supply=10,12", "--trials", "-1"], ["--trials"]),
    "sweep_zero_workers": ("sweep", ["--vary", "drive.supply=10,12", "--workers", "0"], ["--workers"]),
    "check_zero_trials": ("check", ["--trials", "0"], ["--trials"]),
    "catch_map_grid": ("catch-map", ["--grid", "0"], ["--grid"]),
    "catch_map_angle_unit": ("catch-map", ["--angle-max", "3 kg"], ["--angle-max", "angle"]),
    "catch_map_rate_unit": ("catch-map", ["--rate-max", "fast"], ["--rate-max"]),
    "gains_format": ("gains", ["--format", "xml"], ["--format", "'xml'"]),
    "run_video_suffix": ("run", ["--video", "clip.avi"], ["--video clip.avi", ".mp4 or .gif"]),
    "run_video_size": ("run", ["--video", "clip.gif", "--size", "big"], ["--size big"]),
}


@pytest.mark.parametrize("case", sorted(OPTION_CASES))
def test_bad_option(capsys, tmp_path, scenario_file, case):
    command, extra, fragments = OPTION_CASES[case]
    if command not in COMMANDS:
        pytest.skip(f"no {command} command yet")
    out = tmp_path / "out"
    argv = COMMANDS[command](scenario_file, out)
    if command == "sweep":  # the table's default --vary is replaced by the case's own
        i = argv.index("--vary")
        del argv[i:i + 2]
    code, _, err = run_cli(capsys, argv + extra)
    assert_rejected(code, err, names=fragments, out=out)  # incl. a folder made before the error was found


# --------------------------------------------------------------------- options checked before simulating (issue 13)

@pytest.fixture
def no_simulation(monkeypatch):
    """Any trial started fails the test at once: the options must be refused before."""
    import sim.run.runfiles
    import sim.run.trial
    import sim.studies.verdicts

    def boom(*args, **kwargs):
        raise AssertionError("a trial was simulated before the options were checked")
    for module in (sim.run.trial, sim.run.runfiles, sim.studies.verdicts):
        monkeypatch.setattr(module, "run_trial", boom)


LONG = "n" * 256   # one byte over the 255 most file systems take for a name (ext4, XFS: common practice, no source)
EARLY_CASES = {
    # id: (argv after the command and scenario, with {tmp} for the test's folder; fragments of the one line)
    "run_out_name_too_long": ("run", ["--out", "{tmp}/" + LONG], ["--out", "255"]),
    "check_out_name_too_long": ("check", ["--out", "{tmp}/" + LONG + "/x", "--trials", "1"], ["--out", "255"]),
    "run_video_name_too_long": ("run", ["--out", "{tmp}/out", "--video", "{tmp}/" + LONG + ".gif"], ["--video", "255"]),
    "run_video_parent_is_a_file": ("run", ["--out", "{tmp}/out", "--video", "{tmp}/afile/clip.gif"],
                                   ["--video", "afile is a file"]),
    "cluster_words": ("check", ["--out", "{tmp}/out", "--cluster", "not an address"], ["--cluster 'not an address'"]),
    "cluster_empty": ("sweep", ["--out", "{tmp}/out", "--vary", "drive.supply=10,12", "--cluster", ""], ["--cluster ''"]),
    "cluster_http": ("catch-map", ["--out", "{tmp}/out", "--cluster", "http://10.0.0.5:8786"],
                     ["--cluster 'http://10.0.0.5:8786'", "scheme 'http'"]),
    "catch_map_rate_absurd": ("catch-map", ["--out", "{tmp}/out", "--rate-max", "1e9 rad/s"], ["--rate-max", "1000"]),
    "catch_map_angle_absurd": ("catch-map", ["--out", "{tmp}/out", "--angle-max", "7200 deg"], ["--angle-max"]),
    "check_trials_too_many": ("check", ["--out", "{tmp}/out", "--trials", "1000000000000"], ["--trials", "100,000"]),
    "sweep_trials_too_many": ("sweep", ["--out", "{tmp}/out", "--vary", "drive.supply=10,12", "--trials", "200000"],
                              ["--trials", "100,000"]),
    "check_workers_too_many": ("check", ["--out", "{tmp}/out", "--trials", "1", "--workers", "1000"],
                               ["--workers 1000", "per core"]),
    "clip_shorter_than_a_frame": ("run", ["--out", "{tmp}/out", "--video", "{tmp}/c.gif", "--fps", "1"],
                                  ["--video", "too short for one frame"]),
    "compare_label_once": ("compare", ["--video", "{tmp}/c.gif", "--label", "only one"], ["--label", "twice"]),
}


@pytest.mark.parametrize("case", sorted(EARLY_CASES))
def test_options_are_refused_before_anything_is_simulated(capsys, tmp_path, scenario_file, no_simulation, case):
    """Issue 13 part 5 and 6: one line naming the option, exit 2, no trial run, no --out made."""
    command, extra, fragments = EARLY_CASES[case]
    (tmp_path / "afile").write_text("a user's file")
    argv = [command, str(scenario_file), *(a.replace("{tmp}", str(tmp_path)) for a in extra)]
    code, _, err = run_cli(capsys, argv)
    assert_rejected(code, err, names=fragments, out=tmp_path / "out")
    assert (tmp_path / "afile").read_text() == "a user's file"


def test_a_swing_up_requirement_past_the_step_limit_is_refused_before_simulating(capsys, tmp_path, no_simulation):
    """Issue 13 part 5: check's own swing-up trial obeys the 5,000,000-step limit
    (requirements.swing_up_time 1e9 s at a 1 ms step asked for 1e12 steps)."""
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(strategy={"kind": "swing_and_catch"},
                                                             requirements={"swing_up_time": "1e9 s"}))
    out = tmp_path / "out"
    code, _, err = run_cli(capsys, ["check", str(path), "--out", str(out), "--trials", "1", "--workers", "1"])
    assert_rejected(code, err, names=[str(path), "requirements.swing_up_time", "limit"], out=out)


def test_alias_fan_out_is_limited_by_its_expanded_size(capsys, tmp_path):
    """Issue 13 part 5: 22 aliases (under the alias cap) that each repeat the one before twice
    expand to 2^23 values; the loader counts nodes after expansion and refuses."""
    lines = ["name: fan-out", "x0: &x0 [1, 2]"] + [f"x{i}: &x{i} [*x{i - 1}, *x{i - 1}]" for i in range(1, 23)]
    path = tmp_path / "fan.yaml"
    path.write_text("\n".join(lines) + "\n")
    code, _, err = run_cli(capsys, ["validate", str(path)])
    assert_rejected(code, err, names=[str(path), "once its aliases are expanded"])
    path.write_text("a: &a [1, *a]\n")  # an alias inside its own anchor: a structure without end
    code, _, err = run_cli(capsys, ["validate", str(path)])
    assert_rejected(code, err, names=[str(path), "recursive"])


# --------------------------------------------------------------------- plug-ins that end their import

IMPORT_ENDINGS = {
    # id: (module text, fragment the message must hold). An unguarded `sys.exit(main())` once made
    # `validate` and `check` exit 0 having done nothing: a silent pass.
    "exit0": ("import sys\nsys.exit(0)\n", "SystemExit: 0"),
    "exit3": ("import sys\nsys.exit(3)\n", "SystemExit: 3"),
    "interrupt": ("raise KeyboardInterrupt\n", "KeyboardInterrupt"),
    "base_exception": ("class Odd(BaseException):\n    pass\nraise Odd('below Exception')\n", "Odd: below Exception"),
    "unprintable": ("class Odd(Exception):\n    def __str__(self):\n        raise ValueError\nraise Odd()\n",
                    "Odd: (its message could not be read: __str__ raised ValueError)"),
    # ending the process itself: caught because the import is tried in a forked child first
    "os_exit0": ("import os\nos._exit(0)\n", "ended its process (exit status 0)"),
    "segfault": ("import ctypes, faulthandler\nfaulthandler.disable()\nctypes.string_at(0)\n",
                 "ended its process (signal 11, SIGSEGV)"),
    "params_validator_exits": (
        "import sys\nfrom pydantic import field_validator\nfrom sim.strategies import Strategy, StrategyParams\n"
        "class Law(Strategy):\n    class Params(StrategyParams):\n        gain: float = 1.0\n"
        "        @field_validator('gain')\n        @classmethod\n        def _exit(cls, v):\n            sys.exit(0)\n",
        "validating the parameters of 'ends.py:Law' failed (SystemExit: 0)"),
}


@pytest.mark.parametrize("command", sorted(COMMANDS))
@pytest.mark.parametrize("case", sorted(IMPORT_ENDINGS))
def test_a_plugin_that_ends_its_import_is_bad_input(capsys, tmp_path, command, case):
    text, fragment = IMPORT_ENDINGS[case]
    (tmp_path / "ends.py").write_text(text, encoding="utf-8")
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(strategy={"plugin": "ends.py:Law", "gain": 2.0}))
    out = tmp_path / "out"
    code, stdout, err = run_cli(capsys, COMMANDS[command](path, out))
    assert_rejected(code, err, names=[str(path), "strategy.plugin", fragment], out=out)
    assert stdout == ""
