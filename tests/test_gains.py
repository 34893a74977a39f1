"""`wheelbench gains`: the exported numbers are the design's, consistent and in stated units."""

from __future__ import annotations

import json
import re
import shutil
import subprocess

import control
import numpy as np
import pytest
from numpy.testing import assert_allclose

from sim.cli import main
from sim.model.device import Device
from sim.model.scenario_yaml import load_scenario
from sim.strategies.lqr_design import design_lqr
from conftest import scenario_dict, write_scenario


def _gains(capsys, *args):
    capsys.readouterr()
    code = main(["gains", *args])
    out, err = capsys.readouterr()
    return code, out, err


def test_json_gains_are_the_lqr_design_and_python_control_agrees(tmp_path, capsys):
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(strategy={"kind": "lqr"}, sensors={"rate": 250}))
    code, out, err = _gains(capsys, str(path))
    assert code == 0 and err == ""
    rep = json.loads(out)
    assert [s["name"] for s in rep["state"]] == ["angle", "body_rate", "wheel_speed"]
    assert [s["unit"] for s in rep["state"]] == ["rad", "rad/s", "rad/s"]
    assert rep["rate_hz"] == 250 and rep["sign_convention"].startswith("voltage = -K x")
    des = design_lqr(Device.from_scenario(load_scenario(path)))
    assert_allclose(rep["continuous"], des.K_continuous, rtol=1e-12)
    assert_allclose(rep["discrete"], des.K_discrete, rtol=1e-12)
    # independent reference: python-control dlqr on the exported model and weights (references.md "LQR")
    Ad, Bd = np.array(rep["model"]["Ad"]), np.array(rep["model"]["Bd"]).reshape(3, 1)
    K, _, E = control.dlqr(Ad, Bd, np.diag(rep["weights"]["state"]), rep["weights"]["effort"])
    assert_allclose(rep["discrete"], np.ravel(K), rtol=1e-6)
    poles = np.array([complex(p["re"], p["im"]) for p in rep["closed_loop_poles"]["discrete_z"]])
    assert_allclose(np.sort_complex(poles), np.sort_complex(E), rtol=1e-6)
    assert rep["weights"]["source"] == "Bryson's rule"
    assert rep["delay"]["delay_s"] == 0.0


def test_c_header_carries_the_same_numbers_and_compiles(tmp_path, capsys):
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(strategy={"kind": "lqr"}, sensors={"delay": 0.003}))
    _, js, _ = _gains(capsys, str(path))
    code, header, err = _gains(capsys, str(path), "--format", "c")
    assert code == 0 and err == ""
    rep = json.loads(js)
    m = re.search(r"WB_K_DISCRETE\[3\] = \{([^}]*)\}", header)
    k = [float(x.rstrip("f")) for x in m.group(1).split(",")]
    assert_allclose(k, rep["discrete"], rtol=1e-7)            # printed with 9 significant digits
    assert "V/rad" in header and "voltage = -K x" in header and "WB_DELAY_WHOLE_PERIODS 1" in header
    assert rep["delay"]["whole_periods"] == 1 and rep["delay"]["fraction_s"] == pytest.approx(0.001)
    cc = shutil.which("cc") or shutil.which("gcc")
    if cc is None:
        pytest.skip("no C compiler to check the header")
    (tmp_path / "wb_gains.h").write_text(header)
    (tmp_path / "use.c").write_text('#include "wb_gains.h"\nfloat f(void){return WB_K_DISCRETE[0]*WB_RATE_HZ;}\n')
    done = subprocess.run([cc, "-Wall", "-Werror", "-c", "use.c", "-o", "use.o"], cwd=tmp_path, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr


def test_supervised_scenario_exports_its_balance_law(capsys):
    code, out, _ = _gains(capsys)           # the bundled demo: swing_and_catch with an lqr balance
    assert code == 0
    rep = json.loads(out)
    assert len(rep["discrete"]) == 3 and rep["delay"]["delay_s"] > 0


def test_a_scenario_without_a_balance_law_exits_2_with_one_line(tmp_path, capsys):
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(strategy={"kind": "coast"}))
    code, out, err = _gains(capsys, str(path))
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "'coast'" in err and str(path) in err


def test_unknown_format_exits_2(capsys):
    code, out, err = _gains(capsys, "--format", "xml")
    assert code == 2 and out == "" and "--format" in err


# ----------------------------------------------------------------------------- the C reference function

