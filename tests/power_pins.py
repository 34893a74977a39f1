"""Fingerprints of every scenario in scenarios/ as the runner produced them before the power chain
existed: sha256 of the trace CSV and of metrics.json (wall-clock keys left out). Used by
tests/test_power_pins.py; `python tests/power_pins.py` rewrites tests/data/scenario_pins.json (only
ever from a commit whose numbers are the reference)."""

from __future__ import annotations

import hashlib
import json
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
PINS = Path(__file__).resolve().parent / "data" / "scenario_pins.json"
WALL_KEYS = ("real_time_factor",)   # measured on the clock, not simulated


def scenario_files() -> list[Path]:
    return sorted(p for p in (ROOT / "scenarios").rglob("*.yaml"))


def fingerprint(path: Path) -> dict:
    """{"trace_sha256", "metrics_sha256", "rows"} of one scenario run in this process."""
    from sim.model.scenario_yaml import load_scenario
    from sim.run.metrics import trial_metrics
    from sim.run.trace import write_csv
    from sim.run.trial import run_trial
    from sim.strategies.firmware import firmware_log_for

    sc = load_scenario(str(path))
    with tempfile.TemporaryDirectory() as tmp:
        with firmware_log_for(sc.strategy, Path(tmp) / "firmware.log"):
            result = run_trial(sc)
        metrics = trial_metrics(result)
        for key in WALL_KEYS:
            metrics.pop(key, None)
        csv_path = Path(tmp) / "trace.csv"
        write_csv(result.trace, csv_path)
        trace_hash = hashlib.sha256(csv_path.read_bytes()).hexdigest()
    text = json.dumps(metrics, sort_keys=True, allow_nan=True)
    return {"trace_sha256": trace_hash, "metrics_sha256": hashlib.sha256(text.encode()).hexdigest(),
            "rows": result.trace.n}


if __name__ == "__main__":
    pins = {str(p.relative_to(ROOT)): fingerprint(p) for p in scenario_files()}
    PINS.write_text(json.dumps(pins, indent=1, sort_keys=True) + "\n")
    print(f"{len(pins)} scenarios pinned in {PINS}", file=sys.stderr)
