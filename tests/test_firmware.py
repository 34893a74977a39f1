"""Firmware in the loop (sim.strategies.firmware): C code compiled against wheelbench.h, run as a strategy.

The bundled example (scenarios/firmware/balance_q16.c) is checked against the Python `lqr` trial of
the same scenario; the other firmwares are written by the tests into a temporary folder. Builds go
to a cache folder of the test session (WHEELBENCH_FIRMWARE_CACHE, set in conftest.py), never the user's.
"""

from __future__ import annotations

import json
import math
import shutil
import sys
from pathlib import Path

import numpy as np
import pytest
import yaml

from sim.cli import main
from sim.core import isolation
from sim.model.device import Device
from sim.model.scenario_yaml import load_scenario
from sim.run.trial import run_trial
from sim.strategies.base import Reading
from sim.strategies.firmware import build as fw_build
from sim.strategies.lqr_design import design_lqr

pytestmark = pytest.mark.skipif(shutil.which("cc") is None and shutil.which("gcc") is None,
                                reason="needs a C compiler (.ci/run installs one)")

EXAMPLE_DIR = Path(__file__).resolve().parents[1] / "scenarios" / "firmware"
EXAMPLE = EXAMPLE_DIR / "desk_firmware.yaml"
LQR_TWIN = "strategy={kind: lqr, release_angle: 30 deg}"
linux_only = pytest.mark.skipif(not isolation.AVAILABLE or not sys.platform.startswith("linux"),
                                reason="isolated firmware trials need fork; the signals are Linux's")


def firmware_scenario(folder: Path, source: str, *, name: str = "fw.c", defines: dict | None = None,
                      trial: dict | None = None, write_only: bool = False, quiet: bool = False):
    """The example scenario, without its PWM (and with `quiet`, without angle noise), with the
    firmware `source` (C text) in `folder` as its strategy; the example's folder is on the include
    path (for desk_gains.h)."""
    (folder / name).write_text(source)
    raw = yaml.safe_load(EXAMPLE.read_text())
    raw["drive"].pop("pwm", None)          # the tests' firmwares write volts
    if quiet:                              # no angle noise: readings are whole encoder counts
        raw["sensors"]["angle"]["noise"] = "0 deg"
    raw["strategy"] = {"kind": "firmware", "sources": [name], "include": [str(EXAMPLE_DIR)],
                       "defines": defines or {}, "release_angle": "30 deg"}
    if trial:
        raw["trial"].update({"pushes": [], **trial} if "duration" in trial else trial)
    path = folder / "scenario.yaml"
    path.write_text(yaml.safe_dump(raw, sort_keys=False))
    return path if write_only else load_scenario(path)


# ----------------------------------------------------------------------------- the example firmware

def folded_gains(device) -> tuple[np.ndarray, np.ndarray]:
    """(g_x, g_u): K times the delay predictor, on the reading and on the held commands (oldest
    first), as the example's wb_init folds them: g_x = K Ad^n Phi_f, g_u = [K Ad^n Gam_f,
    K Ad^(n-1-i) Bd for i < n] (the predictor in the gains header's comment)."""
    from sim.strategies.lqr_design import DelayPredictor
    des = design_lqr(device)
    pred = DelayPredictor(des, delay_s=device.delay_s)
    K, n = des.K_discrete, pred.n
    power = np.linalg.matrix_power
    g_x = K @ power(pred.Ad, n) @ pred.Phi_f
    g_u = [K @ power(pred.Ad, n) @ pred.Gam_f] + [K @ power(pred.Ad, n - 1 - i) @ pred.Bd for i in range(n)]
    return np.asarray(g_x).ravel(), np.abs(np.asarray(g_u, dtype=float).ravel())


def fixed_point_bound_v(device, *, x_max: np.ndarray, u_max: float) -> float:
    """Largest difference, V, between the example firmware's command and the Python law's when both
    read the same whole-count readings, from the steps of the example's number formats (its
    comment gives them), term by term:
    - the angle taken to Q16 by a floor: 2^-16 rad times |g_x0|; its Q24 per-count scale rounded by
      at most 2^-25 rad per count, times the counts of the largest angle;
    - the body rate cut to Q16: 2^-16 rad/s times |g_x1| (float32 on the way: 2^-24 relative);
    - the wheel's Q16 per-count speed rounded by 2^-17 rad/s per count moved in a period;
    - every Q16 gain rounded by at most 2^-17 per unit of what it multiplies (x_max, u_max);
    - the command floored to Q16 (2^-16 V), or, with a PWM duty, cut to a whole duty step
      (supply / pwm_max), and the gains header's float32 gains (2^-24 relative);
    - the held commands, which carry the earlier ticks' differences through sum |g_u| < 1:
      the per-tick bound divided by (1 - sum |g_u|) (a geometric series).
    """
    g_x, g_u = folded_gains(device)
    res_a = 2 * math.pi / device.angle_counts_per_rev
    res_w = 2 * math.pi / device.wheel_counts_per_rev
    period = 1.0 / device.control_rate_hz
    per_tick = (2.0**-16 * abs(g_x[0]) + 2.0**-25 * (x_max[0] / res_a) * abs(g_x[0])
                + (2.0**-16 + 2.0**-24 * x_max[1]) * abs(g_x[1])
                + 2.0**-17 * (x_max[2] * period / res_w) * abs(g_x[2])
                + 2.0**-17 * (x_max.sum() + u_max * len(g_u))
                + (device.supply_v / device.pwm_max if device.pwm_max else 2.0**-16)
                + 2.0**-24 * (np.abs(g_x) @ x_max + g_u.sum() * u_max))
    assert g_u.sum() < 1
    return per_tick / (1 - g_u.sum())


