"""Firmware writing PWM duties on 3D devices: `Device3D.pwm_max`, each wheel's duty through the shared
power chain, the IMU's raw words on 3D, the duty firmware's failure modes (past full scale, wheels
swapped, an int16 overflow), the bundled fixed-point example (scenarios/firmware/cube_duty_q16.c on
cube_pack_firmware.yaml) against the Python multi-wheel `lqr`, and bad input. Builds go to the test
session's cache (conftest.py)."""

from __future__ import annotations

import math
import shutil
from pathlib import Path

import numpy as np
import pytest
import yaml

from sim.cli import main
from sim.model.device3d import Device3D
from sim.model.scenario_yaml import load_scenario
from sim.run.trial import run_trial
from test_firmware3d import twin_law_commands, without_strategy

pytestmark = pytest.mark.skipif(shutil.which("cc") is None and shutil.which("gcc") is None,
                                reason="needs a C compiler (.ci/run installs one)")

EXAMPLE_DIR = Path(__file__).resolve().parents[1] / "scenarios" / "firmware"
DEMO = EXAMPLE_DIR / "cube_pack_firmware.yaml"
DESK = EXAMPLE_DIR / "desk_firmware.yaml"
CUBE_VOLTS = EXAMPLE_DIR / "cube_firmware.yaml"
LQR_TWIN = "strategy={kind: lqr}"
PWM_MAX = 1023               # the demo's 10-bit timers
Q16 = 2.0**-16               # one step of Q16.16
F32 = 2.0**-24               # unit roundoff of IEEE 754 single precision (binary32)


def probe(folder: Path, source: str, *, base: Path = DEMO, edit=None, defines: dict | None = None) -> Path:
    """`base` with the firmware `source` (C text, in `folder`) as its strategy, written to `folder`."""
    (folder / "fw.c").write_text(source)
    raw = yaml.safe_load(base.read_text())
    raw["strategy"] = {"kind": "firmware", "sources": ["fw.c"], "include": [str(EXAMPLE_DIR)],
                       "defines": defines or {}}
    if edit is not None:
        edit(raw)
    path = folder / "scenario.yaml"
    path.write_text(yaml.safe_dump(raw, sort_keys=False))
    return path


# ----------------------------------------------------------------------------- the device and the duty law

def test_a_3d_device_takes_pwm_max_from_drive_pwm():
    assert Device3D.from_scenario(load_scenario(DEMO)).pwm_max == 2**10 - 1
    assert Device3D.from_scenario(load_scenario(DEMO, overrides=["drive.pwm.resolution_bits=8"])).pwm_max == 255
    assert Device3D.from_scenario(load_scenario(CUBE_VOLTS)).pwm_max == 0      # no drive.pwm


FIXED_DUTIES = """
/* each wheel a fixed duty: half scale and one count, minus a quarter, a third */
static int32_t full;
void wb_init(const wb_config_t *cfg) { full = cfg->pwm_max; }
void wb_step(const wb_input_t *in, wb_output_t *out) {
    (void)in;
    out->wheels_duty[0] = full / 2 + 1; out->wheels_duty[1] = -(full / 4); out->wheels_duty[2] = full / 3;
}
"""


@pytest.mark.parametrize("pwm_model", [True, False])
def test_each_wheels_duty_is_that_share_of_the_sagging_bus(tmp_path, pwm_model):
    # An H-bridge's mean output over a PWM period is D V_bus (Mohan, Undeland & Robbins, Power
    # Electronics, average model; references.md, "Power and drive"). Three bridges on one pack that sags
    # under their draw: each wheel's applied voltage is its duty / pwm_max times the bus as it stands on
    # that step, not times the nominal supply. With the PWM model (frequency, no dead time or dead band)
    # the duty is a whole count, so the product is exact; without it, one rounding of the volts the
    # duty stands for (duty / pwm_max * supply, divided by the supply again) separates them.
    def edit(raw):
        raw["drive"] = {"pwm": {"resolution_bits": 10, **({"frequency": "20 kHz"} if pwm_model else {})}}
        raw["battery"].update(internal_resistance="0.15 ohm")
        raw["trial"].update(duration="0.3 s", pushes=[])
    result = run_trial(load_scenario(probe(tmp_path, FIXED_DUTIES, edit=edit)))
    tr = result.trace
    bus = tr.bus_volts[:tr.n]
    assert bus[0] - bus.min() > 0.5                     # the pack sagged by over half a volt
    assert not result.power["power_events"]               # and stayed above its cut-off
    for i, duty in enumerate((512, -255, 341), start=1):
        expected = duty / PWM_MAX * bus
        if pwm_model:
            np.testing.assert_array_equal(tr.wheel(i, "voltage"), expected)
        else:
            np.testing.assert_allclose(tr.wheel(i, "voltage"), expected, rtol=4e-16, atol=0)


