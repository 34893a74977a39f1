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
from sim.device import Device
from sim.lqr_design import design_lqr
from sim.scenario import load_scenario
from tests.conftest import scenario_dict, write_scenario


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


def test_a_scenario_without_an_lqr_balance_law_exits_2_with_one_line(tmp_path, capsys):
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(strategy={"kind": "pid"}))
    code, out, err = _gains(capsys, str(path))
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "'pid'" in err and str(path) in err


def test_unknown_format_exits_2(capsys):
    code, out, err = _gains(capsys, "--format", "xml")
    assert code == 2 and out == "" and "--format" in err


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
