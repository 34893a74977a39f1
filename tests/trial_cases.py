"""Trials shared by the cause, metrics and drive tests: an invented device with a heavy wheel, a
sensor-biased angle-only PID, and plug-in laws written to a temporary file as a user would."""

from __future__ import annotations

import math
import textwrap

from conftest import make_scenario

BIG_WHEEL = {"at": 0.2, "parts": [{"name": "disk", "shape": "disk", "radius": 0.08, "thickness": 0.01, "mass": 0.5}]}
"""A 0.5 kg, 80 mm disk (I_w = 1.6e-3 kg m^2): on the 12 V, 2 ohm test motor the wheel takes seconds
to reach its no-load speed, so a slow drift has room to show."""

NO_LOAD_RAD_S = 300 * 12 * 2 * math.pi / 60
"""No-load speed of the test motor: Kv * V = 300 rpm/V * 12 V = 3600 rpm = 376.99 rad/s
(ideal DC motor; common practice, no source)."""

PLUGIN_HEAD = """
from sim.strategies import Strategy

class Base(Strategy):
    goal = None
"""


def plugin_scenario(tmp_path, code: str, cls: str, **sections):
    """A test scenario whose strategy is class `cls` of `code` (after PLUGIN_HEAD), written to a file."""
    path = tmp_path / "laws.py"
    path.write_text(PLUGIN_HEAD + textwrap.dedent(code), encoding="utf-8")
    return make_scenario(strategy={"plugin": f"{path}:{cls}"}, **sections)


def bias_pid(bias_deg: float, duration_s: float, **trial):
    """Angle-only PID on the BIG_WHEEL device with an angle-sensor bias of `bias_deg`."""
    # angle-only PID with an angle-sensor bias: the law holds the *measured* angle at zero, so the
    # true body leans by the bias and the wheel must keep accelerating to hold it (sim.strategies.pid)
    return make_scenario(wheel=BIG_WHEEL, strategy={"kind": "pid"}, sensors={"angle": {"bias": f"{bias_deg} deg"}},
                         trial={"duration": duration_s, **trial})