PAST_FULL_SCALE = """
/* duties past full scale when OVER is 1, the same duties at full scale when OVER is 0 */
static int32_t full;
void wb_init(const wb_config_t *cfg) { full = cfg->pwm_max; }
void wb_step(const wb_input_t *in, wb_output_t *out) {
    int32_t k = (in->t_us / 100000u) % 2 ? -1 : 1;          /* turn round every 0.1 s */
    out->duty = OVER ? 3 * k * full : k * full;                        /* one wheel */
    out->wheels_duty[0] = OVER ? 3 * k * full : k * full;
    out->wheels_duty[1] = OVER ? -5 * k * full - 7 : -k * full;
    out->wheels_duty[2] = k * full / 2;
}
"""


@pytest.mark.parametrize("base", ["desk", "cube"])
def test_a_duty_past_full_scale_acts_as_full_scale_on_one_wheel_and_on_three(tmp_path, base):
    # one wheel clamps a duty past +-pwm_max to full scale (its volts to the supply, sim/run/trial.py);
    # a 3D device does the same for every wheel: the trials are the same bit for bit, and each tick
    # with a duty at full scale counts as saturated
    def edit(raw):
        raw["trial"].update(duration="0.4 s", pushes=[])
    runs = {}
    for over in (0, 1):
        folder = tmp_path / f"over{over}"
        folder.mkdir()
        path = probe(folder, PAST_FULL_SCALE, base=DESK if base == "desk" else DEMO, edit=edit, defines={"OVER": over})
        runs[over] = run_trial(load_scenario(path))
    a, b = runs[0], runs[1]
    for name in (*a.trace.FLOAT_COLUMNS, "mode"):
        np.testing.assert_array_equal(a.trace.view(name), b.trace.view(name), err_msg=name)
    assert a.saturated_ticks == b.saturated_ticks == a.control_ticks > 0


# ----------------------------------------------------------------------------- the bundled example against Python

def test_bundled_pack_gains_header_is_the_gains_commands_output(capsys):
    assert main(["gains", str(DEMO), "--set", LQR_TWIN, "--format", "c"]) == 0
    fresh = capsys.readouterr().out.splitlines()[1:]
    bundled = (EXAMPLE_DIR / "cube_pack_gains.h").read_text().splitlines()[1:]
    assert bundled == fresh, "regenerate scenarios/firmware/cube_pack_gains.h with `wheelbench gains ... --format c`"


def test_demo_is_the_pack_cube_but_for_its_strategy_and_pwm_resolution():
    pack, demo = without_strategy(EXAMPLE_DIR.parent / "cube_pack.yaml", DEMO)
    assert (pack["drive"]["pwm"].pop("resolution_bits"), demo["drive"]["pwm"].pop("resolution_bits")) == (8, 10)
    assert demo == pack