def closed_loop_l1(device) -> np.ndarray:
    """Sum over time of |response| of (angle, body rate, wheel speed) to a 1 V command error at one
    tick, in the discrete closed loop Ad - Bd K (with the predictor the loop acts on the present
    state; Ad, Bd from the design's zero-order hold). Bounded command errors e_k, |e_k| <= e, move
    the state by at most l1 * e (the l1 norm of the impulse response bounds a convolution:
    Young's inequality; common practice, no source)."""
    des = design_lqr(device)
    a_cl = des.Ad - np.outer(des.Bd, des.K_discrete)
    total, x = np.zeros(3), des.Bd.ravel().copy()
    for _ in range(20_000):
        total += np.abs(x)
        x = a_cl @ x
    rho = max(abs(np.linalg.eigvals(a_cl)))
    assert np.abs(x).max() / (1 - rho) < 1e-6 * total.max()   # what is left of the sum is negligible
    return total


def readings_max(trace) -> np.ndarray:
    """Largest |reading| of a trial: angle rad, body rate rad/s, wheel speed rad/s."""
    return np.array([np.abs(c[:trace.n]).max() for c in (trace.meas_angle, trace.meas_rate, trace.meas_wheel)])


def example_without_pwm(folder: Path) -> Path:
    """The example scenario without drive.pwm (the firmware then writes volts), in `folder`."""
    raw = yaml.safe_load(EXAMPLE.read_text())
    del raw["drive"]["pwm"]
    raw["strategy"].update(sources=[str(EXAMPLE_DIR / s) for s in raw["strategy"]["sources"]],
                           include=[str(EXAMPLE_DIR)])
    path = folder / "example_volts.yaml"
    path.write_text(yaml.safe_dump(raw, sort_keys=False))
    return path


@pytest.mark.parametrize("drive", ["pwm", "volts"])
def test_example_law_matches_python_lqr_tick_by_tick(tmp_path, drive):
    # both laws fed the same readings, tick by tick: those of the Python trial of the example
    # without angle noise (whole encoder counts; the gyro's noise and bias stay); the firmware
    # writing its 12-bit duty, or, without drive.pwm, volts
    quiet = ["sensors.angle.noise=0 deg"]
    path = EXAMPLE if drive == "pwm" else example_without_pwm(tmp_path)
    fw = load_scenario(path, overrides=quiet)
    lq = load_scenario(path, overrides=quiet + [LQR_TWIN])
    trace = run_trial(lq).trace
    device = Device.from_scenario(fw)
    rng = np.random.default_rng(0)
    laws = fw.strategy.build(device, rng=rng), lq.strategy.build(device, rng=rng)
    reading, volts = Reading(), []
    for k in range(0, trace.n, fw.control_steps):
        reading.t_s = k * fw.world.step
        reading.angle_rad, reading.rate_rad_s = float(trace.meas_angle[k]), float(trace.meas_rate[k])
        reading.wheel_speed_rad_s = float(trace.meas_wheel[k])
        # what the drive applies: each law's command clamped to the supply (sim/run/trial.py)
        volts.append([min(max(law.command(reading), -fw.drive.supply), fw.drive.supply) for law in laws])
    volts = np.array(volts)
    bound = fixed_point_bound_v(device, x_max=readings_max(trace), u_max=device.supply_v)
    assert bound < 0.01          # fine enough formats for the check to mean something
    np.testing.assert_allclose(volts[:, 0], volts[:, 1], rtol=0, atol=bound)


def test_example_trial_matches_python_lqr_trial():
    fw = load_scenario(EXAMPLE)
    lq = load_scenario(EXAMPLE, overrides=[LQR_TWIN])
    a, b = run_trial(fw), run_trial(lq)
    assert a.outcome == b.outcome == "balanced", (a.message, b.message)
    n = min(a.trace.n, b.trace.n)
    device = Device.from_scenario(fw)
    # per tick, the firmware's command differs from the Python law's by the fixed-point bound plus
    # the noisy angle reading rounded to whole counts: half a count times |g_x0|
    g_x, _ = folded_gains(device)
    per_tick = (fixed_point_bound_v(device, x_max=1.5 * readings_max(b.trace), u_max=device.supply_v)
                + math.pi / device.angle_counts_per_rev * abs(g_x[0]))
    # through the linear closed loop (a 3 degree start and a tap keep both trials near upright;
    # the drive clamps both alike, which only shrinks a difference): angle rad, wheel speed rad/s
    tol = closed_loop_l1(device) * per_tick
    np.testing.assert_allclose(a.trace.angle[:n], b.trace.angle[:n], rtol=0, atol=tol[0])
    np.testing.assert_allclose(a.trace.wheel_speed[:n], b.trace.wheel_speed[:n], rtol=0, atol=tol[2])
    # the phase the firmware reports is the trace's mode: 1 balancing, 2 clamped at the supply
    assert set(a.trace.phases) == {"fw 1", "fw 2"}


