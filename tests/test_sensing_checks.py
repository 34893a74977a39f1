"""`check`'s sensing additions (sim.studies.sensing_checks), on short constructed runs.

An accelerometer misaligned by delta about the pivot axis reads a body at rest upright as tilted
by delta (rigid-body kinematics, references.md, Sensing), and a complementary filter passes the
accelerometer's tilt at zero frequency with unit gain (common practice, no source): the
estimator's steady error in a hold is the misalignment, an angle bias.
"""

from __future__ import annotations

import math

from numpy.testing import assert_allclose

from conftest import make_scenario
from sim.run.trial import run_trial
from sim.studies.sensing_checks import sensing_checks, sensing_markdown
from sim.studies.verdicts import hold_scenario, push_scenario

IMU = {"angle": None, "imu": {"at": [0, 0, 0.05], "orientation": {"roll": "0.5 deg"}},
       "estimator": {"kind": "complementary", "time_constant": 0.2}}


def test_estimator_steady_error_is_the_misalignment_and_push_error_is_reported():
    sc = make_scenario(strategy={"kind": "lqr"}, sensors=IMU, trial={"duration": 0.5})
    runs = {"hold": run_trial(hold_scenario(sc))}
    pushes = {"positive": {"max_survived_n_m_s": 0.004}, "negative": {"max_survived_n_m_s": 0.003}}
    crit, summary = sensing_checks(sc, runs, pushes, push_scenario=lambda i: push_scenario(sc, i))
    assert crit == []
    assert_allclose(summary["estimator_steady_error_rad"], math.radians(0.5), atol=math.radians(0.02))
    assert summary["push_tilt_error_impulse_n_m_s"] == -0.003           # the worse direction's push
    assert summary["push_tilt_error_rad"] > summary["estimator_steady_error_rad"]
    assert "Sensing" in sensing_markdown(summary)[0]


def test_encoder_over_speed_fails_its_criterion():
    sc = make_scenario(body={"locked": True}, strategy={"kind": "fixed_voltage", "volts": 6.0},
                       sensors={"wheel": {"max_speed": 60.0}}, trial={"duration": 0.5})
    res = run_trial(sc)
    over = float((abs(res.trace.view("wheel_speed")) > 60.0).sum()) * sc.world.step
    crit, summary = sensing_checks(sc, {"nominal": res}, {}, push_scenario=None)
    assert summary == {} and len(crit) == 1
    c = crit[0]
    assert c["name"] == "encoder_over_speed_s" and not c["passed"]
    assert_allclose(c["value"], over, rtol=1e-12) and over > 0.05
    assert "wheel encoder" in c["note"]


def test_nothing_added_without_the_new_keys():
    sc = make_scenario(strategy={"kind": "lqr"}, trial={"duration": 0.2})
    assert sensing_checks(sc, {"hold": run_trial(sc)}, {}, push_scenario=None) == ([], {})


def test_sweep_varies_the_new_keys(tmp_path):
    # sweep's own machinery on the new keys: each point's scenario carries its values, and the
    # runaway holds follow the IMU's misalignment (the angle bias of an estimator device)
    import csv

    from conftest import scenario_dict
    from sim.studies.sweep import parse_vary, run_sweep
    raw = scenario_dict(strategy={"kind": "pid"}, sensors=IMU, trial={"duration": 0.5},
                        requirements={"hold_time": 2.0}, tolerances={"sensors.imu.orientation.roll": "0 deg"})
    varies = [parse_vary("sensors.imu.orientation.roll=0deg,3deg"), parse_vary("sensors.estimator.time_constant=0.1,0.3")]
    run_sweep(raw, "<test>", varies, tmp_path, workers=1)
    rows = list(csv.DictReader(open(tmp_path / "results.csv")))
    assert_allclose([(float(r["sensors.imu.orientation.roll"]), float(r["sensors.estimator.time_constant"])) for r in rows],
                    [(0.0, 0.1), (0.0, 0.3), (math.radians(3), 0.1), (math.radians(3), 0.3)], rtol=1e-12)
    # three degrees of misalignment drive the angle-only law's wheel far faster than none
    peaks = [float(r["peak_wheel_speed_rad_s"]) for r in rows]
    assert min(peaks[2:]) > 2 * max(peaks[:2])