def test_example_duties_match_python_lqr_within_the_pwm_quantisation_tick_by_tick():
    # Both laws fed the same readings (those of the Python trial through a push), tick by tick. The
    # Python law's volts V reach a 10-bit bridge on a bus at the supply s as the duty round(V/s * 1023):
    # q(V) = round(V/s * 1023) * s/1023. The firmware writes d itself, and the runner gives it
    # d * s/1023. Bound on |d_fw - d_py| * s/1023, derived from the firmware's arithmetic
    # (cube_duty_q16.c):
    #   its volts v differ from V by at most D: each reading rounded to Q16 (|x| 2^-24 for the float32
    #   it arrives as, plus 2^-17) or, for a wheel, counts times a Q16 step (|counts| 2^-17); each gain
    #   rounded to Q16 (2^-17, times |x|, and times s for a held command); the sum rounded to Q16
    #   (2^-17); the held commands carry earlier ticks' differences through gains whose row sums are
    #   rho < 1, so D = E / (1 - rho) (a geometric series);
    #   v * 1023 / s_q16 (the supply in Q16, 2^-17 off: |v| 2^-17 / s of a volt) rounded to a
    #   sixteenth of a count (1/32), then to a whole count (1/2); Python's duty rounded once (1/2).
    # |applied_fw - applied_py| <= D + (1 + 1/32) s/1023 + max|v| 2^-17 / s.
    short = ["trial.duration=2 s", "trial.pushes=[{at: 1 s, impulse: [30 mN*m*s, 0, 0]}]"]
    s = float(load_scenario(DEMO, overrides=short).drive.supply)
    # the bus at the supply: no sag for the Python law's clamps either
    x_ticks, python, (fw_v, py_v) = twin_law_commands(DEMO, short, LQR_TWIN, supply_v=s)
    quantised = np.round(np.clip(py_v, -s, s) / s * PWM_MAX) * s / PWM_MAX
    g = np.abs(python._G)
    n_x, n_held = 8, g.shape[1] - 8
    wheel_step = 2 * math.pi / 2048 / 0.002                  # rad/s per count moved in one 2 ms period
    x_max = np.abs(x_ticks).max(axis=1)
    e_x = np.concatenate([x_max[:5] * F32 + Q16 / 2, x_max[5:] / wheel_step * Q16 / 2])
    rho = g[:, n_x:].sum(axis=1).max()
    assert rho < 1
    e = (g[:, :n_x] @ e_x + (Q16 / 2) * (x_max + e_x).sum() + n_held * (Q16 / 2) * s + Q16 / 2).max()
    d_volts = e / (1 - rho - n_held * Q16 / 2)
    v_max = np.abs(py_v).max() + d_volts
    bound = d_volts + (1 + 1 / 32) * s / PWM_MAX + v_max * (Q16 / 2) / s
    diff = np.abs(fw_v - quantised).max()
    # measured when written: D = 11.8 mV (the tilt readings' Q16 step times the 553 V/rad tilt gain is
    # 4.2 mV of it), bound 23.6 mV, about two counts; the largest difference was one count (11.4 mV).
    # A wrong gain or sign would be volts apart.
    assert bound < 3 * s / PWM_MAX
    assert diff <= bound, (diff, bound)
    assert np.abs(fw_v / s * PWM_MAX - np.round(fw_v / s * PWM_MAX)).max() < 1e-9   # whole counts
    assert np.count_nonzero(fw_v != quantised) > 0            # the firmware's own arithmetic really ran


def test_example_trial_on_a_bench_supply_matches_python_lqr_trial():
    # On a bench supply at the pack's voltage (no sag: a duty's volts are the volts the Python law
    # asks for, to a count) the whole 6 s catch from the start tilt against the Python lqr's. The laws
    # differ by about two counts (11.7 V / 1023 each) a tick at most (test above); the wheel encoders'
    # counts (1.53 rad/s a count a period) and the bridges' dead band (min_duty 2%: a count across its
    # edge is a 0.23 V step) can turn a hair's difference in state into a count or a step, so no
    # closed-form bound holds over a trial. Measured when written: tilts within 3.5e-4 rad, wheel speeds
    # within 1.7 rad/s (through the demo's two pushes, which saturate the bridges, 4.0e-3 rad and 13 rad/s,
    # both laws balanced with the same 3.6 deg peak tilt). The limits, 1e-3 rad and 5 rad/s, are well
    # above the measured ones and far below what a sign or gain error gives (below).
    bench = ["battery=null", "drive.supply=11.7 V", "trial.pushes=[]"]
    fw, lq = run_trial(load_scenario(DEMO, overrides=bench)), run_trial(load_scenario(DEMO, overrides=bench + [LQR_TWIN]))
    assert fw.outcome == lq.outcome == "balanced"
    a, b = fw.trace, lq.trace
    for name in ("tilt_x", "tilt_y"):
        np.testing.assert_allclose(getattr(a, name)[:a.n], getattr(b, name)[:b.n], rtol=0, atol=1e-3, err_msg=name)
    for i in (1, 2, 3):
        np.testing.assert_allclose(a.wheel(i, "speed"), b.wheel(i, "speed"), rtol=0, atol=5.0, err_msg=f"wheel {i}")
    assert set(a.phases) <= {"fw 1", "fw 2"}


