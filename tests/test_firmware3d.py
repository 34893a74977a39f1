"""Firmware in the loop on 3D devices: wheelbench.h's attitude and per-wheel fields, the bundled
three-wheel example (scenarios/firmware/cube_lqr.c) against the Python multi-wheel `lqr`, and
crashes of 3D firmware as outcomes. Builds go to the test session's cache (conftest.py)."""

from __future__ import annotations

import math
import shutil
import sys
from pathlib import Path

import numpy as np
import pytest
import yaml

from sim.cli import main
from sim.core import isolation
from sim.model.device3d import Device3D
from sim.model.scenario_yaml import load_scenario
from sim.run.parallel import run_tasks
from sim.run.trial import run_trial
from sim.strategies.base import Reading
from sim.strategies.firmware import build as fw_build
from sim.strategies.firmware import firmware_log_to

pytestmark = pytest.mark.skipif(shutil.which("cc") is None and shutil.which("gcc") is None,
                                reason="needs a C compiler (.ci/run installs one)")
linux_only = pytest.mark.skipif(not isolation.AVAILABLE or not sys.platform.startswith("linux"),
                                reason="isolated firmware trials need fork; the signals are Linux's")

EXAMPLE_DIR = Path(__file__).resolve().parents[1] / "scenarios" / "firmware"
CUBE = EXAMPLE_DIR / "cube_firmware.yaml"
LQR_TWIN = "strategy={kind: lqr}"
F32 = 2.0**-24          # unit roundoff of IEEE 754 single precision (binary32)


def cube_scenario(folder: Path, source: str, *, defines: dict | None = None, trial: dict | None = None,
                  edit=None, write_only: bool = False):
    """The bundled cube scenario with the firmware `source` (C text, in `folder`) as its strategy
    (with a `duration` in `trial`, without the pushes)."""
    (folder / "fw.c").write_text(source)
    raw = yaml.safe_load(CUBE.read_text())
    raw["strategy"] = {"kind": "firmware", "sources": ["fw.c"], "include": [str(EXAMPLE_DIR)],
                       "defines": defines or {}}
    raw["trial"].update({"pushes": [], **trial} if trial and "duration" in trial else (trial or {}))
    if edit is not None:
        edit(raw)
    path = folder / "scenario.yaml"
    path.write_text(yaml.safe_dump(raw, sort_keys=False))
    return path if write_only else load_scenario(path)


# ----------------------------------------------------------------------------- the contract

def test_header_appends_the_attitude_and_the_mount_last():
    # one-wheel code and checks written against the earlier fields must still fit: the 3D fields
    # come after everything else (tests/test_firmware.py holds the whole order)
    import cffi
    ffi = cffi.FFI()
    ffi.cdef(fw_build.contract_cdef())
    assert [n for n, _ in ffi.typeof("wb_config_t").fields][-1] == "mount"
    fields = dict(ffi.typeof("wb_input_t").fields)
    assert [n for n, _ in ffi.typeof("wb_input_t").fields][-3:] == ["tilt_rad", "rates_rad_s", "bus_v"]   # the bus came after
    assert (fields["tilt_rad"].type.length, fields["rates_rad_s"].type.length) == (2, 3)
    text = fw_build.contract_cdef()
    assert "#define WB_MOUNT_HINGE 0" in text and "#define WB_MOUNT_BALL 1" in text


PROBE = """
#include <stdio.h>
static int32_t n, mount, cpr[3];
void wb_init(const wb_config_t *cfg) {
    n = cfg->n_wheels; mount = cfg->mount;
    for (int i = 0; i < 3; i++) cpr[i] = cfg->wheels_counts_per_rev[i];
}
void wb_step(const wb_input_t *in, wb_output_t *out) {
    printf("%ld %ld %ld %ld %ld %ld %ld %ld %.9g %.9g %.9g %.9g %.9g %.9g %.9g %.9g %.9g %.9g\\n",
           (long)n, (long)mount, (long)cpr[0], (long)cpr[2], (long)in->t_us, (long)in->wheels_counts[0],
           (long)in->wheels_counts[1], (long)in->wheels_counts[2], in->tilt_rad[0], in->tilt_rad[1],
           in->rates_rad_s[0], in->rates_rad_s[1], in->rates_rad_s[2], in->wheels_speed_rad_s[0],
           in->wheels_speed_rad_s[1], in->wheels_speed_rad_s[2], in->angle_rad, in->wheel_speed_rad_s);
    /* each wheel its own command: wheel 1 through the one-wheel field, 2 and 3 through the array */
    out->volts = 1.0f;
    out->wheels_volts[1] = -2.0f;
    out->wheels_volts[2] = 3.0f;
    out->wheels_brake[1] = in->t_us >= 100000;   /* wheel 2's brake from 0.1 s */
}
"""


