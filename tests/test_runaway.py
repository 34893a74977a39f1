"""Slow wheel runaway: the drift estimator on synthetic series, the steady state a linear law
predicts under an angle bias (against python-control and the simulation), and the
`wheel_runaway_time_s` criterion of `check` on a device of our own invention.
"""

import copy
import json
import math

import numpy as np
import pytest
import yaml
from numpy.testing import assert_allclose

from sim.cli import main
from sim.model.device import Device
from sim.model.scenario import validate_scenario
from sim.run.trial import run_trial
from sim.studies.runaway import NO_DRIFT_Z, fit_drift, predict_bias_response, runaway_time_s
from sim.studies.verdicts import bias_ends, runaway_criterion, runaway_hold, with_trial

# A test fixture of our own invention: a 25 cm aluminium arm carrying a small aluminium wheel on a
# weak 6 V motor, an angle sensor mounted 0.5 degree off, angle-only PID (default gains). Its
# wheel creeps to its no-load speed in tens of seconds, so a 10 s trial alone looks fine.
CREEPER = {
    "name": "creeping test pendulum",
    "body": {"parts": [{"name": "arm", "shape": "box", "length": "250 mm", "width": "25 mm", "thickness": "5 mm",
                        "material": "aluminium", "at": "125 mm"},
                       {"name": "hub", "shape": "disk", "radius": "10 mm", "thickness": "12 mm", "material": "aluminium"}],
             "pivot_friction": {"viscous": "1e-5 N*m*s/rad"}},
    "wheel": {"at": "230 mm", "parts": [
        {"name": "rim", "shape": "ring", "outer_radius": "60 mm", "inner_radius": "48 mm", "thickness": "12 mm",
         "material": "aluminium"},
        {"name": "web", "shape": "ring", "outer_radius": "48 mm", "inner_radius": "5 mm", "thickness": "1.5 mm",
         "material": "aluminium"}]},
    "motor": {"speed_constant": "450 rpm/V", "resistance": "3 ohm", "current_limit": "1.5 A",
              "rotor_inertia": "2e-6 kg*m^2", "mass": "35 g"},
    "drive": {"supply": "6 V"},
    "sensors": {"rate": "500 Hz", "angle": {"noise": "0.05 deg", "bias": "0.5 deg"},
                "rate_gyro": {"noise": "0.02 rad/s"}},
    "strategy": {"kind": "pid"},
    "tolerances": {"sensors.angle.bias": "0.1 deg", "motor.resistance": "5%"},
    "requirements": {"min_push": "2 mN*m*s"},
    "trial": {"duration": "10 s", "start": {"angle": "1 deg"}, "seed": 4},
}


def _scenario(raw=None, **changes):
    raw = copy.deepcopy(raw or CREEPER)
    for dotted, value in changes.items():
        node = raw
        *parents, last = dotted.split("__")
        for key in parents:
            node = node.setdefault(key, {})
        node[last] = value
    return raw, validate_scenario(raw, where="test")


# ----------------------------------------------------------------------------- the drift estimator