def test_demo_balances_on_its_pack_and_its_duties_draw_less_than_the_sag_compensated_law():
    # a duty is a share of the bus: when the pack sags the firmware's wheels get less than it asked,
    # where the Python law's volts are met (the runner sets the duty by the bus as it stands), so the
    # firmware draws less from the pack in the push and the bus sags less
    fw, lq = run_trial(load_scenario(DEMO)), run_trial(load_scenario(DEMO, overrides=[LQR_TWIN]))
    assert fw.outcome == lq.outcome == "balanced"
    assert fw.power["min_supply_voltage_v"] > lq.power["min_supply_voltage_v"]
    assert fw.power["min_supply_voltage_v"] < float(fw.scenario.drive.supply) - 1.0    # it did sag


# ----------------------------------------------------------------------------- failure modes

@pytest.mark.parametrize("defines, named", [({"SWAP_WHEELS": 1}, [1, 2]), ({"FLIP_WHEEL": 3}, [3])])
def test_swapped_or_flipped_wheel_outputs_fall_and_the_cause_names_the_wheels(defines, named):
    # wheel 1's duty written to wheel 2 and back (a swapped connector), or one wheel's sign turned: the
    # named wheels' reaction torques turn the body further over (sim/run/causes3d.wrong_way_wheels)
    sc = load_scenario(DEMO, overrides=[f"strategy.defines={defines}", "trial.duration=2 s", "trial.pushes=[]",
                                        "trial.stop_early=true"])
    result = run_trial(sc)
    assert result.outcome == "fell" and result.fell_at_s < 1.0
    assert result.cause == "wheel_wrong_way", result.cause_detail
    for i in (1, 2, 3):
        assert (f"wheel {i} (" in result.cause_detail) == (i in named), result.cause_detail


def test_a_correct_law_beaten_by_a_push_is_not_read_as_a_wrong_way_wheel():
    # the same rule on a fall the law fought: every wheel pushed against gravity's torque
    sc = load_scenario(DEMO, overrides=["trial.duration=3 s", "trial.pushes=[{at: 1 s, impulse: [45 mN*m*s, 0, 0]}]",
                                        "trial.stop_early=true"])
    result = run_trial(sc)
    assert result.outcome == "fell"
    assert result.cause == "push_too_large"
    from sim.run.causes import LOOKBACK_S
    from sim.run.causes3d import wrong_way_wheels
    end = int(round(result.fell_at_s / result.trace.step_s))
    assert wrong_way_wheels(result, end - int(round(LOOKBACK_S / result.trace.step_s)), end) == []


def test_an_int16_duty_overflows_on_a_push_where_the_int32_law_saturates():
    # The example keeps each duty in sixteenths of a count before clamping it (DUTY_T). In int16 that
    # holds 32767 / 16 = 2047 counts, twice full scale: a push that makes the law ask for more wraps the
    # duty modulo 2^16 (GCC's conversion to a narrower signed type, GCC manual "Integers"
    # implementation-defined behaviour; from memory) to the opposite sign, where the int32 law clamps to
    # full scale. Same trial until then; the int32 law holds, the int16 one falls.
    push = ["trial.duration=3 s", "trial.pushes=[{at: 1 s, impulse: [30 mN*m*s, 0, 0]}]"]
    wide = run_trial(load_scenario(DEMO, overrides=push + ["strategy.defines={DUTY_T: int32_t}"]))
    narrow = run_trial(load_scenario(DEMO, overrides=push + ["strategy.defines={DUTY_T: int16_t}"]))
    assert wide.outcome == "balanced" and narrow.outcome == "fell"
    volts = lambda r: np.array([r.trace.wheel(i, "voltage") for i in (1, 2, 3)])   # noqa: E731
    a, b = volts(wide), volts(narrow)
    k = int(np.argmax(np.any(a != b, axis=0)))                  # the first step they part
    assert 1.0 <= k * wide.trace.step_s < 1.1                   # at the push, not before
    bus = wide.trace.bus_volts[k]
    parted = np.flatnonzero(a[:, k] != b[:, k])
    for i in parted:      # where the int32 law is at full scale, the int16 one turned round
        assert abs(a[i, k]) > 0.9 * bus and np.sign(b[i, k]) == -np.sign(a[i, k]), (i, a[i, k], b[i, k], bus)


# ----------------------------------------------------------------------------- the IMU's raw words on 3D

