"""Causes of failed trials (sim.causes), and the metrics they rest on (sim.metrics).

One constructed trial of each kind of failure gets its cause. The devices are the invented test
pendulum of conftest, some with a heavier wheel (BIG_WHEEL) so that the wheel speeds up slowly;
the trials are a few simulated seconds at most (a fraction of a second of wall time each).
Also here: the drive's clamp to the scenario's supply whatever a plug-in does, the saturation
count, totals up to the fall, push recovery windows, caught_at_s for a trial held from the start,
the "fallen" phase, and where the cause is shown (run table, check report, sweep, clip).
"""

from __future__ import annotations

import math
import re
import textwrap

import numpy as np
import pytest
from numpy.testing import assert_allclose

from conftest import make_scenario
from sim.causes import CAUSES, find_cause
from sim.metrics import PUSH_RECOVER_S, trial_metrics
from sim.overlay import WARN, Dashboard, readout
from sim.trial import run_trial

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


def _plugin(tmp_path, code: str, cls: str, **sections):
    path = tmp_path / "laws.py"
    path.write_text(PLUGIN_HEAD + textwrap.dedent(code), encoding="utf-8")
    return make_scenario(strategy={"plugin": f"{path}:{cls}"}, **sections)


def _bias_pid(bias_deg: float, duration_s: float, **trial):
    # angle-only PID with an angle-sensor bias: the law holds the *measured* angle at zero, so the
    # true body leans by the bias and the wheel must keep accelerating to hold it (sim.strategies.pid)
    return make_scenario(wheel=BIG_WHEEL, strategy={"kind": "pid"}, sensors={"angle": {"bias": f"{bias_deg} deg"}},
                         trial={"duration": duration_s, **trial})


CASES = {
    # 1 deg bias: a slow drift that runs the wheel into its no-load speed after ~23 s
    "wheel_at_speed_limit": lambda tmp: _bias_pid(1.0, 30.0),
    # 3 deg bias: a drift that loses the body at ~70% of the no-load speed (back-EMF eats the torque)
    "bias_drift": lambda tmp: _bias_pid(3.0, 10.0),
    # LQR from 20 deg, moving away: more than the 0.19 N m stall torque can hold against gravity
    "voltage_at_supply": lambda tmp: make_scenario(wheel=BIG_WHEEL, strategy={"kind": "lqr"},
                                                   trial={"duration": 1.0, "start": {"angle": "20 deg", "rate": 0.5}}),
    # a 1 A drive (0.032 N m) cannot hold 10 deg
    "current_at_limit": lambda tmp: make_scenario(wheel=BIG_WHEEL, motor={"current_limit": 1.0}, strategy={"kind": "lqr"},
                                                  trial={"duration": 1.0, "start": {"angle": "10 deg", "rate": 0.5}}),
    "push_too_large": lambda tmp: make_scenario(wheel=BIG_WHEEL, strategy={"kind": "lqr"},
                                                trial={"duration": 2.0, "pushes": [{"at": 0.3, "impulse": 0.05}]}),
    # a law far too soft to hold 3 deg, never near a limit
    "gains_too_weak": lambda tmp: make_scenario(strategy={"kind": "pid", "kp": 0.5, "ki": 0.0, "kd": 0.05},
                                                trial={"duration": 1.5, "start": {"angle": "3 deg"}}),
    # 0.6 s is far too short to pump the body from hanging
    "swing_energy_short": lambda tmp: make_scenario(strategy={"kind": "swing_and_catch"},
                                                    trial={"duration": 0.6, "start": {"angle": "180 deg"}}),
    "start_outside_release": lambda tmp: make_scenario(strategy={"kind": "lqr"},
                                                       trial={"duration": 0.3, "start": {"angle": "40 deg"}}),
    # 2e4 rad/s is past the runner's 1e4 rad/s "absurd" bound (sim.trial.ABSURD_RATE_RAD_S)
    "diverged": lambda tmp: make_scenario(trial={"duration": 0.2, "start": {"rate": 2e4}}),
    "strategy_failed": lambda tmp: _plugin(tmp, """
    class Raises(Base):
        def decide(self, reading):
            if reading.t_s >= 0.05:
                raise ValueError("table ran out")
            return 0.0
    """, "Raises"),
}


@pytest.mark.parametrize("cause", list(CASES))
def test_each_kind_of_failure_gets_its_cause(tmp_path, cause):
    result = run_trial(CASES[cause](tmp_path))
    m = trial_metrics(result)
    assert m["cause"] == cause, m["cause_detail"]
    assert cause in CAUSES and isinstance(m["cause_detail"], str) and m["cause_detail"]
    if m["outcome"] == "fell":
        # the sentence gives the fall's time as metrics.json has it
        assert f"fell at {m['fell_at_s']:.2f} s" in m["cause_detail"]