@linux_only
def test_every_wheel_and_axis_reaches_the_firmware_and_each_wheel_gets_its_command(tmp_path):
    def give_brakes(raw):
        raw["wheels"][1]["brake_torque"] = "50 mN*m"
    sc = cube_scenario(tmp_path, PROBE, trial={"duration": "0.2 s", "pushes": [],
                                               "start": {"tilt": ["3 deg", "-2 deg"], "wheel_speed": [50, 60, 70]}},
                       edit=give_brakes)
    log = tmp_path / "firmware.log"
    with firmware_log_to(log):
        result = run_trial(sc)
    assert result.outcome != "strategy_failed", result.message
    rows = np.array([[float(v) for v in line.split()] for line in log.read_text().splitlines()])
    tr, cs = result.trace, sc.control_steps
    ticks = np.arange(0, tr.n, cs)[:len(rows)]
    assert len(rows) == tr.n // cs and len(rows) == 100      # 0.2 s at 500 Hz
    assert set(rows[:, 0]) == {3} and set(rows[:, 1]) == {1} and set(rows[:, 2]) == {2048} and set(rows[:, 3]) == {2048}
    np.testing.assert_array_equal(rows[:, 4], np.round(ticks * sc.world.step * 1e6))
    # the readings, as float32 (one rounding: relative 2^-24)
    measured = [tr.m_tilt_x, tr.m_tilt_y, tr.m_rate_x, tr.m_rate_y, tr.m_rate_z, tr.m_w1, tr.m_w2, tr.m_w3]
    for j, col in enumerate(measured):
        np.testing.assert_allclose(rows[:, 8 + j], col[ticks], rtol=F32, atol=0, err_msg=f"reading {j}")
    np.testing.assert_array_equal(rows[:, 16], rows[:, 8])     # angle_rad mirrors tilt_rad[0]
    np.testing.assert_array_equal(rows[:, 17], rows[:, 13])    # wheel_speed_rad_s mirrors wheel 1's
    # each wheel's counts: its speed readings times the period over one count, each tick rounded and added
    period, res = 1.0 / sc.sensors.rate, 2 * math.pi / 2048
    for i, col in enumerate((tr.m_w1, tr.m_w2, tr.m_w3)):
        np.testing.assert_array_equal(rows[:, 5 + i], np.cumsum(np.round(col[ticks] * period / res)))
    # each wheel's own command reached its winding, held between ticks
    for i, v in enumerate((1.0, -2.0, 3.0), start=1):
        np.testing.assert_array_equal(tr.wheel(i, "voltage"), v)


@linux_only
def test_a_brake_on_one_wheel_stops_that_wheel_only(tmp_path):
    # gravity off, 0 V on every wheel: each wheel slows by its winding's back-EMF and its bearing,
    # and wheel 2 also by its brake (0.2 N m) once the firmware engages it at 0.1 s
    src = """
void wb_init(const wb_config_t *cfg) { (void)cfg; }
void wb_step(const wb_input_t *in, wb_output_t *out) { out->wheels_brake[1] = in->t_us >= 100000; }
"""
    def setup(raw):
        raw["wheels"][1]["brake_torque"] = "0.2 N*m"
        raw["world"] = {"gravity": "0 m/s^2"}
    runs = {}
    for name, text in (("brake", src), ("none", src.replace("in->t_us >= 100000", "0"))):
        folder = tmp_path / name
        folder.mkdir()
        runs[name] = run_trial(cube_scenario(folder, text, trial={"duration": "0.4 s", "pushes": [],
                                                                  "start": {"tilt": [0, 0], "wheel_speed": 100}},
                                             edit=setup)).trace
    braked, free = runs["brake"], runs["none"]
    k = int(0.1 / 0.001)
    np.testing.assert_array_equal(braked.wheel(2, "speed")[:k], free.wheel(2, "speed")[:k])   # same until the brake
    assert abs(braked.wheel(2, "speed")[-1]) < 0.5 * abs(free.wheel(2, "speed")[-1])
    for i in (1, 3):    # the other wheels only feel the body's reaction: within 10% of the run without
        np.testing.assert_allclose(braked.wheel(i, "speed")[-1], free.wheel(i, "speed")[-1], rtol=0.1)


