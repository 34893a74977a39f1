"""Monte Carlo of `check` and `sweep --trials`: the Wilson interval, monte_carlo.csv and the sweep's columns."""

import csv
import json
import math

import numpy as np
import pytest
from scipy.stats import binomtest

from sim.cli import main
from sim.model.tolerances import interval_note, wilson_interval

from test_verdicts import fast_raw, write_scenario


def test_wilson_interval_against_published_values():
    # Newcombe, "Two-sided confidence intervals for the single proportion: comparison of seven
    # methods", Statistics in Medicine 17 (1998) 857-872, Table II, Wilson score method, to 4
    # decimals (values from memory; they also follow by hand from Wilson, JASA 22 (1927) 209-212).
    published = {(81, 263): (0.2553, 0.3662), (15, 148): (0.0624, 0.1605), (0, 20): (0.0, 0.1611),
                 (1, 29): (0.0061, 0.1718)}
    for (k, n), expect in published.items():
        np.testing.assert_allclose(wilson_interval(k, n), expect, atol=6e-5)


def test_wilson_interval_against_scipy():
    # Reference library: scipy.stats.binomtest(k, n).proportion_ci(method='wilson'), 95%.
    for k, n in ((0, 1), (1, 1), (0, 20), (19, 20), (20, 20), (7, 10), (50, 100), (3, 1000)):
        ci = binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
        np.testing.assert_allclose(wilson_interval(k, n), (ci.low, ci.high), rtol=1e-9, atol=1e-12)


def test_interval_note_suggests_more_trials_only_when_it_straddles_the_limit():
    # 19 of 20 at a 95% limit: interval ~76-99% holds 95%, undecided. 20 of 20 at a 80% limit: the
    # interval (83.9-100%) lies above it. 5 of 20 at 95%: clearly below.
    assert "more trials" in interval_note(19, 20, 0.95) and "--trials 80" in interval_note(19, 20, 0.95)
    assert "more trials" not in interval_note(20, 20, 0.80)
    assert "more trials" not in interval_note(5, 20, 0.95)


@pytest.mark.slow
def test_check_writes_monte_carlo_csv_with_draws_outcomes_and_failed_criteria(tmp_path):
    # A supply band wide enough that some draws (about 1.5-3 V) cannot take the 5 mN m s push
    # asked of the nominal trial, so the csv holds both outcomes.
    raw = fast_raw(drive={"supply": "6 V"}, tolerances={"drive.supply": "75%", "motor.resistance": "10%"},
                   trial={"duration": "1.5 s", "start": {"angle": "3 deg"}, "seed": 3,
                          "pushes": [{"at": "0.5 s", "impulse": "5 mN*m*s"}]})
    scen = write_scenario(tmp_path / "s.yaml", raw)
    out = tmp_path / "check"
    main(["check", scen, "--out", str(out), "--trials", "12", "--workers", "1"])
    with open(out / "monte_carlo.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    assert len(rows) == 12 and [int(r["trial"]) for r in rows] == list(range(12))
    assert list(rows[0])[:4] == ["trial", "seed", "drive.supply", "motor.resistance"]
    supplies = np.array([float(r["drive.supply"]) for r in rows])
    assert supplies.min() >= 1.5 and supplies.max() <= 10.5          # SI volts, within +-75% of 6 V
    assert np.all(np.abs([float(r["motor.resistance"]) / 1.8 - 1 for r in rows]) <= 0.1)
    for r in rows:
        assert (r["passed"] == "True") == (r["failed_criteria"] == ""), r
    v = json.loads((out / "verdict.json").read_text())
    mc = v["monte_carlo"]
    passed = sum(r["passed"] == "True" for r in rows)
    assert mc["passed_trials"] == passed and 0 < passed < 12, "the fixture should give both outcomes"
    np.testing.assert_allclose((mc["pass_fraction_low"], mc["pass_fraction_high"]), wilson_interval(passed, 12),
                               rtol=1e-12)
    crit = next(c for c in v["criteria"] if c["name"] == "monte_carlo_pass_fraction")
    assert "Wilson" in crit["note"]
    # the failed draws are the low supplies (the point of the csv: see which draws failed)
    failed = supplies[[r["passed"] != "True" for r in rows]]
    assert failed.mean() < supplies[[r["passed"] == "True" for r in rows]].mean()


@pytest.mark.slow
def test_sweep_trials_carry_the_interval(tmp_path):
    scen = write_scenario(tmp_path / "s.yaml", fast_raw())
    out = tmp_path / "grid"
    assert main(["sweep", scen, "--vary", "drive.supply=12V", "--trials", "3", "--out", str(out),
                 "--workers", "1"]) in (0, 1)
    with open(out / "results.csv", newline="") as f:
        row = next(csv.DictReader(f))
    k = round(float(row["pass_fraction"]) * 3)
    np.testing.assert_allclose((float(row["pass_fraction_low"]), float(row["pass_fraction_high"])),
                               wilson_interval(k, 3), rtol=1e-12)
    assert math.isfinite(float(row["wheel_burst_safety_factor"])) and "burst_note" in row
