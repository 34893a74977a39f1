"""Without the power keys (battery, drive.mode, drive.pwm timing, reversal delay, trip, motor.curve,
coupled thermal) every scenario gives byte-identical numbers to the runner before the power chain
existed: the trace CSV and metrics.json of each demo are compared with fingerprints taken from
main before the change (tests/data/scenario_pins.json, made by tests/power_pins.py)."""

from __future__ import annotations

import json

import pytest

from power_pins import PINS, ROOT, fingerprint

PINNED = json.loads(PINS.read_text())


@pytest.mark.parametrize("name", sorted(PINNED))
def test_demo_is_byte_identical_to_main_before_the_power_chain(name):
    # equality of sha256 digests: any changed digit anywhere in the trace or metrics fails it
    assert fingerprint(ROOT / name) == PINNED[name]