def test_bundled_gains_header_is_the_gains_commands_output(capsys):
    # the example's numbers come from `wheelbench gains --format c` for the bundled desk pendulum;
    # everything but the first comment line (which names the source) must be that output
    assert main(["gains", "--format", "c"]) == 0
    fresh = capsys.readouterr().out.splitlines()[1:]
    bundled = (EXAMPLE_DIR / "desk_gains.h").read_text().splitlines()[1:]
    assert bundled == fresh, "regenerate scenarios/firmware/desk_gains.h with `wheelbench gains --format c`"


def test_wrong_sign_falls():
    sc = load_scenario(EXAMPLE, overrides=["strategy.defines={BAL_SIGN: -1}"])
    result = run_trial(sc)
    assert result.outcome == "fell"
    assert result.fell_at_s is not None and result.fell_at_s < 1.0


# ----------------------------------------------------------------------------- an int16 accumulator

ACCUMULATOR = """
#include "desk_gains.h"
/* plain LQR on the readings, terms in millivolts summed in an ACC_T accumulator */
void wb_init(const wb_config_t *cfg) { (void)cfg; }
void wb_step(const wb_input_t *in, wb_output_t *out) {
    int32_t t0 = (int32_t)(-WB_K_DISCRETE[0] * in->angle_rad * 1000.0f);
    int32_t t1 = (int32_t)(-WB_K_DISCRETE[1] * in->rate_rad_s * 1000.0f);
    int32_t t2 = (int32_t)(-WB_K_DISCRETE[2] * in->wheel_speed_rad_s * 1000.0f);
    ACC_T acc = 0;
    acc += t0; acc += t1; acc += t2;
    out->volts = acc / 1000.0f;
}
"""


def test_int16_accumulator_overflows_on_a_hard_push(tmp_path):
    # A push of 11 mN m s on J = 6.6e-3 kg m^2 jumps the body rate by ~1.7 rad/s: the rate term alone,
    # 27.75 V s/rad times that, is ~46,000 mV, past int16's 32,767. GCC converts an out-of-range
    # value to a signed type modulo 2^16 (GCC manual, "Integers" implementation-defined behaviour;
    # from memory), so the sum wraps to the opposite sign where the int32 law saturates.
    push = {"start": {"angle": "1 deg"}, "pushes": [{"at": "1.5 s", "impulse": "11 mN*m*s"}]}
    wide = run_trial(firmware_scenario(tmp_path, ACCUMULATOR, defines={"ACC_T": "int32_t"}, trial=push))
    narrow = run_trial(firmware_scenario(tmp_path, ACCUMULATOR, defines={"ACC_T": "int16_t"}, trial=push))
    calm = run_trial(firmware_scenario(tmp_path, ACCUMULATOR, defines={"ACC_T": "int16_t"},
                                       trial={**push, "pushes": []}))
    assert wide.outcome == "balanced" and calm.outcome == "balanced"
    assert narrow.outcome == "fell"
    # the first control tick that sees the push: applied during step 1500, so in row 1501 of the
    # state; the tick at step 1504 reads row 1502 (2 ms delay); the tick at 1502 reads row 1500
    k = 1504
    np.testing.assert_array_equal(wide.trace.voltage[:k], narrow.trace.voltage[:k])   # same until then
    assert wide.trace.voltage[k] == 12.0 and narrow.trace.voltage[k] < 0
    # the wrapped value itself, from the readings the firmware got (float32 as in the C code)
    f32 = np.float32
    K = np.array([-243.811147, -27.7540863, -0.098144929], dtype=f32)   # WB_K_DISCRETE in desk_gains.h
    meas = [f32(narrow.trace.meas_angle[k]), f32(narrow.trace.meas_rate[k]), f32(narrow.trace.meas_wheel[k])]
    terms = [int(np.trunc(-K[i] * meas[i] * f32(1000.0))) for i in range(3)]
    wrapped = (sum(terms) + 2**15) % 2**16 - 2**15
    assert sum(terms) > 2**15
    np.testing.assert_allclose(narrow.trace.voltage[k], max(-12.0, wrapped / 1000.0), rtol=0, atol=2e-3)


# ----------------------------------------------------------------------------- failures are outcomes

CRASHING = """
#include <stdio.h>
#include <stdlib.h>
static volatile int zero = 0;
void wb_init(const wb_config_t *cfg) { (void)cfg; printf("crash test firmware up\\n"); }
void wb_step(const wb_input_t *in, wb_output_t *out) {
    if (in->t_us < 100000u) return;          /* 0 V until 0.1 s, then the failure */
#if KIND == 1
    *(volatile int *)0 = 1;
#elif KIND == 2
    abort();
#elif KIND == 3
    out->duty = 1000 / zero;
#elif KIND == 4
    for (;;) { }
#endif
}
"""