# ----------------------------------------------------------------------------- the bundled example

def test_bundled_cube_gains_header_is_the_gains_commands_output(capsys):
    # the example's numbers come from `wheelbench gains scenarios/cube_corner.yaml --format c`;
    # everything but the first comment line (which names the source) must be that output
    assert main(["gains", str(EXAMPLE_DIR.parent / "cube_corner.yaml"), "--format", "c"]) == 0
    fresh = capsys.readouterr().out.splitlines()[1:]
    bundled = (EXAMPLE_DIR / "cube_gains.h").read_text().splitlines()[1:]
    assert bundled == fresh, "regenerate scenarios/firmware/cube_gains.h with `wheelbench gains ... --format c`"


def without_strategy(*paths: Path) -> list[dict]:
    """Each scenario file's mapping without its name, description and strategy (a demo that differs
    from another only in its law)."""
    raws = [yaml.safe_load(p.read_text()) for p in paths]
    for raw in raws:
        for key in ("name", "description", "strategy"):
            raw.pop(key)
    return raws


def twin_law_commands(path: Path, overrides: list[str], twin: str, *, supply_v: float | None = None):
    """The firmware of scenario `path` and its Python twin (`twin`: a strategy override) fed the same
    readings, tick by tick: those of the twin's trial with `overrides`. Returns (the readings at the
    ticks, one row per state in the design's order; the twin law; (the firmware's commands, the
    twin's), one row per tick, unclamped). `supply_v`: the readings' supply (default: none set)."""
    fw = load_scenario(path, overrides=overrides)
    lq = load_scenario(path, overrides=overrides + [twin])
    trace = run_trial(lq).trace
    rng = np.random.default_rng(0)
    firmware, python = (sc.strategy.build(Device3D.from_scenario(sc), rng=rng) for sc in (fw, lq))
    x_ticks = np.array([trace.m_tilt_x, trace.m_tilt_y, trace.m_rate_x, trace.m_rate_y, trace.m_rate_z,
                        trace.m_w1, trace.m_w2, trace.m_w3])[:, :trace.n:fw.control_steps]

    def commands(law) -> np.ndarray:
        reading, out = Reading(), np.empty((x_ticks.shape[1], 3))
        if supply_v is not None:
            reading.supply_v = supply_v
        for j, x in enumerate(x_ticks.T.tolist()):
            reading.angles_rad, reading.rates_rad_s, reading.wheel_speeds_rad_s = tuple(x[:2]), tuple(x[2:5]), tuple(x[5:])
            out[j] = law.command_vector(reading, 3)
        return out

    return x_ticks, python, (commands(firmware), commands(python))


def test_cube_scenario_is_the_corner_cube_but_for_its_strategy():
    # the firmware example simulates the same device and trial as scenarios/cube_corner.yaml
    cube, fw = without_strategy(EXAMPLE_DIR.parent / "cube_corner.yaml", CUBE)
    assert fw == cube


def test_cube_law_matches_python_lqr_tick_by_tick():
    # both laws fed the same readings, tick by tick (those of the Python trial). The firmware computes
    # in float32, Python in float64: a dot product of m terms in floating point is within
    # gamma_m = m u / (1 - m u) of sum |g_i| |z_i| (Higham, Accuracy and Stability of Numerical
    # Algorithms, 2nd ed., 2002, eq. 3.5), u = 2^-24 for binary32. Per tick m = 8 readings + 6 held
    # commands, plus three more roundings per term (the reading and the gain to float32, the sum
    # to a float): gamma_(m+3). The held commands carry earlier ticks' differences through the gains on
    # them (row sums rho < 1): the per-tick bound over 1 - rho (a geometric series).
    short = ["trial.duration=2 s", "trial.pushes=[{at: 1 s, impulse: [50 mN*m*s, 0, 0]}]"]
    x_ticks, python, (fw_v, py_v) = twin_law_commands(CUBE, short, LQR_TWIN)
    # the laws' volts clamped to the supply as the drive does (sim/run/trial3d.py)
    fw_v, py_v = np.clip(fw_v, -24.0, 24.0), np.clip(py_v, -24.0, 24.0)
    g = np.abs(python._G)                                     # the Python law's gains on [reading, held commands]
    n_x = 8
    z_max = np.concatenate([np.abs(x_ticks).max(axis=1), np.full(g.shape[1] - n_x, 24.0)])
    m = g.shape[1] + 3
    rho = g[:, n_x:].sum(axis=1).max()
    assert rho < 1
    bound = (m * F32 / (1 - m * F32)) * (g @ z_max).max() / (1 - rho)
    assert bound < 0.01                                       # small enough for the check to mean something
    diff = np.abs(fw_v - py_v).max()
    assert diff <= bound, (diff, bound)
    assert diff > 0                                           # the firmware really ran in float32