def _compile_reference(tmp_path, header: str):
    """Build the header's wb_balance_volts into a shared library and load it with ctypes."""
    import ctypes

    cc = shutil.which("cc") or shutil.which("gcc")
    assert cc is not None, "a C compiler is needed (.ci/run installs one)"
    (tmp_path / "wb_gains.h").write_text(header)
    (tmp_path / "ref.c").write_text(
        '#include "wb_gains.h"\n'
        "static wb_balance_state_t state;\n"
        "void ref_reset(void) { wb_balance_reset(&state); }\n"
        "double ref_volts(double a, double r, double w) { return wb_balance_volts(&state, a, r, w); }\n")
    done = subprocess.run([cc, "-std=c99", "-O2", "-Wall", "-Werror", "-shared", "-fPIC", "ref.c", "-o", "libref.so"],
                          cwd=tmp_path, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    lib = ctypes.CDLL(str(tmp_path / "libref.so"))
    lib.ref_volts.restype = ctypes.c_double
    lib.ref_volts.argtypes = [ctypes.c_double] * 3
    return lib


def _readings(n: int, seed: int) -> np.ndarray:
    """A recorded-like sequence of readings: a slow swing with noise, large enough to saturate at times."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) * 0.002
    angle = 0.15 * np.sin(2.1 * t) * np.exp(-0.3 * t) + rng.normal(0, 0.002, n)
    rate = np.gradient(angle, t) + rng.normal(0, 0.01, n)
    wheel = 40 * np.sin(0.7 * t) + rng.normal(0, 0.5, n)
    return np.column_stack([angle, rate, wheel])


@pytest.mark.parametrize("strategy, sensors", [
    ({"kind": "lqr"}, {"delay": 0.0053}),                                   # 2 whole periods and a fraction
    ({"kind": "lqr"}, {}),                                                  # no delay
    ({"kind": "pid", "wheel_kp": 0.002, "wheel_ki": 0.0005}, {}),           # PID with the wheel loop
    ({"kind": "swing_and_catch", "balance": {"kind": "pid"}}, {}),          # a supervisor's balance law
])
def test_c_reference_function_gives_the_python_laws_voltages(tmp_path, capsys, strategy, sensors):
    """The header's wb_balance_volts, compiled by the system C compiler, gives the voltages the
    simulator's law gives on the same readings, to 1e-6 V (double arithmetic on both sides)."""
    from sim.studies.gains import balance_spec
    from sim.strategies.base import Reading

    path = write_scenario(tmp_path / "s.yaml", scenario_dict(strategy=strategy, sensors={"rate": 500, **sensors}))
    code, header, err = _gains(capsys, str(path), "--format", "c")
    assert code == 0 and err == ""
    lib = _compile_reference(tmp_path, header)
    sc = load_scenario(path)
    _, spec = balance_spec(sc)
    law = spec.build(Device.from_scenario(sc), rng=np.random.default_rng(0))
    reading = Reading()
    lib.ref_reset()
    got, want = [], []
    for i, (a, r, w) in enumerate(_readings(1500, seed=3)):
        reading.t_s, reading.angle_rad, reading.rate_rad_s, reading.wheel_speed_rad_s = i * 0.002, a, r, w
        # what the drive applies: the law's command clamped to the supply (sim/run/trial.py)
        want.append(min(max(law.command(reading), -sc.drive.supply), sc.drive.supply))
        got.append(lib.ref_volts(a, r, w))
    want = np.array(want)
    assert np.ptp(want) > 1.0 and np.any(np.abs(want) >= sc.drive.supply)   # the clamp is exercised too
    assert_allclose(got, want, rtol=0, atol=1e-6)


def test_pid_gains_report_the_defaults_in_use_with_units_and_meaning(tmp_path, capsys):
    from sim.strategies.pid import PidBalance

    path = write_scenario(tmp_path / "s.yaml", scenario_dict(strategy={"kind": "pid", "kd": 0.9}))
    code, out, err = _gains(capsys, str(path))
    assert code == 0 and err == ""
    rep = json.loads(out)
    sc = load_scenario(path)
    dev = Device.from_scenario(sc)
    law = PidBalance(device=dev, params=sc.strategy.params, rng=None)
    assert rep["law"] == "pid"
    assert_allclose([rep["gains"][k]["value"] for k in ("kp", "ki", "kd")], [law.kp, law.ki, law.kd], rtol=1e-12)
    assert rep["gains"]["kd"]["source"] == "scenario" and rep["gains"]["kp"]["source"].startswith("default")
    assert rep["gains"]["kp"]["unit"] == "V/rad" and "wheel" in rep["gains"]["wheel_kp"]["does"]
    # the proportional gain that just holds gravity: k_t/R * kp = mbar g (torque balance at a small
    # lean, back-EMF neglected; common practice, no source)
    sv = rep["starting_values"]
    assert_allclose(sv["kp_just_holds_gravity_v_per_rad"] * dev.k_t_n_m_a / dev.resistance_ohm,
                    dev.mbar_kg_m * dev.gravity_m_s2, rtol=1e-12)
    assert rep["gains"]["kp"]["value"] > sv["kp_just_holds_gravity_v_per_rad"]


@pytest.mark.parametrize("sections", [
    # no gravity, no friction: the wheel cannot change the total angular momentum, so the state is
    # not stabilisable and no Riccati solution exists (common practice, no source)
    {"world": {"gravity": 0}, "strategy": {"kind": "lqr"}},
    {"strategy": {"kind": "lqr", "weights": [1e300, 1e300, 1e300]}},
    {"strategy": {"kind": "lqr", "weights": [1e200, 1.0, 1.0], "effort": 1e-200}},
])
def test_no_lqr_design_is_one_line_not_a_traceback(tmp_path, capsys, sections):
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(**sections))
    code, out, err = _gains(capsys, str(path))
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and err.startswith(f"wheelbench: {path}: strategy: no LQR design"), err
    assert "Traceback" not in err