@linux_only
@pytest.mark.parametrize("kind, how", [(1, "SIGSEGV"), (2, "SIGABRT"), (3, "SIGFPE")])
def test_crash_is_strategy_failed_with_the_signal_and_the_tick(tmp_path, kind, how):
    result = run_trial(firmware_scenario(tmp_path, CRASHING, defines={"KIND": kind}))
    assert result.outcome == "strategy_failed"
    assert how in result.message and "at control tick 50 (t = 0.1000 s)" in result.message   # tick 50 at 500 Hz
    np.testing.assert_allclose(result.ended_at_s, 0.1, rtol=0, atol=1e-12)


@linux_only
def test_endless_loop_is_stopped_at_its_tick(tmp_path):
    result = run_trial(firmware_scenario(tmp_path, CRASHING, defines={"KIND": 4}), strategy_budget_s=1.0)
    assert result.outcome == "strategy_failed"
    assert "did not return" in result.message and "at control tick 50 (t = 0.1000 s)" in result.message


@linux_only
def test_a_crash_does_not_end_a_sweep(tmp_path, capsys):
    path = firmware_scenario(tmp_path, CRASHING, defines={"KIND": 1}, write_only=True,
                             trial={"duration": "0.3 s"})
    out = tmp_path / "sweep"
    # KIND 0 holds 0 V (falls or not: not a failure of the firmware); KIND 1 crashes at 0.1 s
    code = main(["sweep", str(path), "--vary", "strategy.defines.KIND=1,0", "--out", str(out), "--workers", "1"])
    assert code == 0
    lines = [json.loads(line) for line in (out / "sweep.jsonl").read_text().splitlines() if line.strip()]
    rows = {r["row"]["strategy.defines.KIND"]: r["row"] for r in lines if "row" in r}
    assert sorted(rows) == [0, 1]
    assert rows[1]["outcome"] == "strategy_failed" and "SIGSEGV" in json.dumps(rows[1])
    assert rows[0]["outcome"] != "strategy_failed"


