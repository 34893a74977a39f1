"""Multi-wheel gains (`sim.studies.gains_multi`): named matrices, the numbers the law runs, a C law
that does what the Python law does. Device: the corner cube of tests/test_linear3d.py."""

from __future__ import annotations

import json
from types import SimpleNamespace
import shutil
import subprocess

import control
import numpy as np
import pytest
from numpy.testing import assert_allclose

from sim.core.errors import InputError
from sim.strategies.lqr import LqrBalance
from sim.strategies.lqr_design import design_lqr_spec
from sim.studies.gains_multi import multi_gains_report, to_c_header, to_json, to_text
from test_linear3d import corner_cube
from test_lqr_multi import _params, _reading, _stub


def test_json_has_named_matrices_and_python_control_agrees():
    spec = corner_cube()
    rep = json.loads(to_json(multi_gains_report(spec, source="cube.yaml")))
    K = rep["discrete"]
    assert K["rows"] == ["wheel1_voltage", "wheel2_voltage", "wheel3_voltage"]
    assert K["columns"] == ["tilt_x", "tilt_y", "rate_x", "rate_y", "rate_z", "wheel1_speed", "wheel2_speed",
                            "wheel3_speed"]
    assert [s["unit"] for s in rep["state"]] == ["rad", "rad"] + ["rad/s"] * 6
    assert rep["gain_units"][:3] == ["V/rad", "V/rad", "V s/rad"]
    assert_allclose(K["values"], design_lqr_spec(spec).K_discrete, rtol=1e-12)
    # independent reference: python-control dlqr on the exported model and weights (references.md "LQR")
    Ad, Bd = np.array(rep["model"]["Ad"]["values"]), np.array(rep["model"]["Bd"]["values"])
    Q = np.diag([rep["weights"]["state"][s] for s in K["columns"]])
    R = np.diag([rep["weights"]["effort"][u] for u in K["rows"]])
    K_ref, _, E = control.dlqr(Ad, Bd, Q, R)
    assert_allclose(K["values"], K_ref, rtol=1e-6, atol=1e-6 * np.abs(K_ref).max())
    poles = np.array([complex(p["re"], p["im"]) for p in rep["closed_loop_poles"]["discrete_z"]])
    assert np.max(np.abs(poles)) < 1.0
    assert rep["weights"]["source"] == "Bryson's rule" and rep["delay"]["whole_periods"] == 0
    text = to_text(multi_gains_report(spec, source="cube.yaml"))
    assert "wheel3_voltage" in text and "rate_z" in text and "volts = -K x" in text


def test_c_law_does_what_the_python_law_does(tmp_path):
    cc = shutil.which("cc") or shutil.which("gcc")
    if cc is None:
        pytest.skip("no C compiler to check the header")
    spec = corner_cube(delay_s=0.005)            # 2.5 periods at 500 Hz: predictor with a fraction
    rep = multi_gains_report(spec, source="cube.yaml")
    assert rep["delay"]["whole_periods"] == 2 and len(rep["folded"]["on_held_commands"]) == 3
    (tmp_path / "wb_gains.h").write_text(to_c_header(rep))
    (tmp_path / "run.c").write_text(
        '#include <stdio.h>\n#include "wb_gains.h"\n'
        "int main(void) { wb_balance_state_t s; wb_balance_reset(&s); WB_REAL x[WB_N_STATES], v[WB_N_WHEELS];\n"
        "  for (;;) { for (int i = 0; i < WB_N_STATES; ++i) if (scanf(\"%lf\", &x[i]) != 1) return 0;\n"
        "    wb_balance_volts(&s, x, v);\n"
        "    for (int j = 0; j < WB_N_WHEELS; ++j) printf(\"%.17g \", v[j]);\n    printf(\"\\n\"); } }\n")
    done = subprocess.run([cc, "-std=c99", "-Wall", "-Werror", "run.c", "-o", "run"], cwd=tmp_path,
                          capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    rng = np.random.default_rng(3)
    xs = rng.normal(scale=[0.05, 0.05, 0.5, 0.5, 0.5, 50, 50, 50], size=(40, 8))
    xs[5] *= 20                                   # far out once, so that the clamp acts
    out = subprocess.run(["./run"], cwd=tmp_path, input="\n".join(" ".join(f"{v:.17g}" for v in x) for x in xs),
                         capture_output=True, text=True, check=True).stdout.split("\n")
    law = LqrBalance(device=_stub(spec), params=_params(), rng=None)
    clamped = 0
    assert len(out) >= len(xs)
    for x, line in zip(xs, out):
        py = np.clip(law.decide(_reading(spec, x)), -12.0, 12.0)
        clamped += int(np.any(np.abs(py) == 12.0))
        assert_allclose([float(v) for v in line.split()], py, rtol=1e-12, atol=1e-12)
    assert clamped >= 1


def test_a_device_with_no_stabilising_design_is_one_line_of_bad_input():
    # weights so large that the Riccati equations have no finite solution
    with pytest.raises(InputError) as info:
        multi_gains_report(corner_cube(), source="cube.yaml", weights=[1e300, 1e300, 1e300])
    assert "\n" not in str(info.value) and str(info.value).startswith("cube.yaml: strategy:")


def test_a_device_handing_over_a_mapping_gets_the_same_report_with_its_parameters():
    from sim.model.linear3d import SPEC_FIELDS
    from sim.studies.gains_multi import device_gains_report
    spec = corner_cube()
    device = SimpleNamespace(linear_spec=lambda: {k: getattr(spec, k) for k in SPEC_FIELDS})
    params = _params(weights=[40.0, 1.0, 1e-4], effort=0.05)
    got = device_gains_report(device, source="cube.yaml", params=params)
    assert got == multi_gains_report(spec, source="cube.yaml", weights=[40.0, 1.0, 1e-4], effort=0.05)
    assert got["weights"]["source"].startswith("scenario") and got["weights"]["state"]["rate_z"] == 1.0