def test_wheel_limit_detail_states_the_wheel_share_of_its_no_load_speed(tmp_path):
    result = run_trial(CASES["wheel_at_speed_limit"](tmp_path))
    m = trial_metrics(result)
    k = int(round(m["fell_at_s"] / result.trace.step_s))
    share = np.max(np.abs(result.trace.wheel_speed[k - 500:k])) / NO_LOAD_RAD_S  # the last 0.5 s
    assert share >= 0.85
    assert f"wheel at {share:.0%} of its no-load speed" in m["cause_detail"]
    # the drift's slope in the sentence against a straight line fitted here by numpy (tolerance:
    # the sentence rounds to 3 significant figures; the fit here spans the whole trial before the fall)
    slope = float(re.search(r"drift of ([-+0-9.e]+) rad/s per s", m["cause_detail"]).group(1))
    w = result.trace.wheel_speed[:k - 500]
    assert_allclose(slope, np.polyfit(np.arange(w.size) * result.trace.step_s, w, 1)[0], rtol=0.05)


def test_balanced_and_completed_trials_have_no_cause():
    held = run_trial(make_scenario(wheel=BIG_WHEEL, strategy={"kind": "lqr"}, trial={"duration": 0.5}))
    bench = run_trial(make_scenario(trial={"duration": 0.2}))
    assert (held.outcome, bench.outcome) == ("balanced", "completed")
    for r in (held, bench):
        m = trial_metrics(r)
        assert m["cause"] is None and m["cause_detail"] is None and find_cause(r) == (None, None)


def test_a_fall_long_after_a_push_is_its_own_event():
    # a small push at 0.5 s, then the bias drift loses the body seconds after the push's window
    result = run_trial(_bias_pid(3.0, 10.0, pushes=[{"at": 0.5, "impulse": 0.005}]))
    m = trial_metrics(result)
    assert m["outcome"] == "fell" and m["fell_at_s"] > 0.5 + PUSH_RECOVER_S
    assert m["pushes"][0]["survived"] and m["pushes"][0]["recovery_window_s"] == pytest.approx(PUSH_RECOVER_S)
    assert m["cause"] == "bias_drift"


def test_a_fall_inside_the_recovery_window_loses_the_push(tmp_path):
    m = trial_metrics(run_trial(CASES["push_too_large"](tmp_path)))
    assert m["fell_at_s"] < 0.3 + PUSH_RECOVER_S and not m["pushes"][0]["survived"]


# ----------------------------------------------------------------------------- metrics

def test_totals_stop_at_the_fall():
    result = run_trial(_bias_pid(3.0, 8.0), stop_early=False)
    m = trial_metrics(result)
    tr, dt = result.trace, result.trace.step_s
    k = int(round(m["fell_at_s"] / dt))
    assert tr.n > k + 1000 and m["totals_until_s"] == pytest.approx(m["fell_at_s"])
    v, i = tr.voltage[:k], tr.current[:k]
    # energy from the supply = integral of V i dt, RMS = sqrt(mean i^2) (common practice, no source)
    assert_allclose(m["energy_from_supply_j"], np.sum(v * i) * dt, rtol=1e-12)
    assert_allclose(m["rms_current_a"], np.sqrt(np.mean(i**2)), rtol=1e-12)
    assert_allclose(m["peak_wheel_speed_rad_s"], np.max(np.abs(tr.wheel_speed[:k])), rtol=1e-12)
    # the flailing after the fall is left out: over the whole trace the figures differ
    assert not np.isclose(m["energy_from_supply_j"], np.sum(tr.view("voltage") * tr.view("current")) * dt)


def test_the_phase_after_a_fall_reads_fallen():
    result = run_trial(_bias_pid(3.0, 8.0), stop_early=False)
    k = int(round(result.fell_at_s / result.trace.step_s))
    modes = result.trace.modes()
    assert set(modes[:k]) == {"balance"} and set(modes[k:]) == {"fallen"}


def test_caught_at_is_null_for_a_trial_held_from_the_start():
    m = trial_metrics(run_trial(make_scenario(wheel=BIG_WHEEL, strategy={"kind": "lqr"},
                                              trial={"duration": 0.5, "start": {"angle": "2 deg"}})))
    assert m["outcome"] == "balanced" and m["caught_at_s"] is None
    # the margins still count from the start: the largest angle is the 2 deg it started at
    assert_allclose(m["max_angle_after_catch_rad"], math.radians(2.0), rtol=1e-9)


def test_a_law_asking_for_exactly_the_supply_counts_as_saturated():
    # the built-in bench law at exactly the 12 V supply, every tick
    m = trial_metrics(run_trial(make_scenario(body={"locked": True}, trial={"duration": 0.2},
                                              strategy={"kind": "fixed_voltage", "volts": 12.0})))
    assert m["voltage_saturated_fraction"] == 1.0


def test_saturated_fraction_is_the_share_of_ticks_at_the_supply(tmp_path):
    # every 4th tick exactly at the supply, the others just under it: a quarter of the ticks
    sc = _plugin(tmp_path, """
    class Quarter(Base):
        n = 0
        def decide(self, reading):
            self.n += 1
            return 12.0 if self.n % 4 == 1 else 11.99
    """, "Quarter", body={"locked": True}, trial={"duration": 0.4})
    m = trial_metrics(run_trial(sc))
    assert m["voltage_saturated_fraction"] == 0.25  # 200 ticks at 500 Hz, 50 of them at the supply


