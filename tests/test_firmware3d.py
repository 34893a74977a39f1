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
    """The bundled cube scenario with the firmware `source` (C text, in `folder`) as its strategy."""
    (folder / "fw.c").write_text(source)
    raw = yaml.safe_load(CUBE.read_text())
    raw["strategy"] = {"kind": "firmware", "sources": ["fw.c"], "include": [str(EXAMPLE_DIR)],
                       "defines": defines or {}}
    raw["trial"].update(trial or {})
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
    assert [n for n, _ in ffi.typeof("wb_input_t").fields][-2:] == ["tilt_rad", "rates_rad_s"]
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
