"""Every one-wheel demo gives byte-identical traces and metrics after the 3D work.

The hashes in data/planar_demo_hashes.json were made by the code on main before the 3D device was
added (the trace CSV as written, and metrics.json's content without wall-clock keys, sorted),
on this machine's pybullet 3.2.7 and numpy. A change to a planar number fails here.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import pytest

from conftest import timeless as _timeless
from sim.model.scenario_yaml import load_scenario
from sim.run.metrics import trial_metrics
from sim.run.trace import write_csv
from sim.run.trial import run_trial

ROOT = Path(__file__).resolve().parents[1]
PINNED = json.loads((Path(__file__).parent / "data" / "planar_demo_hashes.json").read_text())


@pytest.mark.parametrize("name", sorted(PINNED))
def test_demo_is_byte_identical(name, tmp_path):
    sc = load_scenario(ROOT / "scenarios" / name)
    assert sc.is_planar
    result = run_trial(sc)
    write_csv(result.trace, tmp_path / "trace.csv")
    trace_hash = hashlib.sha256((tmp_path / "trace.csv").read_bytes()).hexdigest()
    metrics = json.dumps(_timeless(trial_metrics(result)), sort_keys=True)
    assert trace_hash == PINNED[name]["trace_sha256"]
    assert hashlib.sha256(metrics.encode()).hexdigest() == PINNED[name]["metrics_sha256"]