LOUD = {
    "own_supply": """
    class Loud(Base):
        def decide(self, reading):
            self.supply_v = 1e6
            return 1e6
    """,
    "device_supply": """
    class Loud(Base):
        def decide(self, reading):
            object.__setattr__(self.device, "supply_v", 1e6)
            return -1e6
    """,
    "own_command": """
    class Loud(Base):
        def decide(self, reading):
            return 0.0
        def command(self, reading):
            return 1e6
    """,
}


@pytest.mark.parametrize("how", list(LOUD))
def test_the_drive_never_applies_more_than_the_scenarios_supply(tmp_path, how):
    sections = {"body": {"locked": True}, "trial": {"duration": 0.3}}
    result = run_trial(_plugin(tmp_path, LOUD[how], "Loud", **sections))
    sign = -1.0 if how == "device_supply" else 1.0
    honest = run_trial(make_scenario(strategy={"kind": "fixed_voltage", "volts": 12.0 * sign}, **sections))
    assert result.outcome == "completed"
    assert_allclose(result.trace.view("voltage"), 12.0 * sign, rtol=0)
    # the same currents as a law asking for the supply itself; stall current V/R = 6 A bounds them
    assert_allclose(result.trace.view("current"), honest.trace.view("current"), rtol=0, atol=1e-12)
    assert np.max(np.abs(result.trace.view("current"))) <= 12.0 / 2.0 + 1e-9  # Ohm's law (common practice, no source)
    assert trial_metrics(result)["supply_v"] == 12.0


def test_balanced_traces_are_unchanged_by_the_drive_clamp():
    # An LQR that saturates at 12 V early on, with a push, balanced. The sums were printed by the
    # code before the clamp moved from the strategy base into the runner's drive (commit 1ff1309).
    sc = make_scenario(wheel=BIG_WHEEL, strategy={"kind": "lqr"},
                       trial={"duration": 2.0, "start": {"angle": "6 deg"}, "pushes": [{"at": 1.0, "impulse": 0.02}]})
    tr = run_trial(sc).trace
    v, i = tr.view("voltage"), tr.view("current")
    assert_allclose(np.max(np.abs(v)), 12.0, rtol=0)
    assert_allclose(np.sum(np.abs(v)), 5085.445654383098, rtol=1e-12)
    assert_allclose(np.sum(v * i), 24687.876953472878, rtol=1e-12)
    assert tr.phases == ["balance"]


# ----------------------------------------------------------------------------- where it shows

def test_cause_is_in_the_run_table_and_metrics_json(tmp_path, capsys):
    import json

    from sim.cli import main
    from conftest import scenario_dict, write_scenario

    path = write_scenario(tmp_path / "s.yaml", scenario_dict(
        wheel=BIG_WHEEL, strategy={"kind": "lqr"}, trial={"duration": 1.0, "start": {"angle": "20 deg", "rate": 0.5}}))
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 0
    m = json.loads((tmp_path / "out" / "metrics.json").read_text())
    assert m["cause"] == "voltage_at_supply" and "fell_at_s" in m
    assert "voltage_at_supply" in capsys.readouterr().out


def test_cause_is_in_the_sweeps_fail_reasons(tmp_path):
    from sim.verdicts import judge_trial

    row = judge_trial(CASES["voltage_at_supply"](tmp_path), seed=1)
    assert "fell (voltage_at_supply)" in row["fail_reasons"].split(";")


def test_cause_is_in_the_check_report(tmp_path):
    from sim.verdict_report import failed_runs, run_causes_markdown

    m = trial_metrics(run_trial(CASES["gains_too_weak"](tmp_path)))
    v = {"runs": {"nominal": {k: m[k] for k in ("outcome", "cause", "cause_detail")}}}
    assert [name for name, _ in failed_runs(v)] == ["nominal"]
    assert f"| nominal | fell | gains_too_weak | {m['cause_detail']} |" in run_causes_markdown(v)


def test_clip_frames_after_the_fall_show_outcome_and_cause(tmp_path):
    result = run_trial(CASES["push_too_large"](tmp_path), stop_early=False)
    before, after = readout(result, result.fell_at_s - 0.05), readout(result, result.fell_at_s + 0.05)
    assert before.ending is None and after.ending == "FELL: PUSH TOO LARGE"
    dash = Dashboard(320, 180)
    blank = np.zeros((180, 320, 3), np.uint8)
    corner = (slice(0, 40), slice(160, 320))  # top right, where the ending chip goes

    def warn_pixels(frame):
        return int(np.all(frame[corner] == WARN, axis=-1).sum())

    assert warn_pixels(dash.draw(blank, before)[0]) == 0 and warn_pixels(dash.draw(blank, after)[0]) > 50