IMU_PROBE = """
static float lsb_g, lsb_a;
void wb_init(const wb_config_t *cfg) { lsb_g = cfg->gyro_rad_s_per_lsb; lsb_a = cfg->accel_m_s2_per_lsb; }
void wb_step(const wb_input_t *in, wb_output_t *out) {
    /* probe: the gyro's x and y words and the accelerometer's z word, back in SI, as three wheels' volts */
    out->wheels_volts[0] = (float)in->gyro_raw[0] * lsb_g;
    out->wheels_volts[1] = (float)in->gyro_raw[1] * lsb_g;
    out->wheels_volts[2] = 0.001f * (float)in->accel_raw[2] * lsb_a;
}
"""


def test_firmware_on_a_3d_device_reads_the_imus_raw_words(tmp_path):
    # gyro_raw / accel_raw on a ball mount are the IMU's readings (the trace's imu_* columns) over one
    # LSB, rounded (a 16-bit MEMS word; common practice, no source), as on one wheel
    def edit(raw):
        raw["sensors"]["imu"] = {"at": [0.11, 0.04, 0.147], "gyro": {"resolution": "0.01 deg/s"},
                                 "accel": {"range": "8 g0"}}
        raw["trial"].update(duration="0.3 s", pushes=[], start={"tilt": ["2 deg", "-1 deg"]})
    result = run_trial(load_scenario(probe(tmp_path, IMU_PROBE, base=CUBE_VOLTS, edit=edit)))
    tr, cs = result.trace, result.scenario.control_steps
    lsb_g, lsb_a = math.radians(0.01), 8 * 9.80665 / 32768
    rows = np.arange(0, tr.n, cs)
    for i, (column, lsb, scale) in enumerate([("imu_gyro_x_rad_s", lsb_g, 1.0), ("imu_gyro_y_rad_s", lsb_g, 1.0),
                                              ("imu_accel_z_m_s2", lsb_a, 0.001)], start=1):
        sample = getattr(tr, column)[rows]
        assert np.ptp(sample) > 100 * lsb, column              # the probe saw the body move
        expected = scale * np.round(sample / lsb) * lsb
        assert np.max(np.abs(tr.wheel(i, "voltage")[rows] - expected)) < 1e-6, column   # float32 on the way


# ----------------------------------------------------------------------------- bad input and the wrong device

@pytest.mark.parametrize("case", ["duty_without_pwm", "volts_with_pwm"])
@pytest.mark.parametrize("command", ["validate", "run"])
def test_a_firmware_writing_the_form_the_drive_ignores_is_one_line_and_exit_2(tmp_path, capsys, case, command):
    raw = yaml.safe_load(DEMO.read_text())
    raw["strategy"]["sources"] = [str(EXAMPLE_DIR / "cube_duty_q16.c")]
    raw["strategy"]["include"] = [str(EXAMPLE_DIR)]
    if case == "duty_without_pwm":
        del raw["drive"]["pwm"]
        raw["drive"] = {k: v for k, v in raw["drive"].items() if k == "trip"}
        key = "strategy.writes"
    else:
        raw["strategy"]["writes"] = "volts"
        key = "drive.pwm"
    path = tmp_path / "scenario.yaml"
    path.write_text(yaml.safe_dump(raw, sort_keys=False))
    out = tmp_path / "out"
    code = main([command, str(path)] + (["--out", str(out)] if command == "run" else []))
    err = [line for line in capsys.readouterr().err.splitlines() if line.strip()]
    assert code == 2 and len(err) == 1 and err[0].startswith(f"wheelbench: {path}: {key}: "), err
    assert not out.exists()


def test_the_example_leaves_its_duties_at_0_on_a_timer_of_another_resolution(tmp_path):
    # the duties are counts of a 10-bit timer: on an 8-bit drive they would be four times too large,
    # so the example says so in its log and writes nothing
    log = tmp_path / "firmware.log"
    code = main(["run", str(DEMO), "--set", "drive.pwm.resolution_bits=8", "--set", "trial.duration=0.2 s",
                 "--set", "trial.pushes=[]", "--out", str(tmp_path)])
    assert code == 0
    text = log.read_text()
    assert "pwm_max 255 (expects 1023)" in text and "not the device of cube_pack_gains.h and this timer" in text
    import csv
    with open(tmp_path / "trace.csv") as f:
        rows = list(csv.DictReader(f))
    assert {r["mode"] for r in rows} == {"fw 9"}
    assert all(float(r[f"wheel{i}_voltage_v"]) == 0.0 for r in rows for i in (1, 2, 3))