def test_cube_trial_matches_python_lqr_trial():
    # The whole trial (6 s, pushes about x and y) against the Python multi-wheel lqr's. Tolerances:
    # the laws differ by float32 rounding, under 1e-2 V a tick (test above), but the readings go
    # through the wheel encoders (2048 counts/rev: one count moved in a 2 ms period is 1.53 rad/s,
    # about 0.14 V through a wheel-speed gain of 0.09 V s/rad), so a state a hair off can read one
    # count apart and the traces part by more than the per-tick bound; no closed-form bound for
    # that. Measured when written: tilt within 2.4e-6 rad, wheel speeds within 0.10 rad/s. The
    # limits, 1e-4 rad (0.006 deg) and 2 rad/s (0.5% of the 400 rad/s peak), are 40x and 20x that:
    # a law that differed by a gain or a sign would miss them by far (test_a_flipped_wheel_falls).
    fw, lq = run_trial(load_scenario(CUBE)), run_trial(load_scenario(CUBE, overrides=[LQR_TWIN]))
    assert fw.outcome == lq.outcome == "balanced"
    a, b = fw.trace, lq.trace
    assert a.n == b.n == 6000
    for name in ("tilt_x", "tilt_y"):
        np.testing.assert_allclose(getattr(a, name)[:a.n], getattr(b, name)[:b.n], rtol=0, atol=1e-4, err_msg=name)
    for i in (1, 2, 3):
        np.testing.assert_allclose(a.wheel(i, "speed"), b.wheel(i, "speed"), rtol=0, atol=2.0, err_msg=f"wheel {i}")
    assert set(a.phases) <= {"fw 1", "fw 2"}                 # balance, or a command at the supply


@pytest.mark.parametrize("wheel", [1, 3])
def test_a_flipped_wheel_falls(wheel):
    # one motor wired the wrong way round: that wheel pushes the body further over
    sc = load_scenario(CUBE, overrides=[f"strategy.defines={{FLIP_WHEEL: {wheel}}}", "trial.duration=3 s",
                                        "trial.pushes=[]", "trial.stop_early=true"])
    result = run_trial(sc)
    assert result.outcome == "fell", result.outcome
    assert result.fell_at_s < 3.0


def test_the_example_holds_its_wheels_at_0_v_on_a_loop_rate_its_gains_were_not_made_for(tmp_path):
    # gains made for a 2 ms period (cube_gains.h) are wrong at 2.5 ms: the example says so in its log and
    # leaves the wheels at 0 V rather than run a law that was never designed for this loop (a firmware
    # differing from its model by a scale is what firmware-in-the-loop exists to catch)
    sc = load_scenario(CUBE, overrides=["sensors.rate=400 Hz", "world.step=0.5 ms", "trial.duration=0.3 s",
                                        "trial.pushes=[]"])
    log = tmp_path / "firmware.log"
    with firmware_log_to(log):
        result = run_trial(sc)
    assert "2500 us period: not the device of cube_gains.h" in log.read_text()
    for i in (1, 2, 3):
        assert not np.any(result.trace.wheel(i, "voltage"))


# ----------------------------------------------------------------------------- crashes are outcomes