def test_compile_error_is_bad_input_with_the_compilers_message(tmp_path, capsys):
    path = firmware_scenario(tmp_path, "void wb_init(const wb_config_t *c) { (void)c; }\n"
                             "void wb_step(const wb_input_t *in, wb_output_t *out) { out->volts = 1 + ; }\n",
                             write_only=True)
    out = tmp_path / "run"
    assert main(["run", str(path), "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert "strategy.sources" in err and "fw.c:2:" in err and "error" in err
    assert not out.exists()        # nothing simulated, nothing written
    assert main(["validate", str(path)]) == 2


def test_definitions_are_checked_against_the_header(tmp_path, capsys):
    path = firmware_scenario(tmp_path, "void wb_init(const wb_config_t *c) { (void)c; }\n"
                             "void wb_step(const wb_input_t *in, float *volts) { *volts = in->angle_rad; }\n",
                             write_only=True)
    assert main(["validate", str(path)]) == 2
    assert "wb_step" in capsys.readouterr().err


# ----------------------------------------------------------------------------- state, log, cache

COUNTER = """
#include <stdio.h>
static int calls = 0;     /* must start at 0 in every trial */
void wb_init(const wb_config_t *cfg) { (void)cfg; }
void wb_step(const wb_input_t *in, wb_output_t *out) {
    calls++;
    out->phase = calls < 200 ? (uint8_t)calls : 200;
    if (calls == 1)
        printf("first tick at %lu us, angle counts %ld\\n", (unsigned long)in->t_us, (long)in->angle_counts);
}
"""


@pytest.mark.parametrize("isolate", [False, True])
def test_static_variables_are_fresh_in_every_trial(tmp_path, isolate):
    sc = firmware_scenario(tmp_path, COUNTER, trial={"duration": "0.1 s"})
    for _ in range(2):
        result = run_trial(sc, isolate=isolate)
        assert result.trace.phases[int(result.trace.mode[0])] == "fw 1"
        assert result.trace.phases[int(result.trace.mode[2 * 49])] == "fw 50"


@linux_only
def test_an_isolated_trial_loads_the_build_itself_and_later_loads_in_a_process_copy_it(tmp_path):
    # a process's first load of a build is its file (nothing of it mapped yet: fresh statics); the
    # isolation child is forked from a process that has not loaded it, so it needs no copy. Loads
    # after the first in one process are copies (a second load of one file gives the same statics)
    sc = firmware_scenario(tmp_path, COUNTER, defines={"UNIQUE": tmp_path.name}, trial={"duration": "0.1 s"})
    build = str(sc.strategy.params.build.path)
    seen = []
    for isolate in (True, True, False, False, True):
        result = run_trial(sc, isolate=isolate)
        assert result.trace.phases[int(result.trace.mode[2 * 49])] == "fw 50"     # statics fresh each time
        seen.append(result.strategy.loaded_from)
    assert seen[:3] == [build] * 3
    assert seen[3] != build and seen[4] != build and seen[3] != seen[4]


@linux_only
def test_run_writes_the_firmwares_printf_to_firmware_log(tmp_path):
    path = firmware_scenario(tmp_path, COUNTER, trial={"duration": "0.1 s", "start": {"angle": "3 deg"}},
                             write_only=True, quiet=True)
    out = tmp_path / "run"
    assert main(["run", str(path), "--out", str(out)]) == 0
    # 3 deg with 4096 counts per rev, floored by the encoder: 34 counts (common practice, no source)
    assert (out / "firmware.log").read_text() == f"first tick at 0 us, angle counts {math.floor(3 / 360 * 4096)}\n"
    # a second run into the same folder: the log holds that run's output, as trace.csv does (not both runs')
    assert main(["run", str(path), "--out", str(out)]) == 0
    assert (out / "firmware.log").read_text() == f"first tick at 0 us, angle counts {math.floor(3 / 360 * 4096)}\n"


def test_second_build_reuses_the_cache_and_a_changed_define_rebuilds(tmp_path, monkeypatch):
    cache = tmp_path / "cache"
    monkeypatch.setenv(fw_build.CACHE_ENV, str(cache))
    first = firmware_scenario(tmp_path, COUNTER, defines={"GAIN": 1})
    entries = sorted(p.name for p in cache.iterdir())
    stamp = {p: p.stat().st_mtime_ns for p in cache.rglob("*")}
    again = firmware_scenario(tmp_path, COUNTER, defines={"GAIN": 1})
    assert first.strategy.params.build.compiled_now and not again.strategy.params.build.compiled_now
    assert sorted(p.name for p in cache.iterdir()) == entries
    assert {p: p.stat().st_mtime_ns for p in cache.rglob("*")} == stamp
    changed = firmware_scenario(tmp_path, COUNTER, defines={"GAIN": 2})
    assert changed.strategy.params.build.compiled_now
    assert len(list(cache.iterdir())) == len(entries) + 1
    (tmp_path / "fw.c").write_text(COUNTER + "/* an edit */\n")
    assert load_scenario(tmp_path / "scenario.yaml").strategy.params.build.compiled_now


def test_builds_from_a_folder_named_like_the_builds_own_files(tmp_path, monkeypatch):
    # setuptools writes each object at its tmpdir plus the source's absolute path; a source under
    # /check once collided with the check step's linked `check` in the same folder (a CI checkout
    # at /check/... failed to build). Needs a writable root folder, else skipped.
    import os
    import tempfile
    root = Path("/check")
    made = not root.exists()
    try:
        root.mkdir(exist_ok=True)
        folder = Path(tempfile.mkdtemp(dir=root))
    except OSError:
        pytest.skip("cannot write a folder at /check here")
    try:
        monkeypatch.setenv(fw_build.CACHE_ENV, str(tmp_path / "cache"))
        assert firmware_scenario(folder, COUNTER).strategy.params.build.compiled_now
    finally:
        shutil.rmtree(folder, ignore_errors=True)
        if made:
            os.rmdir(root)


def test_a_changed_header_beside_the_source_rebuilds(tmp_path, monkeypatch):
    # local.h is found beside fw.c (not in an include folder): the compiler's list of what it read
    # decides whether the build is still good
    monkeypatch.setenv(fw_build.CACHE_ENV, str(tmp_path / "cache"))
    (tmp_path / "local.h").write_text("#define LEVEL 1\n")
    source = '#include "local.h"\n' + COUNTER
    first = firmware_scenario(tmp_path, source).strategy.params.build
    assert first.compiled_now
    assert not load_scenario(tmp_path / "scenario.yaml").strategy.params.build.compiled_now
    (tmp_path / "local.h").write_text("#define LEVEL 2\n")
    second = load_scenario(tmp_path / "scenario.yaml").strategy.params.build
    assert second.compiled_now and second.key == first.key and second.path != first.path
    (tmp_path / "local.h").write_text("#define LEVEL 1\n")       # back: the first build fits again
    third = load_scenario(tmp_path / "scenario.yaml").strategy.params.build
    assert not third.compiled_now and third.path == first.path


def test_header_declares_the_contract_exactly():
    # checks outside this repository compile against these names: the cdef cffi reads must keep them
    text = fw_build.contract_cdef()
    for decl in ("uint32_t period_us;", "float supply_v;", "int32_t angle_counts_per_rev, wheel_counts_per_rev;",
                 "int32_t pwm_max;", "} wb_config_t;", "uint32_t t_us;",
                 "float angle_rad, rate_rad_s, wheel_speed_rad_s;", "int32_t angle_counts, wheel_counts;",
                 "int16_t gyro_raw[3], accel_raw[3];", "} wb_input_t;", "float volts;", "int32_t duty;",
                 "uint8_t brake;", "uint8_t phase;", "} wb_output_t;",
                 "void wb_init(const wb_config_t *cfg);", "void wb_step(const wb_input_t *in, wb_output_t *out);"):
        assert decl in text, decl


# ----------------------------------------------------------------------------- bad input, every command

COMMANDS = {
    "validate": lambda f, out: ["validate", str(f)],
    "run": lambda f, out: ["run", str(f), "--out", str(out)],
    "check": lambda f, out: ["check", str(f), "--out", str(out), "--trials", "1", "--workers", "1"],
    "sweep": lambda f, out: ["sweep", str(f), "--vary", "drive.supply=10..12:2", "--out", str(out), "--workers", "1"],
    "catch-map": lambda f, out: ["catch-map", str(f), "--grid", "2", "--out", str(out), "--workers", "1"],
}
BROKEN = {
    # id: (strategy keys beside kind: firmware, fragments the one line must hold)
    "compile_error": ({"sources": ["fw.c"]}, ["strategy.sources", "fw.c:1:", "error"]),
    "missing_source": ({"sources": ["no_such.c"]}, ["strategy.sources[0]", "no such file"]),
    "missing_include": ({"sources": ["fw.c"], "include": ["no_such_dir"]}, ["strategy.include[0]", "no such folder"]),
    "bad_define_name": ({"sources": ["fw.c"], "defines": {"2X": 1}}, ["strategy.defines.2X", "C identifier"]),
    "cflags_not_a_list": ({"sources": ["fw.c"], "cflags": "-O2"}, ["strategy.cflags"]),
    "unknown_key": ({"sources": ["fw.c"], "define": {"X": 1}}, ["strategy.define", "did you mean 'defines'"]),
}


@pytest.mark.parametrize("command", sorted(COMMANDS))
@pytest.mark.parametrize("case", sorted(BROKEN))
def test_broken_firmware_is_one_line_and_exit_2(tmp_path, capsys, command, case):
    keys, fragments = BROKEN[case]
    path = firmware_scenario(tmp_path, "void wb_init(const wb_config_t *c) { (void)c } /* no ; */\n", write_only=True)
    raw = yaml.safe_load(path.read_text())
    raw["strategy"] = {"kind": "firmware", **keys}
    path.write_text(yaml.safe_dump(raw, sort_keys=False))
    out = tmp_path / "out"
    code = main(COMMANDS[command](path, out))
    err = [line for line in capsys.readouterr().err.splitlines() if line.strip()]
    assert code == 2 and len(err) == 1 and err[0].startswith(f"wheelbench: {path}: "), err
    for fragment in fragments:
        assert fragment in err[0], (fragment, err[0])
    assert not out.exists()


PRINTS_COUNTS = """
#include <stdio.h>
void wb_init(const wb_config_t *cfg) {
    printf("cfg %lu %ld %ld %ld\\n", (unsigned long)cfg->period_us, (long)cfg->angle_counts_per_rev,
           (long)cfg->wheel_counts_per_rev, (long)cfg->pwm_max);
}
void wb_step(const wb_input_t *in, wb_output_t *out) {
    (void)out;
    printf("%lu %ld %ld\\n", (unsigned long)in->t_us, (long)in->angle_counts, (long)in->wheel_counts);
}
"""


@pytest.mark.parametrize("start", [{"angle": "-3 deg", "wheel_speed": "100 rad/s"},
                                   {"angle": "175 deg", "rate": "3 rad/s", "wheel_speed": "100 rad/s"}],
                         ids=["near upright", "through hanging"])
def test_inputs_are_the_encoders_counts_and_the_tick_time(tmp_path, capfd, start):
    # no angle noise; run in this process, so printf reaches capfd. Through hanging, the angle
    # reading wraps from +pi to -pi while the counts go on (the trace's angle is not wrapped)
    sc = firmware_scenario(tmp_path, PRINTS_COUNTS, quiet=True, trial={"duration": "0.1 s", "start": start})
    capfd.readouterr()
    result = run_trial(sc, isolate=False)
    lines = [line for line in capfd.readouterr().out.splitlines() if line.strip()]
    assert lines[0] == "cfg 2000 4096 2048 0"
    got = np.array([[int(v) for v in line.split()] for line in lines[1:]])
    tr, dt, cs = result.trace, sc.world.step, sc.control_steps
    delay = round(sc.sensors.delay / dt)
    rows = np.maximum(np.arange(0, tr.n, cs) - delay, 0)          # the rows each tick reads
    # encoders report whole counts: floor(angle / (2 pi / counts per rev)) (common practice, no source)
    angle_counts = np.floor(tr.angle[rows] / (2 * np.pi / 4096)).astype(int)
    wheel_counts = np.floor(tr.wheel_angle[rows] / (2 * np.pi / 2048)).astype(int)
    np.testing.assert_array_equal(got[:, 0], np.arange(len(rows)) * 2000)        # t_us
    np.testing.assert_array_equal(got[:, 1], angle_counts)
    assert angle_counts[0] == math.floor(float(start["angle"].split()[0]) / 360 * 4096)
    if start["angle"] == "175 deg":
        assert tr.angle[rows].max() > np.pi + 0.05       # the body did pass hanging
    np.testing.assert_array_equal(np.diff(got[:, 2]), np.diff(wheel_counts))     # counts moved per tick
    # the wheel turns forwards all along (the first two ticks read the start: 2 ms delay)
    assert np.all(np.diff(got[1:, 2]) > 0)


# ----------------------------------------------------------------------------- several wheels, one today

ARRAY_FORM = """
#include <math.h>
#include "desk_gains.h"
/* LQR on the readings (the wheel speed the mean of the reading and the counts' difference), volts
   or a duty out. FORM 0 reads and writes the one-wheel fields; FORM 1 the per-wheel arrays' entry 0;
   FORM 2 reads the arrays and writes both forms, the one-wheel field wrong (the array's entry
   wins for wheel 1). Phase 1 while the arrays hold what wheelbench.h says, 9 if not. */
static int32_t pwm_max, cpr, prev, ok;
static float supply, period_s;
void wb_init(const wb_config_t *cfg) {
    pwm_max = cfg->pwm_max; supply = cfg->supply_v; period_s = cfg->period_us * 1e-6f;
#if FORM
    cpr = cfg->wheels_counts_per_rev[0];
    ok = cfg->n_wheels == 1 && cfg->wheels_counts_per_rev[1] == 0 && cfg->wheels_counts_per_rev[2] == 0;
#else
    cpr = cfg->wheel_counts_per_rev;
    ok = 1;
#endif
}
void wb_step(const wb_input_t *in, wb_output_t *out) {
#if FORM
    float w = in->wheels_speed_rad_s[0];
    int32_t c = in->wheels_counts[0];
    ok = ok && in->wheels_speed_rad_s[1] == 0.0f && in->wheels_speed_rad_s[2] == 0.0f
            && in->wheels_counts[1] == 0 && in->wheels_counts[2] == 0;
#else
    float w = in->wheel_speed_rad_s;
    int32_t c = in->wheel_counts;
#endif
    float from_counts = (float)(c - prev) * 6.2831853f / (float)cpr / period_s;
    prev = c;
    float v = -(WB_K_DISCRETE[0] * in->angle_rad + WB_K_DISCRETE[1] * in->rate_rad_s
                + WB_K_DISCRETE[2] * 0.5f * (w + from_counts));
    int32_t duty = (int32_t)(v / supply * (float)pwm_max);
#if FORM == 0
    out->volts = v; out->duty = duty;
#else
    out->wheels_volts[0] = v; out->wheels_duty[0] = duty;
#endif
#if FORM == 2
    out->volts = -v; out->duty = -duty;
#endif
    out->phase = ok ? 1 : 9;
}
"""


@pytest.mark.parametrize("drive", ["volts", "pwm"])
def test_a_firmware_reading_the_arrays_runs_the_same_trial_as_one_reading_the_scalars(tmp_path, drive):
    # wheelbench.h: with one wheel, entry 0 of each per-wheel array is the one-wheel field, the
    # others 0, n_wheels 1; wheel 1 follows the array's entry when the firmware set it
    raw = yaml.safe_load(EXAMPLE.read_text())
    if drive == "volts":
        del raw["drive"]["pwm"]
    (tmp_path / "form.c").write_text(ARRAY_FORM)
    raw["trial"]["duration"] = "1 s"
    raw["trial"]["pushes"] = [{"at": "0.5 s", "impulse": "8 mN*m*s"}]
    traces = []
    for form in (0, 1, 2):
        raw["strategy"] = {"kind": "firmware", "sources": ["form.c"], "include": [str(EXAMPLE_DIR)],
                           "defines": {"FORM": form}, "release_angle": "30 deg"}
        path = tmp_path / f"form{form}.yaml"
        path.write_text(yaml.safe_dump(raw, sort_keys=False))
        result = run_trial(load_scenario(path))
        assert result.outcome == "balanced", (form, result.message)
        assert set(result.trace.phases) == {"fw 1"}, (form, result.trace.phases)
        traces.append(result.trace)
    assert np.abs(traces[0].voltage[:traces[0].n]).max() > 1.0          # the law did drive the wheel
    for other in traces[1:]:
        assert other.n == traces[0].n
        for column in ("angle", "rate", "wheel_speed", "voltage", "current", "mode"):
            np.testing.assert_array_equal(getattr(other, column)[:other.n], getattr(traces[0], column)[:other.n],
                                          err_msg=column)


def test_header_appends_the_per_wheel_arrays_after_the_one_wheel_fields():
    # the one-wheel fields keep their places: code and checks written against them still fit; what
    # came later (the wheels' arrays, then the IMU's LSBs, then the 3D attitude, then the bus) is appended, in that order
    import cffi
    ffi = cffi.FFI()
    ffi.cdef(fw_build.contract_cdef())
    expected = {
        "wb_config_t": (["period_us", "supply_v", "angle_counts_per_rev", "wheel_counts_per_rev", "pwm_max"],
                        ["n_wheels", "wheels_counts_per_rev", "gyro_rad_s_per_lsb", "accel_m_s2_per_lsb", "mount"]),
        "wb_input_t": (["t_us", "angle_rad", "rate_rad_s", "wheel_speed_rad_s", "angle_counts", "wheel_counts",
                        "gyro_raw", "accel_raw"], ["wheels_speed_rad_s", "wheels_counts", "tilt_rad", "rates_rad_s", "bus_v"]),
        "wb_output_t": (["volts", "duty", "brake", "phase"], ["wheels_volts", "wheels_duty", "wheels_brake"]),
    }
    for struct, (first, appended) in expected.items():
        fields = ffi.typeof(struct).fields
        assert [name for name, _ in fields] == first + appended
        for name, field in fields:
            if name.startswith("wheels_"):
                assert field.type.length == 3   # WB_MAX_WHEELS
    assert "#define WB_MAX_WHEELS 3" in fw_build.contract_cdef()


def test_example_trial_is_unchanged_by_the_per_wheel_arrays():
    # sha256 over the example firmware trial's columns, computed with the code before the arrays were
    # added (the one-wheel header and wrapper): the scalars a one-wheel firmware reads and writes,
    # and so its trial, must not move
    import hashlib
    result = run_trial(load_scenario(EXAMPLE))
    tr, digest = result.trace, hashlib.sha256()
    for name in ("angle", "rate", "wheel_angle", "wheel_speed", "voltage", "current", "torque", "mode",
                 "meas_angle", "meas_rate", "meas_wheel"):
        digest.update(getattr(tr, name)[:tr.n].tobytes())
    assert (result.outcome, tr.n) == ("balanced", 3000)
    assert digest.hexdigest() == "8223b356169c119454b53d943e45da7d4554602797dc230acf88989b56a30ee1"


# ----------------------------------------------------------------------------- IMU words and duty on a sagging bus

IMU_PROBE = """
static float lsb_g, lsb_a;
void wb_init(const wb_config_t *cfg) { lsb_g = cfg->gyro_rad_s_per_lsb; lsb_a = cfg->accel_m_s2_per_lsb; }
void wb_step(const wb_input_t *in, wb_output_t *out) {
    /* probe: the gyro's x word and the accelerometer's z word, back in SI, as volts and duty */
    out->volts = (float)in->gyro_raw[0] * lsb_g + 0.001f * (float)in->accel_raw[2] * lsb_a;
}
"""


def test_firmware_reads_the_imus_raw_words(tmp_path):
    # gyro_raw / accel_raw are the IMU's readings (the trace's imu_* columns) over one LSB, rounded
    # (a 16-bit MEMS word; common practice, no source); the LSBs reach wb_config_t
    path = firmware_scenario(tmp_path, IMU_PROBE, trial={"duration": "0.3 s", "start": {"angle": "2 deg", "rate": 1.0}},
                             write_only=True)
    raw = yaml.safe_load(path.read_text())
    raw["sensors"]["imu"] = {"at": [0.0, 0.0, 0.1], "gyro": {"resolution": "0.01 deg/s"},
                             "accel": {"range": "8 g0"}}   # pint: g0 is standard gravity, g a gram
    path.write_text(yaml.safe_dump(raw, sort_keys=False))
    result = run_trial(load_scenario(path))
    tr, cs = result.trace, result.scenario.control_steps
    lsb_g, lsb_a = math.radians(0.01), 8 * 9.80665 / 32768
    rows = np.arange(0, tr.n, cs)
    gyro, accel = tr.extra["imu_gyro_x_rad_s"][rows], tr.extra["imu_accel_z_m_s2"][rows]
    expected = np.round(gyro / lsb_g) * lsb_g + 0.001 * np.round(accel / lsb_a) * lsb_a
    assert np.ptp(gyro) > 100 * lsb_g                     # the probe saw the body move
    assert np.max(np.abs(tr.voltage[rows] - expected)) < 1e-6   # float32 on the way


DUTY_HALF = """
static int32_t full;
void wb_init(const wb_config_t *cfg) { full = cfg->pwm_max; }
void wb_step(const wb_input_t *in, wb_output_t *out) { (void)in; out->duty = full / 2 + 1; }
"""


def test_a_duty_acts_on_the_sagging_bus_of_a_battery(tmp_path):
    # an H-bridge's mean output is duty times the bus (references.md, power and drive): with a pack
    # that sags under the load, a fixed duty gives duty x the sagged bus, not x the nominal supply
    path = firmware_scenario(tmp_path, DUTY_HALF, trial={"duration": "0.4 s"}, write_only=True)
    raw = yaml.safe_load(path.read_text())
    raw["body"]["locked"] = True
    raw["drive"] = {"pwm": {"resolution_bits": 8}}
    raw["battery"] = {"cells": 3, "chemistry": "lipo", "capacity": "300 mAh", "internal_resistance": "1 ohm",
                      "state_of_charge": 0.8}
    path.write_text(yaml.safe_dump(raw, sort_keys=False))
    result = run_trial(load_scenario(path))
    tr = result.trace
    bus, applied = tr.extra["supply_voltage_v"][:tr.n], tr.voltage[:tr.n]
    share = 128 / 255
    assert bus[0] - bus.min() > 0.2                       # the pack sagged under the load
    assert np.max(np.abs(applied[1:] - share * bus[1:])) < 0.02 * bus.max()