# ----------------------------------------------------------------------------- the CLI, end to end

def test_run_on_the_demo_writes_its_files_and_balances(tmp_path, capsys):
    import json
    assert main(["run", str(DEMO), "--out", str(tmp_path)]) == 0
    m = json.loads((tmp_path / "metrics.json").read_text())
    assert m["outcome"] == "balanced"
    assert "cube_duty_q16: ball mount, 3 wheels, 2000 us period, pwm_max 1023" in (tmp_path / "firmware.log").read_text()
    assert (tmp_path / "trace.csv").stat().st_size > 1000


@pytest.mark.slow
def test_check_on_the_demo_passes(tmp_path, capsys):
    import json
    code = main(["check", str(DEMO), "--out", str(tmp_path), "--trials", "2", "--workers", "1"])
    v = json.loads((tmp_path / "verdict.json").read_text())
    failed = [c["name"] for c in v["criteria"] if not c["passed"]]
    assert code == 0 and v["passed"], failed
    assert "Safety:" in capsys.readouterr().out


DUTY_ONLY = """
/* a duty of a 10-bit timer on every wheel, whatever the drive says */
void wb_init(const wb_config_t *cfg) { (void)cfg; }
void wb_step(const wb_input_t *in, wb_output_t *out) {
    (void)in; out->duty = 300; out->wheels_duty[0] = 300; out->wheels_duty[1] = -200; out->wheels_duty[2] = 100;
}
"""


@pytest.mark.parametrize("case", ["volts_on_a_pwm_drive", "duty_without_pwm_3d", "duty_without_pwm_one_wheel"])
def test_a_firmware_writing_only_the_form_the_drive_ignores_ends_as_strategy_failed(tmp_path, case):
    # without strategy.writes the load cannot know; the first tick that writes only the other form (a
    # volt of 1.5 counts or more and no duty, or a duty and no volt) ends the trial with the fix named,
    # rather than a trial whose wheels silently get 0 V
    def no_pwm(raw):
        raw["drive"].pop("pwm", None)
        raw["trial"].update(duration="0.3 s", pushes=[])
    if case == "volts_on_a_pwm_drive":
        sc = load_scenario(CUBE_VOLTS, overrides=["drive.pwm={resolution_bits: 10}", "trial.duration=0.3 s",
                                                  "trial.pushes=[]", "trial.start.tilt=[2 deg, 0 deg]"])
        words = "wrote volts but no duty, and with drive.pwm (pwm_max 1023)"
    else:
        sc = load_scenario(probe(tmp_path, DUTY_ONLY, base=CUBE_VOLTS if case.endswith("3d") else DESK, edit=no_pwm))
        words = "wrote a duty but no volts, and without drive.pwm (pwm_max 0)"
    result = run_trial(sc)
    assert result.outcome == "strategy_failed" and words in result.message, result.message
    assert "t = 0.0000 s" in result.message                 # at the first tick that did it


HINGE_DUTY = """
void wb_init(const wb_config_t *cfg) { (void)cfg; }
void wb_step(const wb_input_t *in, wb_output_t *out) { (void)in; out->wheels_duty[0] = -700; }
"""


def test_a_3d_hinge_device_takes_its_wheels_duty_too(tmp_path):
    # the tilted-axis pendulum (a 3D hinge device, one wheel off the hinge axis) on a bench supply with
    # a 10-bit PWM model: its bridge applies duty / pwm_max of the supply (the PWM average model above)
    base = EXAMPLE_DIR.parent / "tilted_axis.yaml"

    def edit(raw):
        raw["drive"]["pwm"] = {"resolution_bits": 10, "frequency": "20 kHz"}
        raw["trial"].update(duration="0.2 s", pushes=[])
    result = run_trial(load_scenario(probe(tmp_path, HINGE_DUTY, base=base, edit=edit)))
    assert Device3D.from_scenario(result.scenario).pwm_max == PWM_MAX
    s = float(result.scenario.drive.supply)
    np.testing.assert_array_equal(result.trace.wheel(1, "voltage"), np.full(result.trace.n, -700 / PWM_MAX * s))