CRASHING = """
#include "cube_gains.h"
#include <stdlib.h>
static wb_balance_state_t law;
static volatile int zero = 0;
void wb_init(const wb_config_t *cfg) { (void)cfg; wb_balance_reset(&law); }
void wb_step(const wb_input_t *in, wb_output_t *out) {
    double x[8] = {in->tilt_rad[0], in->tilt_rad[1], in->rates_rad_s[0], in->rates_rad_s[1],
                   in->rates_rad_s[2], in->wheels_speed_rad_s[0], in->wheels_speed_rad_s[1],
                   in->wheels_speed_rad_s[2]}, v[3];
    if (in->t_us >= 100000) {   /* tick 50 at 500 Hz */
#if KIND == 1
        *(volatile int *)0 = 1;
#elif KIND == 2
        abort();
#elif KIND == 3
        out->volts = 1000 / zero;
#elif KIND == 4
        for (;;) { }
#endif
    }
    wb_balance_volts(&law, x, v);
    for (int j = 0; j < 3; j++) out->wheels_volts[j] = (float)v[j];
}
"""


@linux_only
@pytest.mark.parametrize("kind, how", [(1, "SIGSEGV"), (2, "SIGABRT"), (3, "SIGFPE")])
def test_a_crash_is_strategy_failed_with_the_signal_and_the_tick(tmp_path, kind, how):
    sc = cube_scenario(tmp_path, CRASHING, defines={"KIND": kind}, trial={"duration": "0.3 s"})
    result = run_trial(sc)
    assert result.outcome == "strategy_failed"
    assert how in result.message and "at control tick 50 (t = 0.1000 s)" in result.message
    np.testing.assert_allclose(result.ended_at_s, 0.1, rtol=0, atol=1e-12)
    # the rows the child wrote before it died are this process's: the same as a trial that goes on
    same = run_trial(cube_scenario(tmp_path, CRASHING, defines={"KIND": 0}, trial={"duration": "0.3 s"}))
    assert result.trace.n == 101
    for name in ("tilt_x", "tilt_y", "rate_z", "w1_speed", "w3_speed", "m_tilt_y", "m_w2"):
        np.testing.assert_array_equal(getattr(result.trace, name)[:101], getattr(same.trace, name)[:101], err_msg=name)
    np.testing.assert_array_equal(result.trace.w2_voltage[:100], same.trace.w2_voltage[:100])
    assert result.trace.w2_voltage[100] == 0.0                 # nothing applied after the failure
    # the saturated ticks, counted again from the shared rows (the child's count died with it): the
    # ticks before the crash at which some wheel's command was at the 24 V supply
    at_supply = np.abs(np.array([same.trace.wheel(i, "voltage")[:100:2] for i in (1, 2, 3)])) >= 24.0
    assert result.saturated_ticks == int(at_supply.any(axis=0).sum()) > 0


@linux_only
def test_an_endless_loop_is_stopped_at_its_tick(tmp_path):
    sc = cube_scenario(tmp_path, CRASHING, defines={"KIND": 4}, trial={"duration": "0.3 s"})
    result = run_trial(sc, strategy_budget_s=1.0)
    assert result.outcome == "strategy_failed"
    assert "did not return" in result.message and "at control tick 50 (t = 0.1000 s)" in result.message


def _point(path: str) -> tuple[str, str | None]:
    result = run_trial(load_scenario(path))
    return result.outcome, result.message


@linux_only
def test_a_crash_does_not_end_a_run_of_several_trials(tmp_path):
    # two points, as a sweep runs them (sim.run.parallel.run_tasks, in this process): the first
    # crashes, the second still runs to its end
    paths = []
    for kind in (1, 0):
        folder = tmp_path / f"kind{kind}"
        folder.mkdir()
        paths.append(str(cube_scenario(folder, CRASHING, defines={"KIND": kind}, trial={"duration": "0.5 s"},
                                       write_only=True)))
    done = dict(run_tasks(_point, enumerate(paths), workers=1))
    assert done[0][0] == "strategy_failed" and "SIGSEGV" in done[0][1]
    assert done[1] == ("balanced", None)


# ----------------------------------------------------------------------------- isolation of 3D plug-ins

PLUGIN = '''
import ctypes, faulthandler
from sim.strategies import Reading, Strategy


class HoldsThenSegfaults(Strategy):
    """1 V on every wheel, then a read of address 0 at 0.1 s (SIGSEGV) when CRASH is set."""
    CRASH = {crash}

    def decide(self, reading: Reading):
        if self.CRASH and reading.t_s >= 0.1:
            faulthandler.disable()
            ctypes.string_at(0)
        self.ticks = getattr(self, "ticks", 0) + 1
        self.extra_metrics = {{"ticks": self.ticks}}
        return [1.0, -1.0, 0.5]
'''


