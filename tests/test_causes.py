"""Causes of failed trials (sim.run.causes): one constructed trial of each kind gets its cause, and the
cause shows where the brief says (metrics.json, the run table, check's report, sweep's
fail_reasons, the clip's last frames).

The devices are the invented test pendulum of conftest, some with a heavier wheel (BIG_WHEEL, see
trial_cases.py) so that the wheel speeds up slowly; the trials are a few simulated seconds at most.
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from numpy.testing import assert_allclose

from conftest import make_scenario
from sim.media.overlay import WARN, Dashboard, readout
from sim.run.causes import CAUSES, find_cause
from sim.run.metrics import trial_metrics
from sim.run.trial import run_trial
from trial_cases import BIG_WHEEL, NO_LOAD_RAD_S, bias_pid, plugin_scenario


CASES = {
    # 1 deg bias: a slow drift that runs the wheel into its no-load speed after ~23 s
    "wheel_at_speed_limit": lambda tmp: bias_pid(1.0, 30.0),
    # 3 deg bias: a drift that loses the body at ~70% of the no-load speed (back-EMF eats the torque)
    "bias_drift": lambda tmp: bias_pid(3.0, 10.0),
    # LQR from 20 deg, moving away: more than the 0.19 N m stall torque can hold against gravity
    "voltage_at_supply": lambda tmp: make_scenario(wheel=BIG_WHEEL, strategy={"kind": "lqr"},
                                                   trial={"duration": 1.0, "start": {"angle": "20 deg", "rate": 0.5}}),
    # a 1 A drive (0.032 N m) cannot hold 10 deg
    "current_at_limit": lambda tmp: make_scenario(wheel=BIG_WHEEL, motor={"current_limit": 1.0}, strategy={"kind": "lqr"},
                                                  trial={"duration": 1.0, "start": {"angle": "10 deg", "rate": 0.5}}),
    "push_too_large": lambda tmp: make_scenario(wheel=BIG_WHEEL, strategy={"kind": "lqr"},
                                                trial={"duration": 2.0, "pushes": [{"at": 0.3, "impulse": 0.05}]}),
    # an IMU 300 mm up the arm read through a Kalman filter that trusts its accelerometer (0.5 deg):
    # the body's own angular acceleration reads as tilt (r theta_dd, rigid-body kinematics) and the
    # law balances a wrong angle; the same filter with the IMU at the pivot holds (test below)
    "estimator_misread": lambda tmp: imu_scenario(at_mm=300.0),
    # a law far too soft to hold 3 deg, never near a limit
    "gains_too_weak": lambda tmp: make_scenario(strategy={"kind": "pid", "kp": 0.5, "ki": 0.0, "kd": 0.05},
                                                trial={"duration": 1.5, "start": {"angle": "3 deg"}}),
    # 0.6 s is far too short to pump the body from hanging
    "swing_energy_short": lambda tmp: make_scenario(strategy={"kind": "swing_and_catch"},
                                                    trial={"duration": 0.6, "start": {"angle": "180 deg"}}),
    # a "swing-up" that never hands over, on a body thrown over the top: energy enough, no catch
    "catch_missed": lambda tmp: plugin_scenario(tmp, """
    class NeverCatches(Base):
        goal, swings_up = "balance", True
        def __init__(self, **kw):
            super().__init__(**kw)
            self.balancing = False
        def decide(self, reading):
            return 0.0
    """, "NeverCatches", trial={"duration": 0.5, "start": {"angle": "90 deg", "rate": 12.0}}),
    "start_outside_release": lambda tmp: make_scenario(strategy={"kind": "lqr"},
                                                       trial={"duration": 0.3, "start": {"angle": "40 deg"}}),
    # 2e4 rad/s is past the runner's 1e4 rad/s "absurd" bound (sim.run.trial.ABSURD_RATE_RAD_S)
    "diverged": lambda tmp: make_scenario(trial={"duration": 0.2, "start": {"rate": 2e4}}),
    "strategy_failed": lambda tmp: plugin_scenario(tmp, """
    class Raises(Base):
        def decide(self, reading):
            if reading.t_s >= 0.05:
                raise ValueError("table ran out")
            return 0.0
    """, "Raises"),
}


def imu_scenario(*, at_mm: float):
    """The test pendulum with no angle encoder: an IMU `at_mm` up the body axis and a Kalman filter
    that trusts its accelerometer to 0.5 deg; LQR from 3 deg."""
    return make_scenario(wheel=BIG_WHEEL, strategy={"kind": "lqr"},
                         sensors={"angle": None, "imu": {"at": [0.0, 0.0, at_mm / 1000.0]},
                                  "estimator": {"kind": "kalman", "measurement_noise": "0.5 deg"}},
                         trial={"duration": 1.5, "start": {"angle": "3 deg"}})


def test_the_same_filter_with_the_imu_at_the_pivot_holds():
    # the counter-case of estimator_misread: nothing but the IMU's place differs
    assert run_trial(imu_scenario(at_mm=0.0)).outcome == "balanced"


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
    from sim.studies.monte_carlo import judge_trial

    row = judge_trial(CASES["voltage_at_supply"](tmp_path), seed=1)
    assert "fell (voltage_at_supply)" in row["fail_reasons"].split(";")


def test_cause_is_in_the_check_report(tmp_path):
    from sim.studies.verdict_report import failed_runs, run_causes_markdown

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
    # a trial stopped at its fall has no frames after it: its last second shows the ending instead
    stopped = run_trial(CASES["bias_drift"](tmp_path), stop_early=True)
    assert stopped.ended_at_s > 2.0 and readout(stopped, stopped.ended_at_s).ending == "FELL: BIAS DRIFT"
    assert readout(stopped, stopped.ended_at_s - 1.05).ending is None


def test_swing_energy_detail_states_the_peak_body_energy(tmp_path):
    result = run_trial(CASES["swing_energy_short"](tmp_path))
    tr = result.trace
    # pendulum energy E = 1/2 J theta_d^2 + mbar g (cos theta - 1), 0 upright at rest (Astrom & Furuta,
    # "Swinging up a pendulum by energy control", Automatica 2000; from memory), with the test
    # device's J = 8.667e-3 kg m^2 and mbar = 0.045 kg m worked out by hand in conftest
    energy = 0.5 * 8.667e-3 * tr.view("rate") ** 2 + 0.045 * 9.81 * (np.cos(tr.view("angle")) - 1.0)
    stated = float(re.search(r"energy peaked at ([-+0-9.e]+) J", result.cause_detail).group(1))
    assert_allclose(stated, energy.max(), rtol=2e-3)  # the sentence keeps 3 significant figures
    assert "from hanging (-0.883 J)" in result.cause_detail  # 2 mbar g = 0.8829 J