def test_fit_recovers_a_known_slope_through_noise():
    # synthetic: 60 s at 1 kHz, slope 0.8 rad/s^2, white noise 5 rad/s plus a 3 Hz wobble of 4 rad/s
    rng = np.random.default_rng(11)
    t = np.arange(60_000) * 1e-3
    w = 7.0 + 0.8 * t + 5.0 * rng.standard_normal(t.size) + 4.0 * np.sin(2 * math.pi * 3.0 * t)
    d = fit_drift(t, w)
    # the generating slope is exact by construction; 0.02 rad/s^2 is ~3 standard errors of the
    # block-mean fit (sigma 5/sqrt(1000) per block over a 20 s window: se ~ 0.006)
    assert_allclose(d.slope_rad_s2, 0.8, atol=0.02)
    assert_allclose(d.level_rad_s, 7.0 + 0.8 * t[-1], atol=0.5)
    assert d.significant
    # the slope's standard error is ordinary least squares on the block means: same as scipy's
    # linregress on those means (reference library), to rounding
    from scipy.stats import linregress
    k = t.size - (t.size // 3 // 20) * 20
    tb, wb = t[k:].reshape(20, -1).mean(axis=1), w[k:].reshape(20, -1).mean(axis=1)
    ref = linregress(tb, wb)
    assert_allclose([d.slope_rad_s2, d.slope_se_rad_s2], [ref.slope, ref.stderr], rtol=1e-9)


def test_extrapolation_of_a_clean_ramp_is_exact():
    # w = w0 + s t reaches the limit L at (L - w0)/s (algebra); both signs of drift
    t = np.arange(30_000) * 1e-3
    for w0, s in ((10.0, 2.0), (-5.0, -3.5)):
        d = fit_drift(t, w0 + s * t)
        assert_allclose(runaway_time_s(d, limit_rad_s=250.0), (math.copysign(250.0, s) - w0) / s, rtol=1e-9)
    # beyond the horizon: counted as no drift
    d = fit_drift(t, 10.0 + 0.01 * t)
    assert runaway_time_s(d, limit_rad_s=250.0, horizon_s=6000.0) is None
    assert_allclose(runaway_time_s(d, limit_rad_s=250.0), 24000.0, rtol=1e-9)


def test_settled_or_noisy_wheel_has_no_drift():
    rng = np.random.default_rng(5)
    t = np.arange(60_000) * 1e-3
    # settling to an offset with a 2 s time constant, plus noise: the last third is flat
    settling = -40.0 * (1.0 - np.exp(-t / 2.0)) + 2.0 * rng.standard_normal(t.size)
    d = fit_drift(t, settling)
    assert abs(d.slope_rad_s2) <= NO_DRIFT_Z * d.slope_se_rad_s2
    assert runaway_time_s(d, limit_rad_s=250.0) is None
    assert_allclose(d.mean_rad_s, -40.0, atol=0.1)


def test_fit_rejects_a_window_too_short():
    with pytest.raises(ValueError):
        fit_drift(np.arange(30.0), np.zeros(30))


# ----------------------------------------------------------------------------- the predicted steady state

def _quiet_lqr(delay="0 ms"):
    """The fixture with LQR, exact sensors and no dry friction: the linear model's own conditions."""
    return _scenario(strategy={"kind": "lqr"}, sensors={"rate": "500 Hz", "delay": delay, "angle": {"bias": "1 deg"},
                                                        "rate_gyro": {}})[1]


def test_lqr_offset_matches_the_closed_loop_dc_gain():
    # final-value theorem on the discrete loop x+ = (Ad - Bd K) x - Bd K[0] b (Franklin, Powell &
    # Workman, Digital Control of Dynamic Systems, final value theorem; section from memory):
    # lim x = C (I - Acl)^-1 Bb b = python-control's dcgain of that system (reference library)
    import control
    sc = _quiet_lqr()
    dev = Device.from_scenario(sc)
    law = sc.strategy.build(dev, rng=np.random.default_rng(0))
    Ad, Bd, K = law.design.Ad, law.design.Bd, law.design.K_discrete.reshape(1, 3)
    loop = control.ss(Ad - Bd @ K, -Bd * K[0, 0], np.eye(3), np.zeros((3, 1)), law.design.period_s)
    b = sc.sensors.angle.bias
    expected = np.asarray(control.dcgain(loop)).ravel() * b
    got = predict_bias_response(dev, sc.strategy, bias_rad=b)
    assert got.kind == "offset"
    assert_allclose([got.angle_rad, got.wheel_speed_rad_s], expected[[0, 2]], rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("delay", ["0 ms", "4 ms"])
def test_simulated_lqr_offset_matches_the_final_value(delay):
    # the simulated wheel settles where the final-value theorem says (with a sensor delay the law
    # runs through its predictor; the prediction uses the same folded gains). 0.1% covers the
    # engine's nonlinear terms and the fixed-step integration (our choice of tolerance).
    sc = _quiet_lqr(delay)
    pred = predict_bias_response(Device.from_scenario(sc), sc.strategy, bias_rad=sc.sensors.angle.bias)
    hold = with_trial(sc, duration=30.0, start={"angle": 0.0, "rate": 0.0, "wheel_speed": 0.0}, pushes=[])
    result = run_trial(hold)
    assert result.outcome == "balanced"
    wheel = result.trace.view("wheel_speed")
    assert_allclose(np.mean(wheel[-5000:]), pred.wheel_speed_rad_s, rtol=1e-3)
    assert abs(pred.wheel_speed_rad_s) > 10.0   # a real offset, not a trivial zero


def test_angle_only_pid_ramp_matches_the_simulated_drift():
    # the linear model's steady ramp (derived in sim.studies.runaway._pid_ramp) against the simulated slope
    # before the fall; 1% covers the sensor noise of the encoder-free sensors (our choice of tolerance)
    raw, sc = _scenario()
    dev = Device.from_scenario(sc)
    hold = runaway_hold(sc, bias_rad=sc.sensors.angle.bias, seed=1)
    pred = hold["prediction"]
    assert pred.kind == "ramp"
    # the uncorrected estimate -mbar g b / I_w (common practice, no source) is the floor of the ramp
    assert abs(pred.wheel_accel_rad_s2) > dev.gravity_torque_coeff_n_m * sc.sensors.angle.bias / dev.I_w_kg_m2
    assert_allclose(hold["drift"].slope_rad_s2, pred.wheel_accel_rad_s2, rtol=0.01)


# ----------------------------------------------------------------------------- the criterion in check

def test_bias_ends_come_from_the_tolerance_band():
    _, sc = _scenario()
    assert_allclose(bias_ends(sc), np.radians([0.4, 0.6]), rtol=1e-9)
    # no angle-bias entry: the tolerances module's default band (0.5 deg) around the own bias
    _, sc = _scenario(tolerances={"motor.resistance": "5%"})
    assert_allclose(bias_ends(sc), np.radians([0.0, 1.0]), atol=1e-12)


def test_nominal_creeper_runs_away_after_tens_of_seconds():
    _, sc = _scenario()
    hold = runaway_hold(sc, bias_rad=sc.sensors.angle.bias, seed=4)
    assert hold["outcome"] == "fell" and 10.0 < hold["fell_at_s"] < 60.0
    assert hold["peak_wheel_speed_rad_s"] > 0.8 * Device.from_scenario(sc).no_load_speed_rad_s


def _check(tmp_path, raw, name):
    path = tmp_path / f"{name}.yaml"
    path.write_text(yaml.safe_dump(raw))
    out = tmp_path / name
    code = main(["check", str(path), "--out", str(out), "--trials", "4", "--workers", "1"])
    return code, json.loads((out / "verdict.json").read_text()), (out / "report.md").read_text()


def test_check_fails_a_slow_runaway_through_the_new_criterion(tmp_path):
    code, v, report = _check(tmp_path, CREEPER, "pid")
    crit = {c["name"]: c for c in v["criteria"]}
    runaway = crit["wheel_runaway_time_s"]
    assert code == 1 and not v["passed"]
    assert not runaway["passed"] and runaway["value"] < runaway["limit"] == 600.0
    assert "bias_drift" in runaway["note"] and "unbounded wheel acceleration" in runaway["note"]
    # the 10 s trial, the 5 s hold and the pushes alone would have passed it
    assert [n for n, c in crit.items() if not c["passed"]] == ["wheel_runaway_time_s"]
    assert "Why the wheel runs away" in report
    assert {h["predicted"] for h in v["runaway_holds"]} == {"ramp"}


def test_same_device_with_lqr_passes_the_criterion(tmp_path):
    raw = copy.deepcopy(CREEPER)
    raw["strategy"] = {"kind": "lqr"}
    code, v, report = _check(tmp_path, raw, "lqr")
    runaway = next(c for c in v["criteria"] if c["name"] == "wheel_runaway_time_s")
    assert runaway["passed"] and runaway["value"] is None
    assert "steady wheel offset" in runaway["note"]
    assert "Why the wheel runs away" not in report
    assert "| wheel_runaway_time_s | none (settles) | 600 s | pass |" in report
    for h in v["runaway_holds"]:
        # the simulated mean wheel speed near the predicted offset; 5% covers noise and dry friction
        assert_allclose(h["mean_wheel_speed_rad_s"], h["predicted_wheel_speed_rad_s"], rtol=0.05)


def test_fall_in_a_hold_gives_zero(tmp_path):
    # a hold too long for the creeper: a fall during it gives value 0 and a note, whatever run_time
    _, sc = _scenario(requirements={"min_push": "2 mN*m*s", "hold_time": "40 s", "run_time": "5 s"})
    dev = Device.from_scenario(sc)
    holds = [runaway_hold(sc, bias_rad=b, seed=4) for b in bias_ends(sc)]
    c = runaway_criterion(sc, dev, holds)
    assert c["value"] == 0.0 and not c["passed"] and "fell at" in c["note"]


def test_a_hold_too_short_to_measure_is_bad_input(tmp_path, capsys):
    raw = copy.deepcopy(CREEPER)
    raw["requirements"] = {"hold_time": "0.5 s"}
    path = tmp_path / "short.yaml"
    path.write_text(yaml.safe_dump(raw))
    assert main(["check", str(path), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "short.yaml" in err[0] and "requirements.hold_time" in err[0]
    assert not (tmp_path / "out").exists()


def test_sweep_judges_the_runaway_column(tmp_path):
    import csv
    path = tmp_path / "creeper.yaml"
    path.write_text(yaml.safe_dump(CREEPER))
    out = tmp_path / "sweep"
    main(["sweep", str(path), "--vary", "strategy.kind=pid,lqr", "--out", str(out), "--workers", "1"])
    rows = {r["strategy.kind"]: r for r in csv.DictReader((out / "results.csv").open())}
    assert float(rows["pid"]["wheel_runaway_time_s"]) == 0.0
    assert "wheel runaway" in rows["pid"]["fail_reasons"].split(";")
    assert rows["lqr"]["wheel_runaway_time_s"] == "" and "wheel runaway" not in rows["lqr"]["fail_reasons"]


def test_a_wheel_still_settling_at_the_end_of_a_short_hold_is_not_a_runaway():
    """An exponential approach to an offset, w = w_inf (1 - exp(-t / tau)): its slope over the last
    third is exp(-T/3 / tau) of the middle third's (first-order response), so a hold of a few time
    constants reads as settling; a steady ramp keeps its slope (ratio 1) and stays a drift."""
    from sim.studies.runaway import SETTLING_RATIO, fit_drift, settling
    rng = np.random.default_rng(4)
    t = np.arange(0.0, 5.0, 0.001)
    noise = rng.normal(0.0, 0.05, t.size)
    k = 2 * t.size // 3
    for tau, want in ((0.8, True), (40.0, False)):
        w = 60.0 * (1.0 - np.exp(-t / tau)) + noise
        got = settling(fit_drift(t[:k], w[:k], fraction=0.5), fit_drift(t, w))
        ratio = np.exp(-(5.0 / 3.0) / tau)
        assert got == (ratio < SETTLING_RATIO) == want
    ramp = -12.0 * t + noise
    assert not settling(fit_drift(t[:k], ramp[:k], fraction=0.5), fit_drift(t, ramp))