def plugin_scenario(folder: Path, *, crash: bool):
    (folder / "law.py").write_text(PLUGIN.format(crash=crash))
    raw = yaml.safe_load(CUBE.read_text())
    raw["strategy"] = {"plugin": "law.py:HoldsThenSegfaults"}
    raw["trial"].update(duration="0.3 s", pushes=[])
    path = folder / "plugin.yaml"
    path.write_text(yaml.safe_dump(raw, sort_keys=False))
    return load_scenario(path)


@linux_only
def test_a_3d_plugin_runs_isolated_with_the_same_numbers(tmp_path):
    sc = plugin_scenario(tmp_path, crash=False)
    isolated, here = run_trial(sc), run_trial(sc, isolate=False)
    assert isinstance(isolated.strategy, isolation.StrategyRecord)     # it ran in the child
    assert not isinstance(here.strategy, isolation.StrategyRecord)
    assert isolated.strategy.extra_metrics == {"ticks": 150} == here.strategy.extra_metrics
    a, b = isolated.trace, here.trace
    assert a.n == b.n == 300
    for name in a.FLOAT_COLUMNS:
        np.testing.assert_array_equal(getattr(a, name)[:a.n], getattr(b, name)[:b.n], err_msg=name)


@linux_only
def test_a_3d_plugin_that_crashes_is_strategy_failed(tmp_path):
    result = run_trial(plugin_scenario(tmp_path, crash=True))
    assert result.outcome == "strategy_failed"
    assert "SIGSEGV" in result.message and "at control tick 50 (t = 0.1000 s)" in result.message
    assert result.trace.n == 101 and result.trace.w1_voltage[99] == 1.0 and result.trace.w1_voltage[100] == 0.0


@linux_only
def test_every_wheels_command_is_recorded_when_one_is_at_the_supply(tmp_path):
    # wheel 1 at the full 24 V supply: the other wheels' commands are still the trace's (they once
    # were left at 0 after the first wheel at the supply), and the tick counts once as saturated
    src = """
void wb_init(const wb_config_t *cfg) { (void)cfg; }
void wb_step(const wb_input_t *in, wb_output_t *out) {
    (void)in; out->wheels_volts[0] = 24.0f; out->wheels_volts[1] = 5.0f; out->wheels_volts[2] = -3.0f;
}
"""
    result = run_trial(cube_scenario(tmp_path, src, trial={"duration": "0.1 s"}))
    tr = result.trace
    for i, v in enumerate((24.0, 5.0, -3.0), start=1):
        np.testing.assert_array_equal(tr.wheel(i, "voltage"), v)
    assert result.saturated_ticks == result.control_ticks == 50


def test_a_one_wheel_hinge_device_gets_the_attitude_fields_too(tmp_path):
    # the desk example (planar path): tilt_rad[0] and rates_rad_s[0] mirror angle_rad and rate_rad_s,
    # the other entries are 0; a mismatch writes a non-finite volt, which ends the trial
    src = """
#include <math.h>
void wb_init(const wb_config_t *cfg) { (void)cfg; }
void wb_step(const wb_input_t *in, wb_output_t *out) {
    int same = in->tilt_rad[0] == in->angle_rad && in->rates_rad_s[0] == in->rate_rad_s
               && in->tilt_rad[1] == 0.0f && in->rates_rad_s[1] == 0.0f && in->rates_rad_s[2] == 0.0f
               && in->angle_rad != 0.0f;
    out->volts = same ? 0.0f : NAN;
}
"""
    (tmp_path / "fw.c").write_text(src)
    raw = yaml.safe_load((EXAMPLE_DIR / "desk_firmware.yaml").read_text())
    raw["drive"].pop("pwm")
    raw["strategy"] = {"kind": "firmware", "sources": ["fw.c"]}
    raw["trial"].update(duration="0.1 s", pushes=[])
    path = tmp_path / "desk.yaml"
    path.write_text(yaml.safe_dump(raw, sort_keys=False))
    result = run_trial(load_scenario(path), isolate=False)
    assert result.outcome != "strategy_failed", result.message
    assert result.control_ticks == 50
