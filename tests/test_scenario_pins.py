"""Every scenario in scenarios/ gives exactly the numbers it gave before sensing and timing, and the
power chain (battery, PWM, current mode, protections), were modelled.

`tests/pins/scenarios_main.json` holds, per scenario file, SHA-256 digests of its trial's trace
columns (bit for bit), its CSV file and its metrics (wall-clock keys left out), computed by the code on
main before the IMU, estimators, encoder limits, loop timing and the power chain were added (commit
68f704d). The new keys are optional: a scenario that sets none of them must run through exactly the
old arithmetic.
A scenario added to scenarios/ later has no pin and is skipped by name; refresh the file with
`python tests/test_scenario_pins.py > tests/pins/scenarios_main.json` only for a change meant to
alter the demos' numbers.
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
PINS = Path(__file__).resolve().parent / "pins" / "scenarios_main.json"


def digests(path: Path) -> dict:
    """The digests of one scenario file's trial (see the module docstring)."""
    from sim.model.scenario_yaml import load_scenario
    from sim.run.metrics import trial_metrics
    from sim.run.trace import write_csv
    from sim.run.trial import run_trial
    result = run_trial(load_scenario(path))
    h = hashlib.sha256()
    for name in (*result.trace.FLOAT_COLUMNS, "mode"):
        h.update(name.encode())
        h.update(np.ascontiguousarray(result.trace.view(name)).tobytes())
    h.update(json.dumps(result.trace.phases).encode())
    with tempfile.TemporaryDirectory() as tmp:
        write_csv(result.trace, Path(tmp) / "trace.csv")
        csv_digest = hashlib.sha256((Path(tmp) / "trace.csv").read_bytes()).hexdigest()
    from conftest import timeless
    metrics = json.dumps(timeless(trial_metrics(result)), sort_keys=True, default=str)
    return {"trace_sha256": h.hexdigest(), "csv_sha256": csv_digest,
            "metrics_sha256": hashlib.sha256(metrics.encode()).hexdigest(), "rows": result.trace.n}


def _scenario_files() -> list[str]:
    return sorted(str(p.relative_to(ROOT)) for p in (ROOT / "scenarios").rglob("*.yaml"))


@pytest.mark.parametrize("name", _scenario_files())
def test_scenario_numbers_unchanged(name, monkeypatch):
    pins = json.loads(PINS.read_text())
    if name not in pins:
        pytest.skip(f"{name} is newer than the pins (it sets the new keys, or came later)")
    monkeypatch.chdir(ROOT)
    assert digests(Path(name)) == pins[name]


def test_every_pinned_scenario_still_exists():
    # a pin whose file was renamed would otherwise silently stop guarding anything
    assert set(json.loads(PINS.read_text())) <= set(_scenario_files())


if __name__ == "__main__":
    sys.path.insert(0, str(ROOT))
    import os
    os.chdir(ROOT)
    json.dump({name: digests(Path(name)) for name in _scenario_files()}, sys.stdout, indent=1, sort_keys=True)
    print()
