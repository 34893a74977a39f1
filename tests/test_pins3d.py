"""The 3D demos (hinge and ball mounts) give exactly the numbers they gave before the floor mount.

`tests/pins/scenarios3d_main.json` holds, per 3D scenario file, SHA-256 digests of its trial's trace
columns (bit for bit), its CSV file and its metrics (wall-clock keys left out), computed by the code
on main at commit 7b62bdc, before `body.mount: floor` was added. The floor keys are optional: a hinge or
ball scenario must run through exactly the old arithmetic. cube_corner's digests were refreshed once, when
the 3D runner's recording of voltages was fixed (it had left the other wheels' voltage columns at 0 on a
tick where one wheel reached the supply; the motors had the right voltage): compared column by column,
only wheel2_voltage_v and wheel3_voltage_v moved. Refresh with
`OPENBLAS_CORETYPE=Haswell python tests/test_pins3d.py > tests/pins/scenarios3d_main.json` only for a change meant to alter them.

The floor demos, the pack-fed cube, the current-mode cube and the IMU cubes were added to the file at commit 9d9cee6
(computed by the code there), before the speed work that wrote the 3D loop's wheel, motor, sensor
and attitude code out per device (`sim.core.unrolled`): that work keeps every double.
"""

from __future__ import annotations

import hashlib
import json
import sys
import tempfile
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parent.parent
PINS = Path(__file__).resolve().parent / "pins" / "scenarios3d_main.json"
PINNED = ("scenarios/cube_corner.yaml", "scenarios/tilted_axis.yaml", "scenarios/cube_pack.yaml",
          "scenarios/cube_torque.yaml", "scenarios/floor_cube.yaml", "scenarios/floor_jump.yaml",
          "scenarios/floor_corner_jump.yaml", "scenarios/cube_imu.yaml", "scenarios/cube_imu_misaligned.yaml")


def digests(path: Path) -> dict:
    from sim.model.scenario_yaml import load_scenario
    from sim.run.metrics3d import trial_metrics3d
    from sim.run.trace3d import write_csv3d
    from sim.run.trial import run_trial
    result = run_trial(load_scenario(path))
    h = hashlib.sha256()
    for name in (*result.trace.FLOAT_COLUMNS, "mode"):
        h.update(name.encode())
        h.update(np.ascontiguousarray(result.trace.view(name)).tobytes())
    with tempfile.TemporaryDirectory() as tmp:
        write_csv3d(result.trace, Path(tmp) / "trace.csv")
        csv_digest = hashlib.sha256((Path(tmp) / "trace.csv").read_bytes()).hexdigest()
    from conftest import timeless
    metrics = json.dumps(timeless(trial_metrics3d(result)), sort_keys=True, default=str)
    return {"trace_sha256": h.hexdigest(), "csv_sha256": csv_digest,
            "metrics_sha256": hashlib.sha256(metrics.encode()).hexdigest(), "rows": result.trace.n}


@pytest.mark.parametrize("name", PINNED)
def test_3d_demo_numbers_unchanged(name, monkeypatch):
    pins = json.loads(PINS.read_text())
    monkeypatch.chdir(ROOT)
    assert digests(Path(name)) == pins[name]


if __name__ == "__main__":
    sys.path.insert(0, str(ROOT))
    sys.path.insert(0, str(ROOT / "tests"))
    import os
    if "OPENBLAS_CORETYPE" not in os.environ:   # numpy is loaded by now: the kernel choice comes from outside
        sys.exit("run as OPENBLAS_CORETYPE=Haswell python tests/test_pins3d.py (the kernels tests/conftest.py picks)")
    os.chdir(ROOT)
    pins = json.loads(PINS.read_text())
    pins.update({name: digests(Path(name)) for name in PINNED if name not in pins})   # the ones already held stay
    json.dump(pins, sys.stdout, indent=1, sort_keys=True)
    print()
